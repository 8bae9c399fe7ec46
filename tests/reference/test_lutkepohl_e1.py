"""Lütkepohl (2005), New Introduction to Multiple Time Series Analysis, the West German example.

Data: E1 (investment, income, consumption; Deutsche Bundesbank), read from the `e1.dat` file that
ships inside statsmodels (data file only). First differences of logs, 1960Q1–1978Q4, VAR(2) with
intercept: T = 73 usable observations.

Two kinds of checks, kept apart:

1. BOOK checks — numbers the book prints, at the precision it prints them. Each says where it
   comes from: the coefficient estimates are RECALLED FROM MEMORY (not re-read from a copy of the
   book for this test); the approximate forecast MSE matrix is the book's eq. 3.5.18 (p. 99) as
   quoted, with page and equation, in statsmodels' own test suite. Tolerance: half a unit in the
   last printed digit (+1e-12 for binary rounding), per entry.
2. REFERENCE-LIBRARY checks — statsmodels' VAR (a general-purpose library, used only in tests)
   fitted live to the same data. These are not the book's numbers and do not claim to be; they
   cover Σ̂_u, the Granger test and the lag-order criteria, whose printed book values could not be
   verified for this test. Tolerance 1e-8 relative, justified in test_statsmodels_macrodata.py
   (the same least-squares problem solved by different factorizations; differences are rounding).

`python -m tests.reference.make_e1_reference` prints arlib beside the book and statsmodels.
"""

from __future__ import annotations

import numpy as np
import pytest

import arlib

from ._data import e1_growth_1960_1978
from .test_statsmodels_macrodata import agree

NAMES = ["invest", "income", "cons"]

# --- book values ---------------------------------------------------------------------------------

# Lütkepohl (2005), Sec. 3.2.3: LS estimates of the VAR(2) with intercept, printed to 3 decimals
# (RECALLED FROM MEMORY).
BOOK_NU = np.array([-0.017, 0.016, 0.013])
BOOK_A1 = np.array([[-0.320, 0.146, 0.961], [0.044, -0.153, 0.289], [-0.002, 0.225, -0.264]])
BOOK_A2 = np.array([[-0.161, 0.115, 0.934], [0.050, 0.019, -0.010], [0.034, 0.355, -0.022]])
BOOK_COEF_HALF_UNIT = 5e-4 + 1e-12

# Lütkepohl (2005), eq. 3.5.18, p. 99: approximate 2-step forecast MSE matrix Σ̂_ŷ(2) = Σ̂_y(2) +
# Ω̂(2)/T (estimation uncertainty included), × 10^4. Source of the numbers: the book as quoted in
# statsmodels/tsa/vector_ar/tests/test_var.py (TestVARResultsLutkepohl.test_approx_mse, comment
# "3.5.18, p. 99"); not recalled. They are not statsmodels output: its default forecast_cov omits
# Ω̂(2)/T and gives 23.67 for the (1, 1) entry. 25.12 is printed to 2 decimals, the rest to 3.
BOOK_MSE2_E4 = np.array([[25.12, 0.580, 1.300], [0.580, 1.581, 0.586], [1.300, 0.586, 1.009]])
BOOK_MSE2_HALF_UNIT_E4 = np.full((3, 3), 5e-4) + 1e-12
BOOK_MSE2_HALF_UNIT_E4[0, 0] = 5e-3 + 1e-12


@pytest.fixture(scope="module")
def fit() -> arlib.VARFit:
    return arlib.fit_var(e1_growth_1960_1978(), 2, names=NAMES)


@pytest.fixture(scope="module")
def reference():  # statsmodels VARResults on the same data
    from statsmodels.tsa.api import VAR

    return VAR(e1_growth_1960_1978()).fit(2)


def test_book_sample_is_73_observations(fit: arlib.VARFit) -> None:
    """Book set-up (Sec. 3.2.3): 76 quarters 1960Q1–1978Q4 give 75 growth rates; 2 presample
    values leave T = 73, and T − Kp − 1 = 66 degrees of freedom per equation."""
    assert fit.nobs == 73
    assert fit.df_resid == 73 - 7


def test_book_coefficients_to_printed_digits(fit: arlib.VARFit) -> None:
    """Lütkepohl (2005) Sec. 3.2.3 estimates, 3 decimals (recalled from memory, see module doc)."""
    assert fit.intercept is not None
    np.testing.assert_allclose(fit.intercept, BOOK_NU, rtol=0, atol=BOOK_COEF_HALF_UNIT)
    np.testing.assert_allclose(fit.coefs[0], BOOK_A1, rtol=0, atol=BOOK_COEF_HALF_UNIT)
    np.testing.assert_allclose(fit.coefs[1], BOOK_A2, rtol=0, atol=BOOK_COEF_HALF_UNIT)


