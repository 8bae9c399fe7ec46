"""Frequency connectedness: the generalized decomposition split by cycle length (Baruník–Křehlík).

A VAR's frequency response Ψ(e^{−iω}) = Σ_h Φ_h e^{−iωh} says at which cycle lengths a shock to
one series reaches another. Baruník & Křehlík (2018) split the generalized forecast-error
variance decomposition over frequency bands d ⊂ (−π, π]:

    θ_d[j, k] = (1/2π) ∫_d σ_kk^{-1} |(Ψ(e^{−iω}) Σ)_{jk}|² dω / (1/2π) ∫_{−π}^{π} (Ψ Σ Ψ*)_{jj} dω
                                                                         (BK 2018, eqs. 10–11)
    θ̃_d[j, k] = θ_d[j, k] / Σ_k θ_∞[j, k],     θ_∞ = Σ_d θ_d             (BK 2018, eq. 12)

so the band tables of a partition add up to the row-normalised total table (rows sum to one).
Two connectedness readings of each band (BK 2018, eqs. 13–14):

- **frequency** ("band-share-weighted"): 100 · Σ_{j≠k} θ̃_d[j, k] / n, the band's contribution to
  the overall index; the bands' values add up to the Diebold–Yilmaz total.
- **within-band**: 100 · (Σ θ̃_d − Tr θ̃_d) / Σ θ̃_d, connectedness of the variance that lives in
  band d alone; frequency = within × Γ(d) with the band share Γ(d) = Σ θ̃_d / n.

Directional measures follow the spillover-table convention of `connectedness` applied to each band
table (from_i = Σ_{j≠i} 100·θ̃_d[i, j], to_j = Σ_{i≠j} 100·θ̃_d[i, j], net = to − from), and their
within-band versions are divided by Γ(d), so that in both readings total = mean(from_others).

Bands are given as cycle lengths in observations, (P_lo, P_hi] with P = 2π/ω: a cycle of period
P belongs to the band with P_lo < P ≤ P_hi, i.e. to angular frequencies [2π/P_hi, 2π/P_lo);
P = ∞ (ω = 0) to the band whose P_hi is ∞. Periods
below 2 do not exist in sampled data (ω ≤ π), so the shortest band's P_lo may be anything ≤ 2.
For daily data the default ``((1, 5), (5, 20), (20, inf))`` reads as "within a week", "a week to
a month", "longer than a month" (common practice, in business days).

**Numerics.** The MA sequence is truncated after `truncation` terms (Φ_0..Φ_{H−1}, H =
`truncation`) and its Fourier transform taken by FFT on the grid ω_k = 2πk/N, k = 0..N−1,
N = `grid` ≥ H. Because N ≥ H, the discrete Parseval identity holds exactly,
(1/N) Σ_k |Σ_h a_h e^{−iω_k h}|² = Σ_h a_h², so the bands add up *exactly* (to rounding) to the
Diebold–Yilmaz table at horizon H. What truncation and gridding leave:

- truncation: the omitted tail Σ_{h≥H} ‖Φ_h‖² is O(ρ^{2H}) for companion spectral radius ρ;
  with H = 100 and ρ ≤ 0.9 it is below 1e-8 relative (tests pin the agreement with
  `spectral_density`, the untruncated spectrum, on the same grid);
- grid: each band integral is a midpoint-rule sum over the grid cells in the band, a cell on a
  band edge split between its two bands by length (`band_weights`). Over the whole circle the
  rule is exact for the trigonometric polynomial |Σ_{h<H} a_h e^{−iωh}|² (degree H−1 < N); the
  only error is at band edges, second order in the cell width 2π/N. The default grid
  N = max(8·H, 512) keeps it below 0.01 percentage points of a band entry in the tests'
  processes (measured 1e-5 to 3e-3) (pinned against the exact band integrals Σ_{h,l} a_h a_l ∫_d cos(ω(h−l)) dω).

That grid sum is the definition (`frequency_kernel`). The kernel of `frequency_connectedness`,
the rolling engine and the TVP filter, `band_kernel`, computes the same sums without a spectrum: for one entry's sequence a_h = (Φ_h Σ
D_σ^{-1/2})_{jk}, Σ_j w_d(j) |Σ_h a_h e^{−iω_j h}|² = a' T_d a with the symmetric Toeplitz
T_d[h, l] = Σ_j w_d(j) cos(ω_j (h − l)); Σ_d T_d = N·I (Parseval), and each T_d / N has few
eigenvalues that are not negligible (about H·|d|/π near one, |d| the band's angular width,
plus a transition of O(log H · log 1/ε) per band edge). So a band sum is Σ_r λ_r (v_r'a)²
over the eigenpairs with λ_r > 1e-14 (dropping the rest moves a fraction by at most 1e-14), the
band with most eigenpairs left (the widest) is the remainder N‖a‖² minus the others, and the even/odd symmetry of the
eigenvectors halves the products (`band_projection`). Tests pin it to `frequency_kernel` at 1e-12.

Shapes: band tables (d, n, n) indexed [band, variable, shock]; directional measures (d, n).

References
----------
Baruník, J. and Křehlík, T. (2018). Measuring the frequency dynamics of financial connectedness
    and systemic risk. Journal of Financial Econometrics 16(2), 271–296: eqs. (10)–(14).
Diebold, F. X. and Yilmaz, K. (2012). International Journal of Forecasting 28, 57–66.
Pesaran, M. H. and Shin, Y. (1998). Economics Letters 58, 17–29, eq. (11).
"""

