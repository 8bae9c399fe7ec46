"""Bands: reproducibility, containment, agreement between bootstrap and delta method."""

from __future__ import annotations

import numpy as np
import pytest

import arlib
from arlib._bands import _stabilise, bootstrap_models


@pytest.fixture(scope="module")
def fit(var2_data: np.ndarray) -> arlib.VARFit:
    return arlib.fit_var(var2_data, 2, names=["a", "b", "c"])


def test_seeded_bootstrap_is_reproducible(fit: arlib.VARFit) -> None:
    a = arlib.irf_bands(fit, 6, draws=50, rng=3)
    b = arlib.irf_bands(fit, 6, draws=50, rng=np.random.default_rng(3))
    np.testing.assert_array_equal(a.lower, b.lower)
    assert a.draws == 50 and a.kind == "bootstrap" and a.coverage == 0.9
    assert a.point.shape == a.lower.shape == a.upper.shape == a.median.shape == (7, 3, 3)
    np.testing.assert_array_equal(a.point, arlib.impulse_responses(fit, 6))
    assert (a.lower <= a.median).all() and (a.median <= a.upper).all()
    assert not a.upper.flags.writeable


def test_bootstrap_refit_matches_fit_var(fit: arlib.VARFit) -> None:
    """The batched refit inside the bootstrap gives the same numbers as fit_var on each draw."""
    from arlib._bands import _generate, _refit

    rng = np.random.default_rng(0)
    samples = _generate(fit, np.asarray(fit.coefs), np.asarray(fit.params[:1]), 3, rng)
    coefs, sigma = _refit(samples, 2, "c")
    for b in range(3):
        ref = arlib.fit_var(samples[b], 2)
        np.testing.assert_allclose(coefs[b], ref.coefs, atol=1e-12)
        np.testing.assert_allclose(sigma[b], ref.sigma_u, rtol=1e-11)
    # the first p rows are the observed presample
    np.testing.assert_array_equal(samples[:, :2], np.broadcast_to(fit.y[:2], (3, 2, 3)))


def test_bootstrap_and_delta_method_agree_roughly(fit: arlib.VARFit) -> None:
    """On 398 rows the bootstrap s.d. and the asymptotic s.e. of Cholesky responses should agree
    within sampling noise of 400 draws (~4%) plus small-sample differences: 25% allowed."""
    boot = arlib.irf_bands(fit, 4, draws=400, rng=11)
    asym = arlib.irf_bands(fit, 4, kind="asymptotic")
    assert asym.draws == 0 and asym.kind == "asymptotic"
    np.testing.assert_allclose(boot.std[1:], asym.std[1:], rtol=0.25)
    # impact: only the Σ̂_u part; the upper triangle of Θ_0 is exactly zero in every draw
    np.testing.assert_allclose(asym.std[0][np.triu_indices(3, 1)], 0.0, atol=1e-15)


def _ma(coefs: np.ndarray, H: int) -> list[np.ndarray]:
    """Φ_0..Φ_H by Φ_h = Σ_{j=1}^{min(h,p)} A_j Φ_{h−j} (Lütkepohl 2005, eq. 2.1.22), no arlib."""
    phi = [np.eye(coefs.shape[1])]
    for h in range(1, H + 1):
        phi.append(sum(coefs[j - 1] @ phi[h - j] for j in range(1, min(h, len(coefs)) + 1)))
    return phi


def _percentile(samples: np.ndarray, q: float) -> np.ndarray:
    """Sample quantile along axis 0 by linear interpolation between order statistics at position
    q·(B − 1) (Hyndman & Fan 1996, definition 7), written out rather than via np.quantile."""
    ordered = np.sort(samples, axis=0)
    pos = q * (ordered.shape[0] - 1)
    lo = int(np.floor(pos))
    hi = min(lo + 1, ordered.shape[0] - 1)
    return ordered[lo] + (pos - lo) * (ordered[hi] - ordered[lo])


def _check_percentile_band(band: arlib.Bands, samples: np.ndarray, level: float) -> None:
    """Band limits, median and s.d. equal the direct percentile computation on the same draws."""
    np.testing.assert_allclose(band.lower, _percentile(samples, (1 - level) / 2), atol=1e-12)
    np.testing.assert_allclose(band.median, _percentile(samples, 0.5), atol=1e-12)
    np.testing.assert_allclose(band.upper, _percentile(samples, (1 + level) / 2), atol=1e-12)
    np.testing.assert_allclose(band.std, samples.std(axis=0, ddof=1), atol=1e-12)
    assert band.draws == samples.shape[0]


def test_irf_band_values_are_percentiles_of_the_bootstrap_draws(fit: arlib.VARFit) -> None:
    """Fixed draws (the seeded coefficient/covariance replicates), Cholesky responses Φ_h P_b
    recomputed per draw in the test, percentile band (Efron & Tibshirani 1993, Ch. 13) by hand."""
    B, H, level = 40, 5, 0.8
    coefs, sigma = bootstrap_models(fit, B, np.random.default_rng(7))
    samples = np.array(
        [[phi @ np.linalg.cholesky(sigma[b]) for phi in _ma(coefs[b], H)] for b in range(B)]
    )
    band = arlib.irf_bands(fit, H, coverage=level, draws=B, rng=7)
    _check_percentile_band(band, samples, level)
    # the draws really vary: a band of zero width would pass the comparison trivially
    assert (band.upper - band.lower)[1:].min() > 1e-4


