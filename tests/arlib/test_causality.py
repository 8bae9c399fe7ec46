"""Granger tests: the Wald/F statistic against the restricted-regression form."""

from __future__ import annotations

import numpy as np
import pytest

import arlib


def _ssr(X: np.ndarray, y: np.ndarray) -> float:
    beta = np.linalg.lstsq(X, y, rcond=None)[0]
    r = y - X @ beta
    return float(r @ r)


def test_single_equation_f_equals_restricted_regression_f(var2_data: np.ndarray) -> None:
    """With one caused series the Wald form with Σ̂_u equals the classic OLS F statistic
    ((SSR_r − SSR_u)/J)/(SSR_u/(T_eff − k)) — common practice (any regression textbook)."""
    fit = arlib.fit_var(var2_data, 2, names=["a", "b", "c"])
    res = arlib.granger_test(fit, "a", ["b", "c"])
    y = var2_data
    T = len(y)
    lagged = {(lag, j): y[2 - lag : T - lag, j] for lag in (1, 2) for j in range(3)}
    full = np.column_stack(
        [np.ones(T - 2)] + [lagged[(lag, j)] for lag in (1, 2) for j in range(3)]
    )
    restricted = np.column_stack([np.ones(T - 2), lagged[(1, 0)], lagged[(2, 0)]])
    ssr_u, ssr_r = _ssr(full, y[2:, 0]), _ssr(restricted, y[2:, 0])
    f_classic = ((ssr_r - ssr_u) / 4) / (ssr_u / (T - 2 - 7))
    assert res.f_stat == pytest.approx(f_classic, rel=1e-10)
    assert res.df == (4, 3 * (T - 2 - 7))
    assert res.wald_stat == pytest.approx(4 * res.f_stat)
    assert res.wald_df == 4
    assert res.null_hypothesis == "'b' and 'c' do not Granger-cause 'a'"
    assert res.caused == ("a",) and res.causing == ("b", "c")


def test_p_values_and_power(var2_data: np.ndarray) -> None:
    fit = arlib.fit_var(var2_data, 2)
    # true A1[1, 0] = 0.2 and A2[1, 0] = 0.1: y0 causes y1 strongly on 400 rows
    strong = arlib.granger_test(fit, 1, 0)
    assert strong.p_value < 1e-3 and strong.rejects(0.01)
    assert strong.null_hypothesis == "'y0' does not Granger-cause 'y1'"
    # true A1[0, 2] = 0, A2[0, 2] = 0.05: the test returns a proper probability
    weak = arlib.granger_test(fit, 0, 2)
    assert 0.0 <= weak.p_value <= 1.0


def test_rejects_process_and_overlap(var2_data: np.ndarray) -> None:
    fit = arlib.fit_var(var2_data, 1)
    proc = arlib.var_process(fit.coefs, fit.sigma_u)
    with pytest.raises(arlib.InvalidInputError, match="estimated VARFit"):
        arlib.granger_test(proc, 0, 1)  # type: ignore[arg-type]
    with pytest.raises(arlib.InvalidInputError, match=r"overlap in \['y1'\]"):
        arlib.granger_test(fit, [0, 1], [1, 2])
    with pytest.raises(arlib.InvalidInputError, match=r"index 5, outside 0\.\.2"):
        arlib.granger_test(fit, 5, 1)
