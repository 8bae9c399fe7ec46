"""Least-squares VAR fits, processes and lag selection: identities that must hold exactly."""

from __future__ import annotations

import warnings

import numpy as np
import pytest

import arlib
from arlib._estimate import design_matrix

from .conftest import A1, A2, SIGMA


def test_shapes_and_readonly(var2_data: np.ndarray) -> None:
    fit = arlib.fit_var(var2_data, 2, names=["a", "b", "c"])
    T, n = var2_data.shape
    assert fit.coefs.shape == (2, n, n)
    assert fit.intercept is not None and fit.intercept.shape == (n,)
    assert fit.trend_coef is None
    assert fit.resid.shape == (T - 2, n)
    assert fit.nobs == T - 2 and fit.k_regressors == 1 + 2 * n
    assert fit.params.shape == fit.stderr.shape == (fit.k_regressors, n)
    assert fit.coefs_stderr.shape == (2, n, n)
    assert fit.regressor_names[:4] == ("const", "a.L1", "b.L1", "c.L1")
    assert fit.companion.shape == (2 * n, 2 * n)
    for arr in (fit.coefs, fit.sigma_u, fit.resid, fit.params, fit.y, fit.companion):
        with pytest.raises(ValueError, match="read-only"):
            arr[0] = 0.0
    with pytest.raises(AttributeError):
        fit.lags = 3  # type: ignore[misc]  # frozen, written on purpose


def test_normal_equations_and_sigma(var2_data: np.ndarray) -> None:
    """Residuals are orthogonal to every regressor (Z'U = 0); Σ̂_u = U'U/(T_eff−k), Σ̃_u = U'U/T_eff."""
    fit = arlib.fit_var(var2_data, 2)
    Z = design_matrix(var2_data, 2, "c")
    scale = np.abs(Z).max() * np.abs(fit.resid).max() * fit.nobs
    assert np.abs(Z.T @ fit.resid).max() < 1e-12 * scale
    sse = fit.resid.T @ fit.resid
    np.testing.assert_allclose(fit.sigma_u, sse / (fit.nobs - fit.k_regressors), rtol=1e-13)
    np.testing.assert_allclose(fit.sigma_u_ml, sse / fit.nobs, rtol=1e-13)
    # coefs[i][r, c] is the coefficient of series c at lag i+1 in equation r
    np.testing.assert_allclose(fit.coefs[1][2, 0], fit.params[1 + 3 + 0, 2])
    np.testing.assert_allclose(fit.fitted + fit.resid, var2_data[2:])


def test_recovers_true_parameters_on_long_sample() -> None:
    from .conftest import simulate

    y = simulate(np.stack([A1, A2]), SIGMA, 20000, seed=7)
    fit = arlib.fit_var(y, 2, trend="n")
    # sampling s.d. of each coefficient is about 1/sqrt(20000) ≈ 0.007 times a scale near 1
    np.testing.assert_allclose(fit.coefs, np.stack([A1, A2]), atol=0.05)
    np.testing.assert_allclose(fit.sigma_u, SIGMA, atol=0.08)
    assert fit.is_stable and fit.spectral_radius < 1


def test_univariate_ar_from_1d() -> None:
    rng = np.random.default_rng(3)
    e = rng.standard_normal(3000)
    y = np.zeros(3000)
    for t in range(2, 3000):
        y[t] = 0.6 * y[t - 1] - 0.3 * y[t - 2] + e[t]
    fit = arlib.fit_var(y, 2)
    assert fit.n == 1 and fit.coefs.shape == (2, 1, 1)
    np.testing.assert_allclose(fit.coefs[:, 0, 0], [0.6, -0.3], atol=0.05)
    # same numbers as a direct least-squares regression
    X = np.column_stack([np.ones(2998), y[1:-1], y[:-2]])
    beta = np.linalg.lstsq(X, y[2:], rcond=None)[0]
    np.testing.assert_allclose(fit.params[:, 0], beta, rtol=1e-10)


