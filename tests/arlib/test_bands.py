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


def test_fevd_and_connectedness_bands(fit: arlib.VARFit) -> None:
    fb = arlib.fevd_bands(fit, 8, method="generalized", draws=60, rng=1)
    assert fb.point.shape == (8, 3, 3)
    assert (fb.lower >= 0).all() and (fb.upper <= 1).all()
    cb = arlib.connectedness_bands(fit, 8, draws=60, rng=1)
    point = arlib.connectedness(fit, 8)
    assert float(cb.total.point) == pytest.approx(point.total)
    np.testing.assert_allclose(cb.net.point, point.net)
    assert 0 <= float(cb.total.lower) <= float(cb.total.upper) <= 100
    assert cb.table.point.shape == (3, 3) and cb.total.point.shape == ()


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
        arlib.irf_bands(fit, 4, rng="seed")  # type: ignore[arg-type]
    proc = arlib.var_process(fit.coefs, fit.sigma_u)
    with pytest.raises(arlib.InvalidInputError, match="estimated VARFit"):
        arlib.irf_bands(proc, 4)  # type: ignore[arg-type]