def test_book_two_step_forecast_mse_with_estimation_uncertainty(fit: arlib.VARFit) -> None:
    """Lütkepohl (2005) eq. 3.5.18, p. 99 (quoted, see BOOK_MSE2_E4): Σ̂_ŷ(2) × 10^4 to the printed
    digits. Without the Ω̂(2)/T term the (1, 1) entry is 23.67, so this checks that term too."""
    got = arlib.forecast(fit, steps=2, estimation_uncertainty=True).mse[1] * 1e4
    assert (np.abs(got - BOOK_MSE2_E4) <= BOOK_MSE2_HALF_UNIT_E4).all(), np.round(got, 5)
    plain = arlib.forecast(fit, steps=2).mse[1] * 1e4
    assert abs(plain[0, 0] - BOOK_MSE2_E4[0, 0]) > 1.0  # the book's value needs Ω̂(2)/T


# --- reference library (statsmodels, live) -------------------------------------------------------


def test_estimates_agree_with_statsmodels(fit: arlib.VARFit, reference) -> None:
    """Coefficients, intercept and Σ̂_u (divided by T − Kp − 1 = 66) against statsmodels' VAR."""
    agree(fit.intercept, reference.intercept)
    agree(fit.coefs, reference.coefs)
    agree(fit.sigma_u, reference.sigma_u)
    # ML covariance: statsmodels divides by T = 73
    agree(fit.sigma_u_ml, reference.sigma_u_mle)


def test_granger_f_test_agrees_with_statsmodels(fit: arlib.VARFit, reference) -> None:
    """H0 'income and consumption do not Granger-cause investment': λ_F, df (J, K·(T − Kp − 1)) =
    (4, 198) and p-value against statsmodels' `test_causality(kind="f")` (measured λ_F = 1.5917,
    p = 0.178: not rejected at 5%)."""
    res = arlib.granger_test(fit, "invest", ["income", "cons"])
    ref = reference.test_causality(0, [1, 2], kind="f")
    assert res.df == (4, 198) == tuple(ref.df)
    agree(res.f_stat, ref.test_statistic)
    agree(res.p_value, ref.pvalue)
    assert not res.rejects(0.05)
    assert res.null_hypothesis == "'income' and 'cons' do not Granger-cause 'invest'"


def test_lag_order_criteria_agree_with_statsmodels() -> None:
    """Max order 4 on the common sample T = 71: every criterion value and choice against
    statsmodels' `select_order(4)` (both count the intercepts in the penalty)."""
    from statsmodels.tsa.api import VAR

    y = e1_growth_1960_1978()
    sel = arlib.select_lags(y, 4, names=NAMES)
    ref = VAR(y).select_order(4)
    assert sel.nobs == 71  # 75 growth rates − 4 presample values, the same for every order
    for ours, theirs in (("aic", "aic"), ("bic", "bic"), ("hq", "hqic"), ("fpe", "fpe")):
        agree(getattr(sel, ours), np.array(ref.ics[theirs]))
    theirs = {"aic": "aic", "bic": "bic", "hq": "hqic", "fpe": "fpe"}
    assert sel.best == {k: int(ref.selected_orders[v]) for k, v in theirs.items()}
    assert sel.best == {"aic": 2, "fpe": 2, "hq": 0, "bic": 0}  # measured (both libraries)


def test_lag_criteria_are_the_books_formulas_plus_the_intercept_penalty() -> None:
    """Independent computation in the test (plain least squares for each order m = 0..4 on the
    common sample): the book's criteria (Lütkepohl 2005, eqs. 4.3.1, 4.3.2, 4.3.8, 4.3.9),
        FPE(m) = ((T + Km + 1)/(T − Km − 1))^K det Σ̃_u(m),   AIC(m) = ln det Σ̃_u(m) + 2mK²/T,
        SC(m) = ln det Σ̃_u(m) + ln T · mK²/T,            HQ(m) = ln det Σ̃_u(m) + 2 ln ln T · mK²/T,
    with Σ̃_u(m) = Û'Û/T. arlib's penalty also counts the K intercepts (documented convention), so
    its AIC, SC and HQ must exceed the book's by exactly 2K/T, ln T · K/T and 2 ln ln T · K/T at
    every order; FPE is the same formula."""
    y = e1_growth_1960_1978()
    M, K = 4, 3
    T = len(y) - M
    book = {name: np.empty(M + 1) for name in ("aic", "bic", "hq", "fpe")}
    for m in range(M + 1):
        Y = y[M:]
        Z = np.column_stack([np.ones(T)] + [y[M - i : len(y) - i] for i in range(1, m + 1)])
        U = Y - Z @ np.linalg.lstsq(Z, Y, rcond=None)[0]
        det = np.linalg.det(U.T @ U / T)
        book["aic"][m] = np.log(det) + 2 * m * K**2 / T
        book["bic"][m] = np.log(det) + np.log(T) * m * K**2 / T
        book["hq"][m] = np.log(det) + 2 * np.log(np.log(T)) * m * K**2 / T
        book["fpe"][m] = ((T + K * m + 1) / (T - K * m - 1)) ** K * det
    sel = arlib.select_lags(y, M)
    assert sel.nobs == T
    np.testing.assert_allclose(sel.aic - book["aic"], 2 * K / T, rtol=1e-9)
    np.testing.assert_allclose(sel.bic - book["bic"], np.log(T) * K / T, rtol=1e-9)
    np.testing.assert_allclose(sel.hq - book["hq"], 2 * np.log(np.log(T)) * K / T, rtol=1e-9)
    np.testing.assert_allclose(sel.fpe, book["fpe"], rtol=1e-9)