from __future__ import annotations

import functools
import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from ._decompose import spillover_measures
from ._responses import ma_kernel
from ._validate import InvalidInputError, VARLike, check_int, check_model, readonly

#: Default bands for daily data, in observations (business days): a week, a month, longer.
DEFAULT_BANDS: tuple[tuple[float, float], ...] = ((1.0, 5.0), (5.0, 20.0), (20.0, math.inf))

#: Default MA truncation (terms Φ_0..Φ_{H−1}) for the spectral part.
DEFAULT_TRUNCATION = 100


def default_grid(truncation: int) -> int:
    """Grid size N = max(8·H, 512): N ≥ H keeps Parseval exact; 8·H keeps band edges fine."""
    return max(8 * truncation, 512)


# ---------------------------------------------------------------------------------------------
# bands
# ---------------------------------------------------------------------------------------------


def check_bands(bands: Any, arg: str = "bands") -> tuple[tuple[float, float], ...]:
    """Validate a partition of cycle lengths ((P_lo, P_hi], ...) covering (0, π]; return floats."""
    try:
        pairs = tuple((float(lo), float(hi)) for lo, hi in bands)
    except (TypeError, ValueError) as exc:
        msg = (
            f"`{arg}` must be a sequence of (shortest, longest) cycle lengths in observations, "
            f"e.g. [(1, 5), (5, 20), (20, inf)]; got {bands!r}"
        )
        raise InvalidInputError(msg) from exc
    if not pairs:
        msg = f"`{arg}` is empty; give at least one band, e.g. [(1, inf)]"
        raise InvalidInputError(msg)
    fix = "bands must run from a period <= 2 up to inf, each starting where the last ended"
    for i, (lo, hi) in enumerate(pairs):
        if not (lo > 0 and hi > lo) or math.isnan(lo) or math.isnan(hi):
            msg = f"`{arg}`[{i}] = {(lo, hi)!r} must satisfy 0 < shortest < longest; {fix}"
            raise InvalidInputError(msg)
        if i and lo != pairs[i - 1][1]:
            msg = (
                f"`{arg}`[{i}] starts at {lo!r} but `{arg}`[{i - 1}] ends at {pairs[i - 1][1]!r}; "
                f"{fix}"
            )
            raise InvalidInputError(msg)
    if pairs[0][0] > 2:
        msg = (
            f"`{arg}` leaves cycles of period 2..{pairs[0][0]!r} (the highest frequencies) "
            f"uncovered; start the first band at 1 or 2 ({fix})"
        )
        raise InvalidInputError(msg)
    if not math.isinf(pairs[-1][1]):
        msg = (
            f"`{arg}` leaves cycles longer than {pairs[-1][1]!r} (the lowest frequencies) "
            f"uncovered; end the last band at inf ({fix})"
        )
        raise InvalidInputError(msg)
    return pairs


