"""Forecasts: recursion, interval construction, estimation-uncertainty term."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

import arlib

from .conftest import A1, A2, SIGMA


def test_process_forecast_closed_form_var1() -> None:
    """VAR(1): ŷ_{T+h} = μ + A^h (y_T − μ), Σ(h) = Σ_{i<h} A^i Σ A^i' (Lütkepohl 2005, Sec. 2.2.2)."""
    c = np.array([0.5, -1.0, 0.2])
    proc = arlib.var_process(A1, SIGMA, c)
    last = np.array([[1.0, 2.0, -0.5]])
    fc = arlib.forecast(proc, last, 6, coverage=0.8)
    mu = proc.mean
    for h in range(1, 7):
        Ah = np.linalg.matrix_power(A1, h)
        np.testing.assert_allclose(fc.mean[h - 1], mu + Ah @ (last[0] - mu), rtol=1e-12)
        mse = sum(
            np.linalg.matrix_power(A1, i) @ SIGMA @ np.linalg.matrix_power(A1, i).T
            for i in range(h)
        )
        np.testing.assert_allclose(fc.mse[h - 1], mse, rtol=1e-12)
    z = stats.norm.ppf(0.9)
    sd = np.sqrt(np.diagonal(fc.mse, axis1=1, axis2=2))
    np.testing.assert_allclose(fc.upper - fc.mean, z * sd)
    np.testing.assert_allclose(fc.mean - fc.lower, z * sd)
    assert not fc.mean.flags.writeable


def test_fit_forecast_defaults_to_own_data_and_uses_last_rows(var2_data: np.ndarray) -> None:
    fit = arlib.fit_var(var2_data, 2)
    a = arlib.forecast(fit, None, 4)
    b = arlib.forecast(fit, var2_data[-2:], 4)
    np.testing.assert_array_equal(a.mean, b.mean)
    one = fit.intercept + fit.coefs[0] @ var2_data[-1] + fit.coefs[1] @ var2_data[-2]
    np.testing.assert_allclose(a.mean[0], one)
    np.testing.assert_allclose(a.mse[0], fit.sigma_u)


def test_estimation_uncertainty_widens_and_first_step_is_k_over_t(var2_data: np.ndarray) -> None:
    """Ω(1) = k Σ_u so Σ_ŷ(1) = (1 + k/T_eff) Σ_u (Lütkepohl 2005, eq. 3.5.13 at h = 1)."""
    fit = arlib.fit_var(var2_data, 2)
    plain = arlib.forecast(fit, None, 5)
    wide = arlib.forecast(fit, None, 5, estimation_uncertainty=True)
    np.testing.assert_allclose(
        wide.mse[0], (1 + fit.k_regressors / fit.nobs) * fit.sigma_u, rtol=1e-10
    )
    assert (np.diagonal(wide.mse - plain.mse, axis1=1, axis2=2) > 0).all()
    np.testing.assert_array_equal(wide.mean, plain.mean)


def test_trend_forecast_continues_the_sample(var2_data: np.ndarray) -> None:
    y = var2_data + 0.02 * np.arange(len(var2_data))[:, None]
    fit = arlib.fit_var(y, 1, trend="ct")
    fc = arlib.forecast(fit, None, 2)
    T = len(y)
    step1 = fit.intercept + fit.trend_coef * (T + 1) + fit.coefs[0] @ y[-1]
    np.testing.assert_allclose(fc.mean[0], step1)
    with pytest.raises(arlib.InvalidInputError, match="trend 'n' or 'c' only"):
        arlib.forecast(fit, None, 2, estimation_uncertainty=True)


def test_process_needs_history() -> None:
    proc = arlib.var_process(np.stack([A1, A2]), SIGMA)
    with pytest.raises(arlib.InvalidInputError, match="`y` is required"):
        arlib.forecast(proc, None, 3)
    with pytest.raises(arlib.InvalidInputError, match="at least p=2 rows"):
        arlib.forecast(proc, np.zeros((1, 3)), 3)
    with pytest.raises(arlib.InvalidInputError, match="`coverage` must be a number strictly"):
        arlib.forecast(proc, np.zeros((2, 3)), 3, coverage=95)
