"""Lütkepohl (2005), New Introduction to Multiple Time Series Analysis, the West German example.

Data: E1 (investment, income, consumption; Deutsche Bundesbank), read from the `e1.dat` file that
ships inside statsmodels (data file only). First differences of logs, 1960Q1–1978Q4, VAR(2) with
intercept: T = 73 usable observations.

The book values below are RECALLED FROM MEMORY and were CONFIRMED WITH STATSMODELS
(tests/reference/make_e1_reference.py prints them). Tolerance: the book prints 3 decimals, so
each value must lie within half a unit of the last printed digit (5e-4), plus 1e-12 for rounding.
"""

from __future__ import annotations

import numpy as np
import pytest

import arlib

from ._data import e1_growth_1960_1978

NAMES = ["invest", "income", "cons"]
PRINTED = 5e-4 + 1e-12  # half a unit in the 3rd decimal

# Lütkepohl (2005), Sec. 3.2.3: LS estimates of the VAR(2) with intercept (recalled from memory,
# confirmed with statsmodels).
BOOK_NU = np.array([-0.017, 0.016, 0.013])
BOOK_A1 = np.array([[-0.320, 0.146, 0.961], [0.044, -0.153, 0.289], [-0.002, 0.225, -0.264]])
BOOK_A2 = np.array([[-0.161, 0.115, 0.934], [0.050, 0.019, -0.010], [0.034, 0.355, -0.022]])
# Σ̂_u × 10^4, divided by T − Kp − 1 = 73 − 7 (recalled from memory, confirmed with statsmodels)
BOOK_SIGMA_E4 = np.array([[21.296, 0.716, 1.232], [0.716, 1.373, 0.615], [1.232, 0.615, 0.892]])


@pytest.fixture(scope="module")
def fit() -> arlib.VARFit:
    return arlib.fit_var(e1_growth_1960_1978(), 2, names=NAMES)


def test_sample_is_73_observations(fit: arlib.VARFit) -> None:
    """Book: T = 73 after 2 presample values of the 75 growth rates (Sec. 3.2.3)."""
    assert fit.nobs == 73
    assert fit.df_resid == 73 - 7


def test_coefficients_to_printed_digits(fit: arlib.VARFit) -> None:
    """Lütkepohl (2005) Sec. 3.2.3 coefficient estimates, 3 decimals (recalled; statsmodels-confirmed)."""
    assert fit.intercept is not None
    np.testing.assert_allclose(fit.intercept, BOOK_NU, rtol=0, atol=PRINTED)
    np.testing.assert_allclose(fit.coefs[0], BOOK_A1, rtol=0, atol=PRINTED)
    np.testing.assert_allclose(fit.coefs[1], BOOK_A2, rtol=0, atol=PRINTED)


def test_sigma_u_to_printed_digits(fit: arlib.VARFit) -> None:
    """Lütkepohl (2005) Sec. 3.2.3 Σ̂_u (× 10^4), 3 decimals (recalled; statsmodels-confirmed)."""
    np.testing.assert_allclose(fit.sigma_u * 1e4, BOOK_SIGMA_E4, rtol=0, atol=PRINTED)
    # the ML estimate is the same matrix scaled by (T − k)/T
    np.testing.assert_allclose(fit.sigma_u_ml, fit.sigma_u * 66 / 73, rtol=1e-14)


def test_lag_order_choices_max_four() -> None:
    """Lütkepohl (2005) Sec. 4.3 (Table 4.5): with max order 4, AIC and FPE choose 2, HQ and SC
    choose 0 (recalled from memory; confirmed with statsmodels' select_order)."""
    sel = arlib.select_lags(e1_growth_1960_1978(), 4, names=NAMES)
    assert sel.nobs == 71  # 75 growth rates − 4 presample values, the same for every order
    assert sel.best == {"aic": 2, "fpe": 2, "hq": 0, "bic": 0}


def test_lag_choices_identical_under_the_books_penalty() -> None:
    """Convention check: the book's AIC(m) = ln|Σ̃_u(m)| + 2mK²/T (Lütkepohl eq. 4.3.2) counts only
    lag coefficients; arlib also counts the K intercepts. The two differ by the constant 2K/T,
    so they choose the same order."""
    sel = arlib.select_lags(e1_growth_1960_1978(), 4)
    T, K = sel.nobs, 3
    book_aic = sel.aic - 2 * K / T
    book_sc = sel.bic - np.log(T) * K / T
    book_hq = sel.hq - 2 * np.log(np.log(T)) * K / T
    assert int(np.argmin(book_aic)) == 2
    assert int(np.argmin(book_sc)) == 0 and int(np.argmin(book_hq)) == 0


def test_granger_f_test_uses_f_4_198(fit: arlib.VARFit) -> None:
    """Lütkepohl (2005) Sec. 3.6.2: H0 'income and consumption do not Granger-cause investment',
    λ_F = 1.59 with F(4, 198) distribution (recalled from memory; confirmed with statsmodels),
    not rejected at 5%. 198 = K·(T − Kp − 1) = 3 · (73 − 7)."""
    res = arlib.granger_test(fit, "invest", ["income", "cons"])
    assert res.df == (4, 198)
    assert res.f_stat == pytest.approx(1.59, abs=0.005 + 1e-12)  # printed to 2 decimals
    assert not res.rejects(0.05)
    assert res.null_hypothesis == "'income' and 'cons' do not Granger-cause 'invest'"
