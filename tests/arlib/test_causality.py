"""Granger tests: the Wald/F statistic against the restricted-regression form."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

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
    # Wald form computed from the two regressions, not from λ_F: (SSR_r − SSR_u)/σ̂²_11
    wald_classic = (ssr_r - ssr_u) / (ssr_u / (T - 2 - 7))
    assert res.wald_stat == pytest.approx(wald_classic, rel=1e-10)
    assert res.wald_df == 4
    assert res.wald_p_value == pytest.approx(stats.chi2.sf(wald_classic, 4), rel=1e-9)
    assert res.p_value == pytest.approx(stats.f.sf(f_classic, 4, 3 * (T - 9)), rel=1e-9)
    assert res.null_hypothesis == "'b' and 'c' do not Granger-cause 'a'"
    assert res.caused == ("a",) and res.causing == ("b", "c")


def test_p_values_and_power(var2_data: np.ndarray) -> None:
    fit = arlib.fit_var(var2_data, 2)
    # true A1[1, 0] = 0.2 and A2[1, 0] = 0.1: y0 causes y1 strongly on 400 rows
    strong = arlib.granger_test(fit, 1, 0)
    assert strong.p_value < 1e-3 and strong.rejects(0.01)
    assert strong.null_hypothesis == "'y0' does not Granger-cause 'y1'"
    # true A1[0, 2] = 0, A2[0, 2] = 0.05: the p-value of the restricted-regression F for
    # equation 0 without the 2 lags of y2, from F(2, n·(T_eff − k)) (Lütkepohl 2005, eq. 3.6.7)
    weak = arlib.granger_test(fit, 0, 2)
    y = var2_data
    T = len(y)
    lags = {(lag, j): y[2 - lag : T - lag, j] for lag in (1, 2) for j in range(3)}
    keep = [(lag, j) for lag in (1, 2) for j in range(3)]
    full = np.column_stack([np.ones(T - 2)] + [lags[c] for c in keep])
    restricted = np.column_stack([np.ones(T - 2)] + [lags[c] for c in keep if c[1] != 2])
    ssr_u, ssr_r = _ssr(full, y[2:, 0]), _ssr(restricted, y[2:, 0])
    f_classic = ((ssr_r - ssr_u) / 2) / (ssr_u / (T - 2 - 7))
    assert weak.f_stat == pytest.approx(f_classic, rel=1e-10)
    assert weak.p_value == pytest.approx(stats.f.sf(f_classic, 2, 3 * (T - 9)), rel=1e-9)


def test_block_wald_statistic_equals_the_explicit_restriction_matrix_form(
    var2_data: np.ndarray,
) -> None:
    """Two caused series: λ_W = (Cβ)'[C((Z'Z)^{-1} ⊗ Σ̂_u)C']^{-1}(Cβ) with β = vec(B') built
    here with an explicit 0/1 matrix C and np.kron (Lütkepohl 2005, eq. 3.6.5), λ_F = λ_W/J."""
    fit = arlib.fit_var(var2_data, 2)
    res = arlib.granger_test(fit, [0, 1], 2)
    B = np.asarray(fit.params)  # (k, n): row r = regressor, column e = equation
    k, n = B.shape
    beta = B.reshape(-1)  # index r·n + e: regressor-major, so Cov = (Z'Z)^{-1} ⊗ Σ̂_u
    cov = np.kron(fit.gram_inv, fit.sigma_u)
    restricted = [(1 + (lag - 1) * n + 2) * n + e for lag in (1, 2) for e in (0, 1)]
    C = np.zeros((len(restricted), k * n))
    C[np.arange(len(restricted)), restricted] = 1.0
    Cb = C @ beta
    wald = float(Cb @ np.linalg.solve(C @ cov @ C.T, Cb))
    assert res.wald_df == 4 and res.df == (4, 3 * fit.df_resid)
    assert res.wald_stat == pytest.approx(wald, rel=1e-10)
    assert res.f_stat == pytest.approx(wald / 4, rel=1e-10)
    assert res.wald_p_value == pytest.approx(stats.chi2.sf(wald, 4), rel=1e-9)


def test_rejects_process_and_overlap(var2_data: np.ndarray) -> None:
    fit = arlib.fit_var(var2_data, 1)
    proc = arlib.var_process(fit.coefs, fit.sigma_u)
    with pytest.raises(arlib.InvalidInputError, match="estimated VARFit"):
        arlib.granger_test(proc, 0, 1)  # type: ignore[arg-type]  # a VARProcess, refused on purpose
    with pytest.raises(arlib.InvalidInputError, match=r"overlap in \['y1'\]"):
        arlib.granger_test(fit, [0, 1], [1, 2])
    with pytest.raises(arlib.InvalidInputError, match=r"index 5, outside 0\.\.2"):
        arlib.granger_test(fit, 5, 1)