def test_trend_ct_uses_row_number_plus_one(var2_data: np.ndarray) -> None:
    y = var2_data + 0.01 * np.arange(len(var2_data))[:, None]
    fit = arlib.fit_var(y, 1, trend="ct")
    X = np.column_stack([np.ones(len(y) - 1), np.arange(2, len(y) + 1), y[:-1]])
    beta = np.linalg.lstsq(X, y[1:], rcond=None)[0]
    np.testing.assert_allclose(fit.params, beta, rtol=1e-9, atol=1e-12)
    assert fit.trend_coef is not None
    np.testing.assert_allclose(fit.trend_coef, beta[1], rtol=1e-9)


def test_llf_matches_gaussian_density(var2_data: np.ndarray) -> None:
    from scipy import stats

    fit = arlib.fit_var(var2_data, 2)
    dens = stats.multivariate_normal(mean=np.zeros(3), cov=fit.sigma_u_ml).logpdf(fit.resid).sum()
    np.testing.assert_allclose(fit.llf, dens, rtol=1e-12)


def test_var_process_forms() -> None:
    ar2 = arlib.var_process([1.2, -0.5], 2.0)
    assert ar2.coefs.shape == (2, 1, 1) and ar2.sigma_u.shape == (1, 1)
    assert ar2.n == 1 and ar2.lags == 2 and ar2.names == ("y0",)
    v1 = arlib.var_process(A1, SIGMA, [1.0, 0.0, 0.0], names=["x", "y", "z"])
    assert v1.lags == 1 and v1.is_stable
    np.testing.assert_allclose(v1.mean, np.linalg.solve(np.eye(3) - A1, [1.0, 0.0, 0.0]))
    assert isinstance(v1, arlib.VARLike)
    assert "VARProcess(n=3" in repr(v1)


def test_companion_and_spectral_radius() -> None:
    comp = arlib.companion_matrix(np.stack([A1, A2]))
    np.testing.assert_array_equal(comp[:3, :3], A1)
    np.testing.assert_array_equal(comp[:3, 3:], A2)
    np.testing.assert_array_equal(comp[3:, :3], np.eye(3))
    np.testing.assert_array_equal(comp[3:, 3:], np.zeros((3, 3)))
    # batched: one companion per leading index
    batch = arlib.companion_matrix(np.stack([np.stack([A1, A2])] * 4))
    assert batch.shape == (4, 6, 6)
    # AR(1) with φ: radius |φ|
    assert arlib.var_process([0.9], 1.0).spectral_radius == pytest.approx(0.9)


def test_unstable_fit_warns_with_radius_and_points_at_caller() -> None:
    # two noisy exponential growth paths (5% per row): the fitted VAR(1) is explosive
    rng = np.random.default_rng(0)
    y = np.exp(0.05 * np.arange(60))[:, None] + rng.standard_normal((60, 2)) * 0.01
    with pytest.warns(arlib.UnstableProcessWarning, match=r"spectral radius 1\.0\d") as rec:
        fit = arlib.fit_var(y, 1)
    assert not fit.is_stable and fit.spectral_radius >= 1
    assert rec[0].filename == __file__
    with pytest.warns(arlib.UnstableProcessWarning, match="spectral radius 1.1"):
        arlib.var_process([1.1], 1.0)


def test_stable_fit_does_not_warn(var2_data: np.ndarray) -> None:
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        arlib.fit_var(var2_data, 2)


def test_select_lags_common_sample(var2_data: np.ndarray) -> None:
    sel = arlib.select_lags(var2_data, 6)
    assert sel.nobs == len(var2_data) - 6
    assert list(sel.lags) == list(range(7))
    assert set(sel.best) == {"aic", "bic", "hq", "fpe"}
    for name in ("aic", "bic", "hq", "fpe"):
        assert sel.best[name] == int(np.argmin(getattr(sel, name)))
    # BIC's penalty is the heaviest once log T > 2 log log T: it never picks more lags than AIC
    assert sel.best["bic"] <= sel.best["hq"] <= sel.best["aic"]
    # criterion at p equals a fit of order p on the last T − 6 rows + 6 − p presample rows
    fit4 = arlib.fit_var(var2_data[6 - 4 :], 4)
    assert sel.aic[4] == pytest.approx(fit4.aic, rel=1e-12)
    assert sel.fpe[4] == pytest.approx(fit4.fpe, rel=1e-12)
    # p = 0: Σ̃ of demeaned data
    Y = var2_data[6:]
    _, ld0 = np.linalg.slogdet(np.cov(Y.T, bias=True))
    assert sel.aic[0] == pytest.approx(ld0 + 2 * 3 / sel.nobs, rel=1e-12)


