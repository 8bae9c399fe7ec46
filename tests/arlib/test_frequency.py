"""Frequency connectedness (Baruník & Křehlík 2018) against its identities and closed forms.

Sources: Baruník, J. and Křehlík, T. (2018), Journal of Financial Econometrics 16(2), 271–296,
eqs. (10)–(14); Diebold & Yilmaz (2012), IJF 28, 57–66; the discrete Parseval identity; the
spectral density of a VAR (Hamilton 1994, eq. 10.4.43) as computed by `arlib.spectral_density`;
for cross effects through a pure lag-k cycle, closed forms of |Ψ_21(e^{−iω})|² integrated over
bands (the Poisson-kernel integral, derived beside `_poisson_mass`).
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest

import arlib
from arlib import InvalidInputError
from arlib._frequency import (
    band_kernel,
    band_weights,
    frequency_connectedness,
    frequency_kernel,
    frequency_response_kernel,
)


def random_process(rng: np.random.Generator, n: int, p: int, radius: float = 0.8):
    """A stable VAR(p) with unequal variances and correlated errors, companion radius `radius`."""
    coefs = rng.normal(size=(p, n, n)) / np.sqrt(n * p)
    comp = arlib.companion_matrix(coefs)
    coefs = coefs * 0  # rescale A_j by r^j so the companion radius becomes `radius`
    rho = np.max(np.abs(np.linalg.eigvals(comp)))
    base = comp[:n].reshape(n, p, n).transpose(1, 0, 2)
    for j in range(p):
        coefs[j] = base[j] * (radius / rho) ** (j + 1)
    a = rng.normal(size=(n, n)) * rng.uniform(0.2, 3.0, size=n)
    sigma = a @ a.T + 0.1 * np.eye(n)
    return arlib.var_process(coefs, sigma)


BANDS = ((1, 5), (5, 20), (20, math.inf))


@pytest.mark.parametrize("seed", range(5))
def test_bands_add_up_to_the_diebold_yilmaz_table_at_the_truncation_horizon(seed):
    # Discrete Parseval (N >= H): the band tables sum exactly to the generalized FEVD table at
    # horizon H (DY 2012, eq. 2). Tolerance: rounding of an FFT of length N (~1e-13 in percent).
    rng = np.random.default_rng(seed)
    proc = random_process(rng, n=4, p=2, radius=0.9)
    for H in (10, 100):
        fc = frequency_connectedness(proc, bands=BANDS, truncation=H)
        dy = arlib.connectedness(proc, H)
        np.testing.assert_allclose(fc.tables.sum(axis=0), dy.table, atol=1e-11)
        assert math.isclose(fc.total.sum(), dy.total, abs_tol=1e-11)
        np.testing.assert_allclose(fc.from_others.sum(axis=0), dy.from_others, atol=1e-11)
        np.testing.assert_allclose(fc.to_others.sum(axis=0), dy.to_others, atol=1e-11)
        np.testing.assert_allclose(fc.net.sum(axis=0), dy.net, atol=1e-11)
        # within = frequency / band share (BK eq. 13 vs 14), and shares add up to one
        np.testing.assert_allclose(fc.within_total * fc.band_share, fc.total, atol=1e-12)
        assert math.isclose(fc.band_share.sum(), 1.0, abs_tol=1e-13)


def test_diagonal_var1_with_diagonal_errors_is_all_own_variance():
    # Closed form: with A and Σ diagonal no shock reaches another series in any band.
    proc = arlib.var_process(np.diag([0.9, -0.5, 0.2]), np.diag([1.0, 4.0, 0.25]))
    fc = frequency_connectedness(proc, bands=BANDS)
    off = fc.tables * (1 - np.eye(3))
    assert np.abs(off).max() < 1e-12
    assert np.abs(fc.total).max() < 1e-12
    # a positive AR(1) coefficient keeps its variance at low frequencies, a negative at high
    own = fc.tables[:, [0, 1], [0, 1]]
    assert own[2, 0] > own[0, 0]  # φ = 0.9: more in (20, inf] than in (1, 5]
    assert own[0, 1] > own[2, 1]  # φ = −0.5: more in (1, 5] than in (20, inf]


@pytest.mark.parametrize(
    ("series1", "band"),
    [
        # y1 an AR(2) with complex roots r e^{±iθ}, θ = 2π/10: a cycle of period 10
        ([2 * 0.97 * math.cos(2 * math.pi / 10), -(0.97**2)], 1),
        # y1_t = −0.9 y1_{t−1}: alternation, period 2 (ω = π)
        ([-0.9, 0.0], 0),
        # y1_t = 0.97 y1_{t−1}: persistence, most power near ω = 0
        ([0.97, 0.0], 2),
    ],
)
def test_a_cross_effect_through_a_cycle_lands_in_the_band_of_that_cycle(series1, band):
    # y2_t = 0.5 y1_{t−1} + e2_t: what y1's shock does to y2 is y1's cycle, delayed one step,
    # so the spillover y1 → y2 must sit in the band holding y1's spectral peak. Expected share:
    # ≥ 80 % of the total y1 → y2 entry (the AR(2) peak at r = 0.97 is sharp; the AR(1) ones are
    # broad, so the check is on the bulk of the mass, not all of it).
    coefs = np.zeros((2, 2, 2))
    coefs[0, 0, 0], coefs[1, 0, 0] = series1
    coefs[0, 1, 0] = 0.5
    proc = arlib.var_process(coefs, np.eye(2))
    fc = frequency_connectedness(proc, bands=BANDS, truncation=600)
    spill = fc.tables[:, 1, 0]
    assert spill[band] >= 0.8 * spill.sum(), spill
    assert fc.tables[:, 0, 1].sum() < 1e-12  # nothing flows back


# ---------------------------------------------------------------------------------------------
# cross effects through a pure lag-k cycle (literal constructions, closed forms from Ψ(e^{−iω}))
# ---------------------------------------------------------------------------------------------
# Bivariate, Σ = I (generalized = orthogonal, θ̃_d[2, 1] ∝ ∫_d |Ψ_21(e^{−iω})|² dω), so the share of
# the y1 → y2 spillover in band d is ∫_d |Ψ_21|² / ∫_0^π |Ψ_21|² (folded onto [0, π]). The
# Poisson-kernel integral used below: for g(θ) = 1 / (1 − 2φ cos θ + φ²), 0 < φ < 1,
# (1/2π) ∫_{θ1}^{θ2} (1 − φ²) g(θ) dθ = (1/π) [arctan(c tan(θ2/2)) − arctan(c tan(θ1/2))],
# c = (1 + φ)/(1 − φ), for −π ≤ θ1 < θ2 ≤ π; over the whole circle it is 1. (With t = tan(θ/2),
# cos θ = (1 − t²)/(1 + t²) gives 1 − 2φ cos θ + φ² = ((1 − φ)² + (1 + φ)² t²)/(1 + t²), and
# d/dθ 2 arctan(c t) = c (1 + t²)/(1 + c² t²) = (1 − φ²) g(θ).)


def _poisson_mass(phi: float, theta1: float, theta2: float) -> float:
    c = (1 + phi) / (1 - phi)
    return (math.atan(c * math.tan(theta2 / 2)) - math.atan(c * math.tan(theta1 / 2))) / math.pi


def _peak_bands(k: int, delta: float) -> tuple[tuple[float, float], ...]:
    """Cycle-length bands with an edge at 2πj/k ± δ (j = 0..⌊k/2⌋): a narrow band around each
    harmonic frequency 2πj/k (periods ∞, k, k/2, …) and the bands between them."""
    omegas = sorted(
        w for j in range(k // 2 + 1) for w in (2 * math.pi * j / k - delta, 2 * math.pi * j / k + delta)
        if 0 < w < math.pi
    )  # fmt: skip
    cuts = [1.0, *sorted(2 * math.pi / w for w in omegas), math.inf]
    return tuple(itertools.pairwise(cuts))


@pytest.mark.parametrize("k", [3, 10])
def test_a_pure_lag_k_cross_effect_on_white_noise_has_a_flat_gain(k):
    # y1_t = e1_t, y2_t = b y1_{t−k} + e2_t: a VAR(k) whose only coefficient is A_k[2, 1] = b.
    # Ψ_21(e^{−iω}) = b e^{−iωk}, |Ψ_21|² = b² at every ω: the lag shifts the phase, it selects no
    # cycle length. The spillover spreads over the bands by their width in ω: (1, 5] = [0.4π, π]
    # holds 0.6, (5, 20] = [0.1π, 0.4π] 0.3, (20, ∞) = [0, 0.1π) 0.1 — whatever k is (measured to
    # 5e-15: the gain is flat, so neither the grid nor the truncation errs).
    coefs = np.zeros((k, 2, 2))
    coefs[k - 1, 1, 0] = 0.8
    proc = arlib.var_process(coefs, np.eye(2))
    fc = frequency_connectedness(proc, bands=BANDS, truncation=50)
    spill = fc.tables[:, 1, 0]
    np.testing.assert_allclose(spill / spill.sum(), [0.6, 0.3, 0.1], atol=1e-12)
    assert fc.tables[:, 0, 1].sum() < 1e-12


@pytest.mark.parametrize("k", [6, 10])
@pytest.mark.parametrize("phi", [0.6, 0.9])
def test_a_cross_effect_through_a_lag_k_cycle_lands_at_period_k_and_its_harmonics(k, phi):
    """y1_t = φ y1_{t−k} + e1_t (a pure lag-k cycle: y1's only coefficient is at lag k), and
    y2_t = b y1_{t−1} + e2_t (the cross effect acts only through y1's cycle). Then

        Ψ_21(e^{−iω}) = b e^{−iω} / (1 − φ e^{−iωk}),   |Ψ_21|² = b² g(kω),

    with g the Poisson-type kernel above: 2π/k-periodic in ω, peaked at ω = 2πj/k — cycles of
    period k and its harmonics k/j (j = 2..⌊k/2⌋), and ω = 0. So a pure lag-k cycle does not put
    all its spillover in the band holding period k: it puts it, in equal parts, near period k, each
    harmonic and the zero frequency. Exactly, by periodicity and the Poisson integral:

    - each cell |ω − 2πj/k| ≤ π/k holds 1/k of the circle's mass: the bands of periods
      (1, 2k/3], (2k/3, 2k], (2k, ∞) hold (k − 3)/k, 2/k and 1/k, whatever φ;
    - the bands |ω − 2πj/k| ≤ δ together hold F = (2/π) arctan(c tan(kδ/2)), c = (1+φ)/(1−φ),
      against kδ/π for a flat gain; the band holding period k (j = 1, with its mirror −2π/k)
      holds 2F/k, as does each harmonic 1 ≤ j < k/2; j = 0 and j = k/2 (ω = π) hold F/k each.

    With δ = π/(4k) (bands a quarter of the frequency axis in all): F = 0.654 (φ = 0.6) and 0.920
    (φ = 0.9) against 0.25 flat; the band holding period k holds 2F/k. Measured agreement of
    `frequency_connectedness` (truncation 1000, so the omitted tail φ^{2·⌊999/k⌋} ≤ 3e-8; default
    grid): 3.4e-6 on the bands' sum, 7e-7 on the band of period k, 1e-11 on the cells.
    """
    coefs = np.zeros((k, 2, 2))
    coefs[k - 1, 0, 0] = phi
    coefs[0, 1, 0] = 0.5
    proc = arlib.var_process(coefs, np.eye(2))
    delta = math.pi / (4 * k)
    bands = _peak_bands(k, delta)
    fc = frequency_connectedness(proc, bands=bands, truncation=1000)
    spill = fc.tables[:, 1, 0] / fc.tables[:, 1, 0].sum()
    F = _poisson_mass(phi, -k * delta, k * delta)
    assert F == pytest.approx(2 / math.pi * math.atan((1 + phi) / (1 - phi) * math.tan(k * delta / 2)))
    harmonics = [2 * math.pi * j / k for j in range(k // 2 + 1)]
    at_peak = [any(lo - 1e-12 <= w <= hi + 1e-12 for w in harmonics) for lo, hi in fc.angles]
    assert sum(at_peak) == k // 2 + 1
    assert spill[at_peak].sum() == pytest.approx(F, abs=1e-5)
    (of_k,) = [b for b, (lo, hi) in enumerate(bands) if lo < k <= hi]
    assert at_peak[of_k]
    assert spill[of_k] >= 2 * F / k - 1e-5
    assert spill[of_k] == pytest.approx(2 * F / k, abs=1e-5)
    # per unit of frequency, the band holding period k carries F / (kδ/π) times the average
    width = (fc.angles[of_k, 1] - fc.angles[of_k, 0]) / math.pi
    assert spill[of_k] / width == pytest.approx(F / (k * delta / math.pi), rel=1e-4)
    cells = frequency_connectedness(proc, bands=((1, 2 * k / 3), (2 * k / 3, 2 * k), (2 * k, math.inf)),
                                    truncation=1000).tables[:, 1, 0]  # fmt: skip
    np.testing.assert_allclose(cells / cells.sum(), [(k - 3) / k, 2 / k, 1 / k], atol=1e-9)
    assert fc.tables[:, 0, 1].sum() < 1e-12


@pytest.mark.parametrize("phi", [0.6, 0.9])
def test_the_lag_two_alternating_cycle_puts_its_spillover_in_the_band_of_period_four(phi):
    """The pure-lag cycle with no harmonics: y1_t = −φ y1_{t−2} + e1_t, y2_t = b y1_{t−1} + e2_t.

    Ψ_21(e^{−iω}) = b e^{−iω} / (1 + φ e^{−2iω}), |Ψ_21|² = b² / (1 − 2φ cos θ + φ²) with
    θ = 2ω − π: one peak on [0, π], at ω = π/2, a cycle of period 4 (the harmonic 4/3 aliases onto
    it). ω ∈ [0, π] maps onto θ ∈ [−π, π] once, so the share in ω ∈ [ω1, ω2] is
    (1/π)[arctan(c tan(θ2/2)) − arctan(c tan(θ1/2))]. The default band (1, 5] = [0.4π, π] holds
    period 4 and θ ∈ [−0.2π, π]: 0.791 of the spillover for φ = 0.6 and 0.949 for φ = 0.9; (5, 20]
    holds 0.183 and 0.046, (20, ∞) (θ ∈ [−π, −0.8π]) 0.026 and 0.005. Measured agreement with the
    closed form: 2.7e-7 (φ = 0.6) and 1.5e-7 (φ = 0.9).
    """
    coefs = np.zeros((2, 2, 2))
    coefs[1, 0, 0] = -phi
    coefs[0, 1, 0] = 0.5
    proc = arlib.var_process(coefs, np.eye(2))
    fc = frequency_connectedness(proc, bands=BANDS, truncation=600)
    spill = fc.tables[:, 1, 0] / fc.tables[:, 1, 0].sum()
    want = [_poisson_mass(phi, 2 * lo - math.pi, 2 * hi - math.pi) for lo, hi in fc.angles]  # [ω_lo, ω_hi]
    np.testing.assert_allclose(spill, want, atol=1e-6)
    assert want[0] >= {0.6: 0.79, 0.9: 0.948}[phi]
    assert spill[0] >= want[0] - 1e-6
    assert fc.tables[:, 0, 1].sum() < 1e-12


@pytest.mark.parametrize("seed", range(3))
def test_the_spectrum_behind_the_bands_is_the_var_spectral_density(seed):
    # f(ω) = (1/2π) Ψ(e^{−iω}) Σ Ψ(e^{−iω})^H on the FFT grid equals arlib.spectral_density
    # (exact A(e^{−iω})^{-1}, Hamilton eq. 10.4.43) up to the truncation tail ρ^H: with ρ = 0.8
    # and H = 200 the tail is ~1e-19, so the agreement is rounding (1e-12 relative).
    rng = np.random.default_rng(10 + seed)
    proc = random_process(rng, n=3, p=2, radius=0.8)
    H, N = 200, 1024
    psi = frequency_response_kernel(np.asarray(proc.coefs), H, N)
    sigma = np.asarray(proc.sigma_u)
    ours = psi @ sigma @ np.conj(np.swapaxes(psi, -1, -2)) / (2 * np.pi)
    omega = 2 * np.pi * np.arange(N // 2 + 1) / N
    ref = arlib.spectral_density(proc, omega)
    scale = np.abs(ref).max()
    assert np.abs(ours - ref).max() <= 1e-12 * scale


def exact_band_tables(proc, bands, H):
    """Band tables from the exact band integrals, no grid.

    ∫_{d ∪ −d} |Σ_h a_h e^{−iωh}|² dω = Σ_{h,l} a_h a_l W(h − l),
    W(m) = 2 ∫_{ω_lo}^{ω_hi} cos(ωm) dω = 2 (sin(ω_hi m) − sin(ω_lo m)) / m,  W(0) = 2(ω_hi − ω_lo).
    """
    coefs, sigma = np.asarray(proc.coefs), np.asarray(proc.sigma_u)
    n = sigma.shape[0]
    phi = [np.eye(n)]
    for h in range(1, H):
        phi.append(sum(phi[h - j] @ coefs[j - 1] for j in range(1, min(h, len(coefs)) + 1)))
    a = np.array([f @ sigma for f in phi])  # (H, n, n): (Φ_h Σ)_jk
    m = np.subtract.outer(np.arange(H), np.arange(H)).astype(float)
    out = []
    for lo, hi in bands:
        w_lo, w_hi = 2 * np.pi / hi, min(2 * np.pi / lo, np.pi)
        with np.errstate(invalid="ignore", divide="ignore"):
            W = np.where(m == 0, 2 * (w_hi - w_lo), 2 * (np.sin(w_hi * m) - np.sin(w_lo * m)) / m)
        out.append(np.einsum("hjk,hl,ljk->jk", a, W, a) / np.diag(sigma)[None, :])
    S = np.array(out)
    return 100 * S / S.sum(axis=(0, 2), keepdims=True)


def test_grid_error_against_the_exact_band_integrals():
    # The FFT grid's only error is at band edges (midpoint rule with edge cells split by length,
    # on a trigonometric polynomial): the default grid N = max(8H, 512) keeps it below 0.01
    # percentage points (measured 1e-5 to 3e-3 on such processes), a 16× finer grid below 1e-3.
    rng = np.random.default_rng(3)
    proc = random_process(rng, n=3, p=2, radius=0.85)
    H = 60
    exact = exact_band_tables(proc, BANDS, H)
    np.testing.assert_allclose(exact.sum(axis=0), arlib.connectedness(proc, H).table, atol=1e-10)
    coarse = frequency_connectedness(proc, bands=BANDS, truncation=H)
    fine = frequency_connectedness(proc, bands=BANDS, truncation=H, grid=16 * coarse.grid)
    err_coarse = np.abs(coarse.tables - exact).max()
    err_fine = np.abs(fine.tables - exact).max()
    assert err_coarse < 1e-2, err_coarse
    assert err_fine < 1e-3, err_fine


@pytest.mark.parametrize(("truncation", "grid"), [(100, 800), (30, 30), (25, 77), (1, 8)])
def test_band_kernel_equals_the_grid_definition(truncation, grid):
    # band_kernel takes each grid-N band sum as the quadratic form a'T_d a (T_d the band's Toeplitz
    # Gram matrix) through its eigenpairs above 1e-14 and the remainder band; frequency_kernel
    # evaluates the definition, BK 2018 eqs. 10–12, by an rfft on the size-N grid. Same numbers to rounding, for any N >= H
    # (also N = H and odd N), on a batch of processes with unequal variances and correlated errors.
    rng = np.random.default_rng(truncation + grid)
    procs = [random_process(rng, n=5, p=3, radius=0.95) for _ in range(4)]
    coefs = np.stack([np.asarray(q.coefs) for q in procs])
    sigma = np.stack([np.asarray(q.sigma_u) for q in procs])
    weights = band_weights(BANDS, grid)
    want = frequency_kernel(coefs, sigma, truncation, grid, weights)
    got = band_kernel(coefs, sigma, truncation, grid, weights)
    assert got.shape == want.shape == (4, len(BANDS), 5, 5)
    np.testing.assert_allclose(got, want, rtol=0, atol=1e-12)


def test_band_kernel_numbers_do_not_depend_on_the_batch(monkeypatch):
    # Each model's arithmetic is its own (one recursion and one product per model and fold), so
    # a model gives the same bits alone, in any batch, and whatever the kernel's internal chunks.
    rng = np.random.default_rng(17)
    procs = [random_process(rng, n=4, p=2, radius=0.9) for _ in range(23)]
    coefs = np.stack([np.asarray(q.coefs) for q in procs])
    sigma = np.stack([np.asarray(q.sigma_u) for q in procs])
    weights = band_weights(BANDS, 400)
    whole = band_kernel(coefs, sigma, 50, 400, weights)
    alone = np.concatenate(
        [band_kernel(coefs[i : i + 1], sigma[i : i + 1], 50, 400, weights) for i in range(23)]
    )
    np.testing.assert_array_equal(alone, whole)
    np.testing.assert_array_equal(
        band_kernel(coefs[5:16], sigma[5:16], 50, 400, weights), whole[5:16]
    )
    monkeypatch.setattr(arlib._frequency, "BAND_CHUNK_BYTES", 1)  # one model per chunk
    np.testing.assert_array_equal(band_kernel(coefs, sigma, 50, 400, weights), whole)


@pytest.mark.parametrize(
    "bands", [BANDS, ((1, math.inf),), ((1, 3), (3, 4), (4, 10), (10, 50), (50, math.inf))]
)
@pytest.mark.parametrize(("truncation", "grid"), [(1, 8), (2, 8), (3, 9), (7, 512), (101, 808)])
def test_band_kernel_any_partition_and_odd_lengths(bands, truncation, grid):
    # The quadratic forms fold the sequence at its middle (odd H keeps a middle term) and take the
    # band with most eigenvectors as the remainder: any number of bands, any H, still 1e-12.
    rng = np.random.default_rng(truncation * grid + len(bands))
    coefs = rng.normal(size=(3, 2, 4, 4)) * 0.15
    a = rng.normal(size=(3, 4, 4))
    sigma = a @ a.transpose(0, 2, 1) + 0.1 * np.eye(4)
    weights = band_weights(bands, grid)
    want = frequency_kernel(coefs, sigma, truncation, grid, weights)
    np.testing.assert_allclose(
        band_kernel(coefs, sigma, truncation, grid, weights), want, rtol=0, atol=1e-12
    )


def test_band_weights_cover_the_circle_once():
    for N in (512, 513):
        w = band_weights(BANDS, N)
        assert abs(w.sum() - N) < 1e-9
        mult = np.full(N // 2 + 1, 2.0)
        mult[0] = 1.0
        if N % 2 == 0:
            mult[-1] = 1.0
        np.testing.assert_allclose(w.sum(axis=0), mult, atol=1e-12)  # each bin shared out once
        assert (np.count_nonzero(w, axis=0) <= 2).all()  # only edge bins are split


@pytest.mark.parametrize(
    ("bands", "fragment"),
    [
        ([(1, 5), (6, math.inf)], "starts at 6.0"),
        ([(3, math.inf)], "uncovered"),
        ([(1, 5), (5, 20)], "end the last band at inf"),
        ([(5, 1), (1, math.inf)], "0 < shortest < longest"),
        ([], "empty"),
        ("short", "cycle lengths"),
    ],
)
def test_bad_bands_are_refused_with_the_fix(bands, fragment):
    proc = arlib.var_process(np.diag([0.5, 0.5]), np.eye(2))
    with pytest.raises(InvalidInputError, match="bands") as info:
        frequency_connectedness(proc, bands=bands)
    assert fragment in str(info.value)


def test_grid_smaller_than_truncation_is_refused():
    proc = arlib.var_process(np.diag([0.5, 0.5]), np.eye(2))
    with pytest.raises(InvalidInputError, match="grid"):
        frequency_connectedness(proc, truncation=100, grid=50)
