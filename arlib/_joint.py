"""Joint connectedness: the share of a series' variance due to all other shocks together.

The generalized decomposition (Pesaran–Shin) shocks one series at a time and lets correlated
innovations come along; its rows do not sum to one and must be normalised, which distorts the
"from others" measure when shocks are correlated. Lastrapes & Wiesen (2021) instead shock all
other series *jointly*: the expected innovation given a shock δ to u_{−i} (all but i) is
Σ M_i (M_i' Σ M_i)^{-1} δ, with M_i the n × (n−1) selector of the other columns. The share of
series i's H-step forecast-error variance due to all other shocks jointly is

    J_i(H) = Σ_{h<H} e_i' Φ_h Σ M_i (M_i' Σ M_i)^{-1} M_i' Σ Φ_h' e_i / MSE_i(H),
    MSE_i(H) = Σ_{h<H} (Φ_h Σ Φ_h')_ii                             (Lastrapes & Wiesen 2021)

and it needs no normalisation. By the projection identity Σ = Σ M (M'ΣM)^{-1} M'Σ + (e_i e_i')
/ (Σ^{-1})_ii, the remainder is the variance of u_i orthogonal to all other innovations — the own
Cholesky shock of i ordered last — so

    J_i(H) = 1 − Σ_{h<H} (Φ_h)_ii² / ((Σ^{-1})_ii · MSE_i(H))

which is what the kernel computes (O(n²H) per model instead of n solves). With diagonal Σ,
J_i equals the generalized "from others" share. The joint total index is the mean,
J(H) = 100 · Σ_i J_i(H) / n ∈ [0, 100].

Pairwise and "to others": Lastrapes & Wiesen keep the generalized table's pattern across
transmitters and rescale each row so that its off-diagonal entries add up to J_i (our reading of
the paper, recalled from memory; the identities above are what the tests pin):

    table[i, j] = 100 · θ̃^g_ij · J_i / Σ_{k≠i} θ̃^g_ik  (j ≠ i),   table[i, i] = 100 (1 − J_i).

**By frequency band.** The definition carries over: J_i is a decomposition with a fixed impact
matrix, B_i = Σ M_i (M_i' Σ M_i)^{-1/2} (B_i B_i' = Σ M_i (M_i'ΣM_i)^{-1} M_i'Σ), so its numerator
is Σ_{h<H} ‖e_i' Φ_h B_i‖² and, by Parseval, splits over frequency like any decomposition built
from Ψ(e^{−iω}) = Σ_h Φ_h e^{−iωh} times a fixed matrix (the argument of Baruník & Křehlík 2018,
eqs. 10–12, which needs no orthogonality beyond that):

    J_i(d) = (1/2π) ∫_d ‖e_i' Ψ(e^{−iω}) B_i‖² dω / MSE_i(H)
           = (1/2π) ∫_d [(Ψ Σ Ψ*)_ii − |Ψ_ii(e^{−iω})|² / (Σ^{-1})_ii] dω / MSE_i(H),

the second line by the same projection identity frequency by frequency. The denominator is the
total-frequency MSE (no row normalisation: the bands' parts add up to J_i(H) exactly), so J_i(d)
is the band's contribution to the joint share; J_i(d) / Γ_i(d), with Γ_i(d) the share of i's
variance in band d, is the joint share *within* the band. With diagonal Σ both equal the
generalized band measures of `frequency_connectedness`. `joint_frequency_connectedness` computes
them on the grid and with the truncation of `frequency_connectedness` (same error statement).
The TVP filter's per-date joint shares are the time-domain J_i(H) of each date's B_t and Σ_t.

References
----------
Baruník, J. and Křehlík, T. (2018). Journal of Financial Econometrics 16(2), 271–296.
Lastrapes, W. D. and Wiesen, T. F. P. (2021). The joint spillover index. Economic Modelling 94,
    681–691.
Pesaran, M. H. and Shin, Y. (1998). Economics Letters 58, 17–29.
Diebold, F. X. and Yilmaz, K. (2012). International Journal of Forecasting 28, 57–66.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from ._decompose import fevd_kernel, spillover_measures
from ._frequency import (
    BAND_CHUNK_BYTES,
    DEFAULT_BANDS,
    DEFAULT_TRUNCATION,
    BandProjection,
    band_angles,
    band_kernel,
    band_projection,
    band_projections,
    band_sums,
    band_sums_of,
    band_weights,
    check_bands,
    default_grid,
    ma_terms,
    scaled_ma,
)
from ._responses import ma_kernel
from ._rolling_kernels import triangular_inverse
from ._validate import VARLike, check_int, check_model, readonly

# ---------------------------------------------------------------------------------------------
# kernels (leading batch axes allowed)
# ---------------------------------------------------------------------------------------------


#: Models per chunk in `joint_kernel` (its arrays stay in cache; the numbers do not depend on it).
JOINT_CHUNK = 256


def joint_kernel(coefs: np.ndarray, sigma: np.ndarray, horizon: int) -> np.ndarray:
    """(..., n) joint shares J_i(H) = 1 − Σ_{h<H} (Φ_h)_ii² / ((Σ^{-1})_ii · MSE_i(H)).

    In chunks of `JOINT_CHUNK` models: Φ_h by the recursion of `ma_terms`, and with the Cholesky
    factor Σ = LL', MSE_i(H) = Σ_{h<H} ‖e_i'Φ_h L‖² (one (Hn × n)(n × n) product per model) and
    (Σ^{-1})_ii = ‖L^{-1} e_i‖² (L^{-1} by forward substitution). Each model's arithmetic is its
    own, so its numbers do not depend on the chunking or the other models; a model whose Σ has
    no Cholesky factor (not numerically positive definite) gets the same formula through
    Σ^{-1} and Φ_h Σ Φ_h' instead.
    """
    *batch, p, n, _ = coefs.shape
    c = coefs.reshape(-1, p, n, n)
    s = np.broadcast_to(sigma, (*batch, n, n)).reshape(-1, n, n)
    out = np.empty((c.shape[0], n))
    for lo in range(0, c.shape[0], JOINT_CHUNK):
        sl = slice(lo, lo + JOINT_CHUNK)
        try:
            out[sl] = _joint_chunk(c[sl], s[sl], horizon)
        except np.linalg.LinAlgError:
            for i in range(lo, min(lo + JOINT_CHUNK, c.shape[0])):
                out[i] = _joint_one(c[i : i + 1], s[i : i + 1], horizon)
    return out.reshape(*batch, n)


def _joint_chunk(coefs: np.ndarray, sigma: np.ndarray, horizon: int) -> np.ndarray:
    """(D, n) J_i(H) of a chunk of models whose Σ all have a Cholesky factor."""
    D, _, n, _ = coefs.shape
    chol = np.linalg.cholesky(sigma)
    phi = ma_terms(coefs, np.broadcast_to(np.eye(n), sigma.shape), horizon)  # (D, H, n, n)
    b = (phi.reshape(D, horizon * n, n) @ chol).reshape(D, horizon, n, n)  # Φ_h L
    mse = np.einsum("dhik,dhik->di", b, b)
    own = np.einsum("dhii,dhii->di", phi, phi)
    inv = triangular_inverse(chol)  # L^{-1} by block forward substitution
    precision = np.einsum("dki,dki->di", inv, inv)  # (Σ^{-1})_ii = Σ_k (L^{-1})_ki²
    return 1.0 - own / (precision * mse)


def _joint_one(coefs: np.ndarray, sigma: np.ndarray, horizon: int) -> np.ndarray:
    """(1, n) J_i(H) of one model: through its Cholesky factor if it has one, else through Σ^{-1}."""
    try:
        return _joint_chunk(coefs, sigma, horizon)
    except np.linalg.LinAlgError:
        phi = ma_kernel(coefs, horizon - 1)  # (1, H, n, n)
        mse = np.einsum("...hij,...hij->...i", phi @ sigma[:, None], phi)
        own = np.einsum("...hii,...hii->...i", phi, phi)
        precision = np.diagonal(np.linalg.inv(sigma), axis1=-2, axis2=-1)
        return 1.0 - own / (precision * mse)


def joint_band_kernel(
    coefs: np.ndarray, sigma: np.ndarray, truncation: int, grid: int, weights: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """(joint, variance), each (..., d, n): J_i(d) and Γ_i(d) as fractions (grid of `band_kernel`);
    the last two outputs of `band_joint_kernel`."""
    lead = coefs.shape[:-3]
    p, n = coefs.shape[-3], coefs.shape[-1]
    _, joint, share = band_joint_kernel(
        coefs.reshape(-1, p, n, n), sigma.reshape(-1, n, n), truncation, grid, weights
    )
    d = weights.shape[0]
    return joint.reshape(*lead, d, n), share.reshape(*lead, d, n)


def band_joint_kernel(
    coefs: np.ndarray, sigma: np.ndarray, truncation: int, grid: int, weights: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(tables (D, d, n, n), joint (D, d, n), variance (D, d, n)) from one MA recursion:
    `band_kernel`'s band tables, and J_i(d), Γ_i(d) as fractions, for coefs (D, p, n, n), Σ (D, n, n).

    Models are taken in chunks of `BAND_CHUNK_BYTES`; each model's arithmetic is its own, so its
    numbers do not depend on the chunking or on the other models (`joint_band_sums`).
    """
    D, p, n, _ = coefs.shape
    d = weights.shape[0]
    proj = band_projection(weights, grid, truncation)
    tables, joint, share = np.empty((D, d, n, n)), np.empty((D, d, n)), np.empty((D, d, n))
    step = max(1, BAND_CHUNK_BYTES // (8 * n * n * (truncation + p)))
    for lo in range(0, D, step):
        sl = slice(lo, lo + step)
        a = scaled_ma(coefs[sl], sigma[sl], truncation)  # (D', H, n, n): Φ_h Σ D_σ^{-1/2}
        band, joint[sl], share[sl] = joint_band_sums(a, sigma[sl], proj)
        tables[sl] = band / band.sum(axis=(-3, -1), keepdims=True)
    return tables, joint, share


def joint_band_sums(
    a: np.ndarray, sigma: np.ndarray, proj: BandProjection
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(band (D, d, n, n) sums S_d / N of `band_kernel`, joint (D, d, n), variance (D, d, n)) from
    the scaled MA terms a_h = Φ_h Σ D_σ^{-1/2} (D, H, n, n) of `scaled_ma` (H = `proj.terms`).

    With L the Cholesky factor of Σ, Φ_h L = a_h M, M = D_σ^{1/2} L^{-T}, so the band projections
    of the sequences (Φ_h L)_ik are those of a_h times M (`band_projections` is linear):
    S_d(i) = Σ_k (band sum of (Φ_h L)_ik) = Σ_{r ∈ d} λ_r ‖(Y_r M)_{i·}‖², Y_r the (n, n) projection
    of a on eigenvector r — one (n × n)(n × n) product per kept eigenvector instead of a second
    MA recursion and n² more projections; the remaining band is MSE_i − Σ_{others}, with
    MSE_i = Σ_h ‖(a_h M)_{i·}‖² = Σ_d S_d(i). Φ_h,ii = Σ_k (a_h M)_ik (L^{-1})_ki. Then
    J_i(d) = (S_d(i) − O_d(i) / (Σ^{-1})_ii) / MSE_i and Γ_i(d) = S_d(i) / MSE_i, O_d the band sums
    of Φ_h,ii (module docstring).
    """
    D, H, n, _ = a.shape
    chol = np.linalg.cholesky(sigma)
    inv = triangular_inverse(chol)  # L^{-1}
    sd = np.sqrt(np.diagonal(sigma, axis1=-2, axis2=-1))
    M = sd[:, :, None] * np.swapaxes(inv, -1, -2)  # D_σ^{1/2} L^{-T}
    flat = a.reshape(D, H, n * n)
    y_even, y_odd = band_projections(flat, proj)
    d = len(proj.others) + 1
    total = np.empty((D, d, n))
    if proj.others:
        parts = []
        for y, w in ((y_even, proj.even_weights), (y_odd, proj.odd_weights)):
            z = y.reshape(D, -1, n) @ M  # rows of Y_r M, the projections of Φ_h L: one product
            np.square(z, out=z)
            weighted = w @ z.reshape(D, -1, n * n)  # (D, d − 1, n·n): Σ_r λ_r (Y_r M)_ik²
            parts.append(weighted.reshape(D, -1, n, n).sum(axis=-1))
        total[:, list(proj.others)] = parts[0] + parts[1]
    b = (a.reshape(D, H * n, n) @ M).reshape(D, H, n, n)  # Φ_h L
    own = np.einsum("dhik,dki->dhi", b, inv)  # Φ_h,ii = Σ_k (Φ_h L)_ik (L^{-1})_ki
    np.square(b, out=b)
    mse = b.sum(axis=1).sum(axis=-1)
    total[:, proj.rest] = mse - total[:, list(proj.others)].sum(axis=1)
    own_power = band_sums(own, proj)  # (D, d, n)
    precision = np.einsum("dki,dki->di", inv, inv)  # (Σ^{-1})_ii = Σ_k (L^{-1})_ki²
    joint = (total - own_power / precision[:, None, :]) / mse[:, None, :]
    share = total / mse[:, None, :]
    band = band_sums_of(y_even, y_odd, np.einsum("dhm,dhm->dm", flat, flat), proj)
    return band.reshape(D, d, n, n), joint, share


def joint_table(generalized: np.ndarray, joint: np.ndarray) -> np.ndarray:
    """(..., n, n) percent table: generalized rows (fractions) rescaled so off-diagonals sum to J_i."""
    n = generalized.shape[-1]
    eye = np.eye(n, dtype=bool)
    off = np.where(eye, 0.0, generalized)
    off_sum = off.sum(axis=-1, keepdims=True)
    with np.errstate(invalid="ignore", divide="ignore"):
        scaled = np.where(off_sum > 0, off * (joint[..., None] / off_sum), 0.0)
    return 100.0 * np.where(eye, (1.0 - joint)[..., None], scaled)


# ---------------------------------------------------------------------------------------------
# public
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False, repr=False)
class JointConnectedness:
    """Lastrapes–Wiesen joint connectedness at one horizon, in percent. Arrays are read-only.

    Attributes
    ----------
    from_others : (n,) 100·J_i, the share of i's H-step forecast-error variance due to all
        other shocks jointly.
    total : mean(from_others), the joint total index in [0, 100].
    generalized_from_others, generalized_total : the Diebold–Yilmaz (row-normalised
        generalized) counterparts at the same horizon, for comparison.
    table : (n, n) generalized rows rescaled so row i's off-diagonal entries sum to 100·J_i.
    to_others, net : (n,) from `table` (spillover-table convention).
    horizon : H.   names : series names.
    """

    from_others: np.ndarray
    total: float
    generalized_from_others: np.ndarray
    generalized_total: float
    table: np.ndarray
    to_others: np.ndarray
    net: np.ndarray
    horizon: int
    names: tuple[str, ...]

    def __repr__(self) -> str:
        return (
            f"JointConnectedness(total={self.total:.2f}%, generalized_total="
            f"{self.generalized_total:.2f}%, horizon={self.horizon}, names={list(self.names)!r})"
        )


def joint_connectedness(fit: VARLike, horizon: int) -> JointConnectedness:
    """Joint connectedness of Lastrapes & Wiesen (2021) at horizon H, in percent.

    Parameters
    ----------
    fit : `VARFit` or `VARProcess`.   horizon : H >= 1 (responses 0..H−1, as `connectedness`).
    """
    model = check_model(fit)
    H = check_int(horizon, "horizon", minimum=1)
    coefs, sigma = np.asarray(model.coefs), np.asarray(model.sigma_u)
    joint = joint_kernel(coefs, sigma, H)
    generalized = fevd_kernel(coefs, sigma, H, "generalized", None)[-1]
    table = joint_table(generalized, joint)
    m = spillover_measures(table)
    g = spillover_measures(100.0 * generalized)
    from_others = 100.0 * joint
    readonly(from_others, table, m["to_others"], m["net"], g["from_others"])
    return JointConnectedness(
        from_others=from_others, total=float(from_others.mean()),
        generalized_from_others=g["from_others"], generalized_total=float(g["total"]),
        table=table, to_others=m["to_others"], net=m["net"], horizon=H, names=model.names,
    )  # fmt: skip


@dataclass(frozen=True, eq=False, repr=False)
class JointFrequencyConnectedness:
    """Joint connectedness split by frequency band, in percent. Arrays are read-only.

    Attributes
    ----------
    bands, angles : as in `FrequencyConnectedness` (cycle lengths (P_lo, P_hi] in observations).
    from_others : (d, n) 100·J_i(d), band d's part of i's joint share; summed over bands, the
        Lastrapes–Wiesen share `joint_connectedness(fit, truncation).from_others`.
    total : (d,) mean over series of `from_others`; summed over bands, the joint total index.
    variance_share : (d, n) Γ_i(d), the share of i's forecast-error variance (horizon
        `truncation`) in band d; summed over bands, one.
    within_from_others : (d, n) 100·J_i(d)/Γ_i(d), the share of i's band-d variance that all
        other shocks cause jointly (NaN for a band without variance).
    generalized_from_others, generalized_total : (d, n), (d,) the Baruník–Křehlík frequency
        "from others" and total of `frequency_connectedness` on the same bands, for comparison.
    truncation, grid : MA terms and FFT grid size.   names : series names.
    """

    bands: tuple[tuple[float, float], ...]
    angles: np.ndarray
    from_others: np.ndarray
    total: np.ndarray
    variance_share: np.ndarray
    within_from_others: np.ndarray
    generalized_from_others: np.ndarray
    generalized_total: np.ndarray
    truncation: int
    grid: int
    names: tuple[str, ...]

    def __repr__(self) -> str:
        parts = ", ".join(
            f"({lo:g}, {hi:g}]: {t:.2f}%" for (lo, hi), t in zip(self.bands, self.total, strict=True)
        )
        return f"JointFrequencyConnectedness({parts}; truncation={self.truncation}, grid={self.grid})"


def joint_frequency_connectedness(
    fit: VARLike,
    *,
    bands: Sequence[tuple[float, float]] = DEFAULT_BANDS,
    truncation: int = DEFAULT_TRUNCATION,
    grid: int | None = None,
) -> JointFrequencyConnectedness:
    """Lastrapes–Wiesen joint connectedness split by frequency band (module docstring), in percent.

    Parameters
    ----------
    fit : `VARFit` or `VARProcess`.
    bands, truncation, grid : as in `frequency_connectedness` (cycle lengths in observations from
        a period <= 2 to inf; MA terms H; FFT size N >= H). The bands add up exactly (discrete
        Parseval) to `joint_connectedness(fit, truncation)`; the grid's only error is at band
        edges, as for `frequency_connectedness`.
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
    joint, share = joint_band_kernel(coefs, sigma, H, N, weights)
    from_others = 100.0 * joint
    with np.errstate(invalid="ignore", divide="ignore"):
        within = np.where(share > 0, from_others / share, np.nan)
    g = spillover_measures(100.0 * band_kernel(coefs[None], sigma[None], H, N, weights)[0])
    total = from_others.mean(axis=-1)
    angles = band_angles(parts)
    readonly(angles, from_others, total, share, within, g["from_others"], g["total"])
    return JointFrequencyConnectedness(
        bands=parts, angles=angles, from_others=from_others, total=total, variance_share=share,
        within_from_others=within, generalized_from_others=g["from_others"],
        generalized_total=g["total"], truncation=H, grid=N, names=model.names,
    )  # fmt: skip