def band_angles(bands: Sequence[tuple[float, float]]) -> np.ndarray:
    """(d, 2) angular ranges [ω_lo, ω_hi) = [2π/P_hi, min(2π/P_lo, π)] of each band."""
    return np.array([[2 * np.pi / hi, min(2 * np.pi / lo, np.pi)] for lo, hi in bands])


def band_weights(bands: Sequence[tuple[float, float]], grid: int) -> np.ndarray:
    """(d, N//2 + 1) weights of the non-negative grid frequencies ω_k = 2πk/N in each band (rfft bins).

    Bin k stands for the cells of width Δ = 2π/N around +ω_k and −ω_k; its weight in band
    [ω_lo, ω_hi] is the part of those cells, folded onto [0, π], that falls inside the band:
    w_b(k) = 2 |[max(ω_k − Δ/2, 0), min(ω_k + Δ/2, π)] ∩ [ω_lo, ω_hi]| / Δ. A bin inside a band
    weighs 2 (k = 0 and, for even N, k = N/2 weigh 1); a bin on an edge is split between its two
    bands, which makes the edge error second order in Δ. Every bin's weights add up to its
    multiplicity, and all weights to N, so the bands still add up exactly (discrete Parseval).
    """
    delta = 2 * np.pi / grid
    omega = delta * np.arange(grid // 2 + 1)
    cell_lo = np.maximum(omega - delta / 2, 0.0)
    cell_hi = np.minimum(omega + delta / 2, np.pi)
    out = np.zeros((len(bands), omega.size))
    for b, (w_lo, w_hi) in enumerate(band_angles(bands)):
        lo = 0.0 if b == len(bands) - 1 else w_lo  # the longest band reaches ω = 0
        hi = np.pi if b == 0 else w_hi  # the shortest band reaches ω = π
        out[b] = 2 * np.clip(np.minimum(cell_hi, hi) - np.maximum(cell_lo, lo), 0.0, None) / delta
    return out


# ---------------------------------------------------------------------------------------------
# kernel (leading batch axes allowed)
# ---------------------------------------------------------------------------------------------


def frequency_response_kernel(coefs: np.ndarray, truncation: int, grid: int) -> np.ndarray:
    """(..., N//2 + 1, n, n) complex Ψ(e^{−iω_k}) = Σ_{h<H} Φ_h e^{−iω_k h}, ω_k = 2πk/N (rfft)."""
    return np.fft.rfft(ma_kernel(coefs, truncation - 1), n=grid, axis=-3)


def ma_terms(coefs: np.ndarray, start: np.ndarray, terms: int) -> np.ndarray:
    """(D, terms, n, m) Φ_h B, h < terms, from coefs (D, p, n, n) and B (D, n, m) (a view).

    Φ_0 B = B,  Φ_h B = Σ_{j=1}^{min(h,p)} A_j Φ_{h−j} B   (Φ_h = Σ_j A_j Φ_{h−j}, Lütkepohl 2005
    eq. 2.3.9, the A_j commuting form), one batched (n × np)(np × m) product per step.
    """
    D, p, n, _ = coefs.shape
    m = start.shape[-1]
    A = np.concatenate(list(np.moveaxis(coefs[:, ::-1], -3, 0)), axis=-1)  # [A_p … A_1]
    buf = np.zeros((D, terms + p - 1, n, m))  # Φ_h B at index h + p − 1; zeros stand for h < 0
    buf[:, p - 1] = start
    for h in range(1, terms):
        lagged = buf[:, h - 1 : h + p - 1].reshape(D, p * n, m)  # [Φ_{h−p}B; …; Φ_{h−1}B] (view)
        np.matmul(A, lagged, out=buf[:, h + p - 1])
    return buf[:, p - 1 :]


def scaled_ma(coefs: np.ndarray, sigma: np.ndarray, terms: int) -> np.ndarray:
    """(D, terms, n, n) a_h = Φ_h Σ D_σ^{-1/2}, h < terms, from coefs (D, p, n, n), Σ (D, n, n).

    `ma_terms` started at a_0 = Σ D_σ^{-1/2}.
    a_h[i, k]² = σ_kk^{-1} (e_i'Φ_hΣe_k)², the generalized FEVD term (Pesaran–Shin eq. 11).
    """
    sd = np.sqrt(np.diagonal(sigma, axis1=-2, axis2=-1))
    return ma_terms(coefs, sigma / sd[:, None, :], terms)


@dataclass(frozen=True, eq=False)
class BandProjection:
    """Low-rank quadratic forms giving the grid band sums of an MA sequence (`band_projection`).

    Attributes
    ----------
    terms : H, the length of the sequences it applies to.
    rest : the band obtained as the remainder ‖a‖² − Σ_{others} (the one with most eigenvectors).
    others : the other bands, in the order of the rows of `even_weights` / `odd_weights`.
    even, odd : (R_e, ⌈H/2⌉), (R_o, ⌊H/2⌋) kept eigenvectors of the bands in `others`, as rows
        acting on the folded sequences [a_h + a_{H−1−h}; a_mid] and [a_h − a_{H−1−h}], h < ⌊H/2⌋.
    even_weights, odd_weights : (d − 1, R_e), (d − 1, R_o) their eigenvalues λ_r, placed in the
        row of the band each eigenvector belongs to (zero elsewhere).
    """

    terms: int
    rest: int
    others: tuple[int, ...]
    even: np.ndarray
    odd: np.ndarray
    even_weights: np.ndarray
    odd_weights: np.ndarray


#: `band_projection` drops eigenvalues of T_d / N at or below this; each dropped one moves a band
#: fraction θ̃_d[j, k] by at most this much (module docstring).
EIGEN_FLOOR = 1e-14


def band_projection(weights: np.ndarray, grid: int, terms: int) -> BandProjection:
    """The band sums of `frequency_kernel` as quadratic forms of the MA sequence (cached).

    For one entry's sequence a_h (h < H) and its transform F(ω) = Σ_h a_h e^{−iωh}, the grid-N
    band sum is a quadratic form with a symmetric Toeplitz matrix:

        S_d = Σ_j w_d(j) |F(ω_j)|² = a' T_d a,   T_d[h, l] = Σ_j w_d(j) cos(ω_j (h − l)),

    ω_j = 2πj/N over the rfft bins j of `band_weights`. T_d is positive semi-definite (w ≥ 0) and
    Σ_d T_d = N·I (discrete Parseval, N ≥ H). With T_d / N = Σ_r λ_r v_r v_r' (λ_r ∈ [0, 1]),
    S_d / N = Σ_r λ_r (v_r' a)². Eigenvalues λ_r ≤ `EIGEN_FLOOR` (1e-14) are dropped: each moves
    S_d / N by at most 1e-14·‖a‖², i.e. a row-normalised fraction θ̃_d[j, k] by at most 1e-14 —
    the size of the rounding in T_d itself. The spectra of such band-limiting matrices have about
    H·|d|/π eigenvalues near one (|d| the band's angular width) and fall off super-exponentially
    after a transition of O(log H · log 1/ε) per band edge: 22 and 54 of 100 remain for the
    periods (20, ∞] and (5, 20] at N = 800 (where H·|d|/π is 10 and 30). The band with most
    vectors left is not projected at all: S_rest / N = ‖a‖² − Σ_{others} S_d / N.

    A symmetric Toeplitz matrix commutes with the reversal h ↦ H − 1 − h, so its eigenvectors
    can be taken even or odd; each is found on the folded sequences a_h ± a_{H−1−h}, h < H/2
    (the middle term joins the even ones for odd H), which halves the products.
    """
    w = np.ascontiguousarray(weights, dtype=np.float64)
    return _band_projection(w.tobytes(), w.shape, int(grid), int(terms))


@functools.lru_cache(maxsize=16)
def _band_projection(raw: bytes, shape: tuple[int, ...], grid: int, terms: int) -> BandProjection:
    weights = np.frombuffer(raw).reshape(shape)
    H, half = terms, terms // 2
    m = np.arange(H)
    # c_d(m) = Σ_j w_d(j) cos(2πjm/N), the argument reduced mod N before scaling
    c = weights @ np.cos(2 * np.pi * (np.outer(np.arange(shape[1]), m) % grid) / grid)
    lag = np.abs(m[:, None] - m[None, :])
    fold_even = np.zeros((H, H - half))  # orthonormal bases of the even and odd sequences
    fold_odd = np.zeros((H, half))
    r = np.arange(half)
    fold_even[r, r] = fold_even[H - 1 - r, r] = fold_odd[r, r] = math.sqrt(0.5)
    fold_odd[H - 1 - r, r] = -math.sqrt(0.5)
    if H % 2:
        fold_even[half, half] = 1.0
    scale_even = np.abs(fold_even).max(axis=0)  # folded sums [a_h + a_{H−1−h}; a_mid] → basis
    parts = []
    for cd in c:
        T = cd[lag] / grid
        band = []
        for fold, scale in ((fold_even, scale_even), (fold_odd, np.full(half, math.sqrt(0.5)))):
            lam, vec = np.linalg.eigh(fold.T @ T @ fold)
            keep = lam > EIGEN_FLOOR
            band.append((lam[keep], (vec[:, keep] * scale[:, None]).T))
        parts.append(band)
    ranks = [sum(lam.size for lam, _ in band) for band in parts]
    rest = int(np.argmax(ranks))
    others = tuple(b for b in range(len(parts)) if b != rest)
    out = []
    for side, width in ((0, H - half), (1, half)):
        rows = [parts[b][side][1] for b in others]
        vecs = np.concatenate(rows) if rows else np.zeros((0, width))
        lam_rows = np.zeros((len(others), vecs.shape[0]))
        at = 0
        for i, b in enumerate(others):
            lam = parts[b][side][0]
            lam_rows[i, at : at + lam.size] = lam
            at += lam.size
        out += [np.ascontiguousarray(vecs), lam_rows]
    readonly(*out)
    return BandProjection(H, rest, others, out[0], out[2], out[1], out[3])


def band_projections(a: np.ndarray, proj: BandProjection) -> tuple[np.ndarray, np.ndarray]:
    """(y_even (D, R_e, m), y_odd (D, R_o, m)): the sequences a (D, H, m) folded (a_h ± a_{H−1−h})
    and projected on the kept eigenvectors of `band_projection` (one product per entry and fold).
    The band sums are Σ_r λ_r y_r² (`band_sums_of`); being linear in a, the projections of a
    sequence multiplied by a matrix are the projections multiplied by it (`_joint.band_joint_kernel`).
    """
    D, H, m = a.shape
    half = H // 2
    head, tail = a[:, :half], a[:, H - 1 : H - 1 - half : -1]
    even = np.empty((D, H - half, m))
    np.add(head, tail, out=even[:, :half])
    if H % 2:
        even[:, half] = a[:, half]
    return proj.even @ even, proj.odd @ np.subtract(head, tail)


def band_sums_of(
    y_even: np.ndarray, y_odd: np.ndarray, norm2: np.ndarray, proj: BandProjection
) -> np.ndarray:
    """(D, d, m) band sums S_d / N from the projections of `band_projections` (squared in place)
    and each sequence's ‖a‖² (D, m): Σ_r λ_r y_r² for the projected bands, the rest by remainder."""
    np.square(y_even, out=y_even)
    np.square(y_odd, out=y_odd)
    others = proj.even_weights @ y_even + proj.odd_weights @ y_odd  # (D, d − 1, m)
    out = np.empty((norm2.shape[0], len(proj.others) + 1, norm2.shape[-1]))
    out[:, list(proj.others)] = others
    out[:, proj.rest] = norm2 - others.sum(axis=1)
    return out


def band_sums(a: np.ndarray, proj: BandProjection) -> np.ndarray:
    """(D, d, m) grid band sums S_d / N of the sequences a (D, H, m) along axis 1 (`band_projection`).

    Each of the D·m sequences is folded (a_h ± a_{H−1−h}), projected on the kept eigenvectors,
    squared and weighted by their eigenvalues; the remaining band is ‖a‖² minus the others. One
    matrix product per batch entry and fold, so an entry's numbers do not depend on the batch.
    """
    y_even, y_odd = band_projections(a, proj)
    return band_sums_of(y_even, y_odd, np.einsum("dhm,dhm->dm", a, a), proj)


#: Working memory (bytes of MA terms) per chunk of models in `band_kernel`: small enough that a
#: chunk's a_h stay in cache between the recursion and the projections.
BAND_CHUNK_BYTES = 4 * 2**20


def band_kernel(
    coefs: np.ndarray, sigma: np.ndarray, truncation: int, grid: int, weights: np.ndarray
) -> np.ndarray:
    """(D, d, n, n) the same band tables as `frequency_kernel`, for coefs (D, p, n, n), Σ (D, n, n).

    One scaled MA recursion a_h = Φ_h Σ D_σ^{-1/2} (h < H, `scaled_ma`), then the grid-N band sums
    of every entry's sequence as low-rank quadratic forms (`band_projection`, `band_sums`) instead
    of its Fourier transform: the same numbers to rounding (tests: 1e-12), no spectrum per model.
    Models are taken in chunks of `BAND_CHUNK_BYTES`; each model's arithmetic is its own, so
    its numbers do not depend on the chunking or on the other models passed. This is the kernel
    of `frequency_connectedness`, the rolling engine and the TVP filter; `frequency_kernel` stays
    as the definition it is tested by.
    """
    proj = band_projection(weights, grid, truncation)
    D, p, n, _ = coefs.shape
    d = weights.shape[0]
    out = np.empty((D, d, n, n))
    step = max(1, BAND_CHUNK_BYTES // (8 * n * n * (truncation + p)))
    for lo in range(0, D, step):
        a = scaled_ma(coefs[lo : lo + step], sigma[lo : lo + step], truncation)
        band = band_sums(a.reshape(a.shape[0], truncation, n * n), proj).reshape(-1, d, n, n)
        out[lo : lo + step] = band / band.sum(axis=(-3, -1), keepdims=True)
    return out


def frequency_kernel(
    coefs: np.ndarray, sigma: np.ndarray, truncation: int, grid: int, weights: np.ndarray
) -> np.ndarray:
    """(..., d, n, n) band tables θ̃_d (fractions; summed over d, rows sum to one).

    S_d[j, k] = Σ_{ω_k ∈ d} w_k σ_kk^{-1} |(Ψ(e^{−iω_k}) Σ)_{jk}|²   (rfft of Φ_h Σ, h < H)
    θ̃_d[j, k] = S_d[j, k] / Σ_{d', k'} S_{d'}[j, k']                 (BK 2018 eqs. 10–12)
    The common denominator (1/2π)∫(ΨΣΨ*)_jj of eq. 10 cancels in the row normalisation of eq. 12.
    """
    spectrum = frequency_response_kernel(coefs, truncation, grid) @ sigma[..., None, :, :]
    power = spectrum.real**2 + spectrum.imag**2
    power /= np.diagonal(sigma, axis1=-2, axis2=-1)[..., None, None, :]  # σ_kk^{-1}
    band = np.einsum("dk,...kij->...dij", weights, power)
    return band / band.sum(axis=(-3, -1), keepdims=True)


# ---------------------------------------------------------------------------------------------
# public
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False, repr=False)
class FrequencyConnectedness:
    """Connectedness by frequency band (Baruník & Křehlík 2018), in percent. Arrays read-only.

    Attributes
    ----------
    bands : ((P_lo, P_hi], ...) cycle lengths in observations, shortest first.
    angles : (d, 2) the same bands as angular frequencies [2π/P_hi, 2π/P_lo] ∩ [0, π].
    tables : (d, n, n) 100·θ̃_d [band, variable, shock]; summed over bands, rows sum to 100.
    band_share : (d,) Γ(d) = Σ θ̃_d / n, the share of forecast-error variance in each band.
    total, from_others, to_others, net : (d,), (d, n) ×3 — frequency ("band-share-weighted")
        measures; summed over bands they give the Diebold–Yilmaz measures at horizon
        `truncation`.
    pairwise_net : (d, n, n) [b, i, j] = tables[b, j, i] − tables[b, i, j].
    within_total, within_from_others, within_to_others, within_net : (d,), (d, n) ×3 —
        within-band measures, the frequency ones divided by Γ(d) (NaN for an empty band).
    truncation, grid : MA terms used and FFT grid size N.   names : series names.
    """

    bands: tuple[tuple[float, float], ...]
    angles: np.ndarray
    tables: np.ndarray
    band_share: np.ndarray
    total: np.ndarray
    from_others: np.ndarray
    to_others: np.ndarray
    net: np.ndarray
    pairwise_net: np.ndarray
    within_total: np.ndarray
    within_from_others: np.ndarray
    within_to_others: np.ndarray
    within_net: np.ndarray
    truncation: int
    grid: int
    names: tuple[str, ...]

    def __repr__(self) -> str:
        parts = ", ".join(
            f"{_label(b)}: {t:.2f}%" for b, t in zip(self.bands, self.total, strict=True)
        )
        return f"FrequencyConnectedness({parts}; truncation={self.truncation}, grid={self.grid})"


def _label(band: tuple[float, float]) -> str:
    lo, hi = band
    return f"({lo:g}, {'inf' if math.isinf(hi) else f'{hi:g}'}]"


def frequency_measures(tables: np.ndarray) -> dict[str, np.ndarray]:
    """Frequency and within-band measures from band tables (..., d, n, n) in percent."""
    n = tables.shape[-1]
    m = spillover_measures(tables)
    share = tables.sum(axis=(-2, -1)) / (100.0 * n)  # Γ(d)
    with np.errstate(invalid="ignore", divide="ignore"):
        scale = np.where(share > 0, 1.0 / share, np.nan)
    return {
        "band_share": share,
        "total": m["total"],
        "from_others": m["from_others"],
        "to_others": m["to_others"],
        "net": m["net"],
        "pairwise_net": m["pairwise_net"],
        "within_total": m["total"] * scale,
        "within_from_others": m["from_others"] * scale[..., None],
        "within_to_others": m["to_others"] * scale[..., None],
        "within_net": m["net"] * scale[..., None],
    }


def frequency_connectedness(
    fit: VARLike,
    *,
    bands: Sequence[tuple[float, float]] = DEFAULT_BANDS,
    truncation: int = DEFAULT_TRUNCATION,
    grid: int | None = None,
) -> FrequencyConnectedness:
    """Generalized connectedness split by frequency band (Baruník & Křehlík 2018), in percent.

    Parameters
    ----------
    fit : `VARFit` or `VARProcess`.
    bands : partition of cycle lengths in observations, ((P_lo, P_hi], ...) from a period ≤ 2 to
        inf, shortest first; default ((1, 5), (5, 20), (20, inf)) for daily data.
    truncation : H, MA terms Φ_0..Φ_{H−1} in the frequency response (default 100). The bands add
        up exactly to `connectedness(fit, H)` (Diebold–Yilmaz at horizon H).
    grid : FFT size N >= H (default max(8·H, 512)); see the module docstring for the error.

    Returns
    -------
    FrequencyConnectedness with tables (d, n, n) [band, variable, shock].
    """
    model = check_model(fit)
    H = check_int(truncation, "truncation", minimum=1)
    if grid is None:
        N = default_grid(H)
    else:
        N = check_int(grid, "grid", minimum=H, hint="the FFT grid needs N >= `truncation`")
    parts = check_bands(bands)
    weights = band_weights(parts, N)
    coefs, sigma = np.asarray(model.coefs), np.asarray(model.sigma_u)
    tables = 100.0 * band_kernel(coefs[None], sigma[None], H, N, weights)[0]
    m = frequency_measures(tables)
    angles = band_angles(parts)
    readonly(tables, angles, *m.values())
    return FrequencyConnectedness(
        bands=parts, angles=angles, tables=tables, band_share=m["band_share"],
        total=m["total"], from_others=m["from_others"], to_others=m["to_others"], net=m["net"],
        pairwise_net=m["pairwise_net"], within_total=m["within_total"],
        within_from_others=m["within_from_others"], within_to_others=m["within_to_others"],
        within_net=m["within_net"], truncation=H, grid=N, names=model.names,
    )  # fmt: skip