def test_information_criteria_penalty_counts_all_coefficients(var2_data: np.ndarray) -> None:
    """Convention: the penalty counts n·k = p·n² + n·d coefficients (intercepts included)."""
    fit = arlib.fit_var(var2_data, 2)
    _, ld = np.linalg.slogdet(fit.sigma_u_ml)
    T, m = fit.nobs, 2 * 9 + 3
    assert fit.aic == pytest.approx(ld + 2 * m / T, rel=1e-13)
    assert fit.bic == pytest.approx(ld + np.log(T) * m / T, rel=1e-13)
    assert fit.hq == pytest.approx(ld + 2 * np.log(np.log(T)) * m / T, rel=1e-13)
    assert fit.fpe == pytest.approx(((T + 7) / (T - 7)) ** 3 * np.exp(ld), rel=1e-13)


@pytest.mark.parametrize("trend", ["n", "c", "ct"])
def test_units_do_not_decide_singularity(trend: str) -> None:
    """Two independent white-noise series, one multiplied by 1e7: the fit is accepted, equals
    statsmodels' VAR (outside reference library; compared in units of each series' residual
    s.d.), and equals the unit-scale fit transformed exactly — coefficients D A D^{-1},
    Σ_u = D Σ D, intercept D c for y → y D (closed form of a change of units)."""
    sm_var = pytest.importorskip("statsmodels.tsa.api").VAR
    y = np.random.default_rng(15).standard_normal((300, 2))
    D = np.array([1e7, 1.0])
    fit = arlib.fit_var(y * D, 1, trend=trend)
    unit = arlib.fit_var(y, 1, trend=trend)
    ratio = D[:, None] / D[None, :]  # [i, j] = d_i / d_j
    np.testing.assert_allclose(fit.coefs, unit.coefs * ratio, rtol=1e-12, atol=0)
    np.testing.assert_allclose(fit.sigma_u, unit.sigma_u * np.outer(D, D), rtol=1e-12)
    if trend != "n":
        np.testing.assert_allclose(fit.intercept, unit.intercept * D, rtol=1e-11)
    sm = sm_var(y * D).fit(1, trend=trend)
    s = np.sqrt(np.diag(sm.sigma_u))
    rel = s[None, :] / s[:, None]
    # statsmodels solves the same least squares its own way: agreement to 1e-8 in s.d. units
    np.testing.assert_allclose(fit.coefs * rel, sm.coefs * rel, rtol=1e-8, atol=1e-10)
    np.testing.assert_allclose(
        fit.sigma_u / np.outer(s, s), sm.sigma_u / np.outer(s, s), rtol=1e-8, atol=1e-10
    )


@pytest.mark.parametrize("trend", ["c", "ct"])
def test_series_far_from_zero_keep_their_digits(trend: str) -> None:
    """Adding a level to every series changes only the intercept (c → c + (I − Σ A_l) μ):
    at levels up to 1e6, and with nine digits between level and move, the coefficients and
    Σ_u equal those of the same series moved to level zero (an exact subtraction) to 1e-9
    (relative, in s.d. units).
    Before the fit was solved in centred coordinates it lost about six digits here."""
    from .conftest import simulate

    base = simulate(np.stack([A1, A2]), SIGMA, 300, seed=16)
    for level, move in ((np.array([1e6, -3e5, 5e4]), 1.0), (np.array([1e6, 1e6, 1e6]), 1e-3)):
        y = level + move * base
        far = arlib.fit_var(y, 2, trend=trend)
        near = arlib.fit_var(y - level, 2, trend=trend)  # exact subtraction (Sterbenz lemma)
        assert np.array_equal(y - level + level, y)
        s = np.sqrt(np.diag(near.sigma_u))
        np.testing.assert_allclose(far.coefs, near.coefs, rtol=1e-9, atol=1e-11)
        np.testing.assert_allclose(far.sigma_u / np.outer(s, s), near.sigma_u / np.outer(s, s),
                                   rtol=1e-9, atol=1e-11)  # fmt: skip
        shifted = near.intercept + (np.eye(3) - near.coefs.sum(axis=0)) @ level
        np.testing.assert_allclose(far.intercept / s, shifted / s, rtol=1e-9, atol=1e-7)