def test_fevd_and_connectedness_band_values_from_the_same_draws(fit: arlib.VARFit) -> None:
    """Generalized decomposition per draw recomputed in the test (Pesaran & Shin 1998 eq. 11
    numerator σ_jj^{-1} Σ_h (e_i'Φ_hΣe_j)², row-normalised as Diebold & Yilmaz 2012, so the
    denominator cancels), then every connectedness measure per draw and its percentile band."""
    B, H, level = 60, 8, 0.9
    coefs, sigma = bootstrap_models(fit, B, np.random.default_rng(1))
    shares = np.empty((B, H, 3, 3))  # [draw, step, variable, shock]
    for b in range(B):
        terms = [(phi @ sigma[b]) ** 2 / np.diag(sigma[b]) for phi in _ma(coefs[b], H - 1)]
        for s in range(1, H + 1):  # the s-step decomposition uses responses 0..s−1
            num = sum(terms[:s])
            shares[b, s - 1] = num / num.sum(axis=1, keepdims=True)
    fb = arlib.fevd_bands(fit, H, method="generalized", draws=B, rng=1)
    _check_percentile_band(fb, shares, level)
    tables = shares[:, -1]
    cb = arlib.connectedness_bands(fit, H, draws=B, rng=1)
    pct = 100 * tables
    off = pct * (1 - np.eye(3))
    from_others, to_others = off.sum(axis=2), off.sum(axis=1)
    _check_percentile_band(cb.table, pct, level)
    _check_percentile_band(cb.total, off.sum(axis=(1, 2)) / 3, level)
    _check_percentile_band(cb.from_others, from_others, level)
    _check_percentile_band(cb.to_others, to_others, level)
    _check_percentile_band(cb.net, to_others - from_others, level)
    # the point values are the estimates' own measures
    point = arlib.connectedness(fit, H)
    assert float(cb.total.point) == pytest.approx(point.total, abs=1e-12)
    np.testing.assert_allclose(cb.net.point, point.net, atol=1e-12)
    assert float(cb.total.upper) - float(cb.total.lower) > 0.1  # the draws really vary


def test_kilian_correction_keeps_draws_stable_and_shrinks_bias() -> None:
    """Kilian (1998): corrected models stay stable; a correction pushing past 1 is shrunk."""
    A = np.array([[[0.95]]])
    bias = np.array([[[-0.2]]])  # Â − Ψ = 1.15 would be explosive
    out = _stabilise(A, bias)
    assert abs(out[0, 0, 0]) < 1 and out[0, 0, 0] == pytest.approx(
        0.95 + 0.24 * 0.2, abs=1e-12
    )  # δ = 0.24
    rng = np.random.default_rng(4)
    e = rng.standard_normal(120)
    y = np.zeros(120)
    for t in range(1, 120):
        y[t] = 0.9 * y[t - 1] + e[t]
    fit1 = arlib.fit_var(y, 1)
    plain, _ = bootstrap_models(fit1, 300, np.random.default_rng(1))
    corrected, _ = bootstrap_models(fit1, 300, np.random.default_rng(1), bias_correction=True)
    # LS under-estimates persistence (Hurwicz bias); the correction moves draws up
    assert corrected[:, 0, 0, 0].mean() > plain[:, 0, 0, 0].mean()
    # a stable draw stays stable after correction (δ shrinks to 0 at worst)
    assert (np.abs(corrected[:, 0, 0, 0]) < 1).mean() > 0.95
    bands = arlib.irf_bands(fit1, 5, draws=100, rng=2, bias_correction=True)
    assert bands.bias_corrected


def test_band_argument_errors(fit: arlib.VARFit) -> None:
    with pytest.raises(arlib.InvalidInputError, match="`kind` must be one of"):
        arlib.irf_bands(fit, 4, kind="bayes")
    with pytest.raises(arlib.InvalidInputError, match="asymptotic bands cover shocks"):
        arlib.irf_bands(fit, 4, kind="asymptotic", shocks="generalized")
    with pytest.raises(arlib.InvalidInputError, match="`draws` must be >= 20"):
        arlib.irf_bands(fit, 4, draws=5)
    with pytest.raises(
        arlib.InvalidInputError, match="`rng` must be a numpy Generator, an integer"
    ):
        arlib.irf_bands(fit, 4, rng="seed")  # type: ignore[arg-type]  # refused on purpose
    proc = arlib.var_process(fit.coefs, fit.sigma_u)
    with pytest.raises(arlib.InvalidInputError, match="estimated VARFit"):
        arlib.irf_bands(proc, 4)  # type: ignore[arg-type]  # a VARProcess, refused on purpose
