"""arlib against statsmodels (a general-purpose reference library, used only in tests) on the US
macro data set statsmodels ships (statsmodels.datasets.macrodata), log growth rates.

Every number is computed live by both libraries, so no literal reference values are stored.

Tolerance: agreement to 1e-8 relative to the largest entry of the reference array. Both libraries
solve the same least-squares problem in double precision by different factorizations (QR here,
SVD-based lstsq there) and the column-scaled designs have condition numbers below 1e4, so
differences are rounding (about 1e-14 measured); 1e-8 leaves room for other BLAS builds while
still catching any convention slip, which moves numbers by 1e-3 or more.

Conventions compared (and tested as choices, not only as numbers):
- trend "ct": the trend column counts rows of the data from 1 (first usable row = p + 1); both.
- information criteria: the penalty counts all n·k coefficients, intercepts and trend slopes
  included (statsmodels 0.15 does the same; Lütkepohl's book formula counts only p·n²).
- FEVD layout: statsmodels' `fevd(H).decomp` is [variable, step, shock]; arlib is
  [step, variable, shock].
- Granger F test: Σ̂_u with the T_eff − k correction and df (J, n·(T_eff − k)) in both.
- Forecast intervals: statsmodels' `forecast_interval` omits estimation uncertainty (as arlib's
  default); `forecast_cov(method="auto")` adds Ω(h)/T (arlib's `estimation_uncertainty=True`).
"""

from __future__ import annotations

import itertools
import warnings

import numpy as np
import pytest

import arlib

from ._data import macro_growth

CASES = {
    # name: (series, lags, trend)
    "gdp-cons-inv VAR(2) c": (("realgdp", "realcons", "realinv"), 2, "c"),
    "4 series VAR(3) ct": (("realgdp", "realcons", "realinv", "realgovt"), 3, "ct"),
    "gdp-inv VAR(1) n": (("realgdp", "realinv"), 1, "n"),
}
RTOL = 1e-8


def agree(ours: np.ndarray | float, ref: np.ndarray | float) -> None:
    """max |ours − ref| <= 1e-8 · max |ref| (see module docstring)."""
    ours_a, ref_a = np.asarray(ours, dtype=float), np.asarray(ref, dtype=float)
    assert ours_a.shape == ref_a.shape
    scale = max(float(np.abs(ref_a).max()), np.finfo(float).tiny)
    diff = float(np.abs(ours_a - ref_a).max())
    assert diff <= RTOL * scale, f"max abs diff {diff:.3e} vs scale {scale:.3e}"


@pytest.fixture(scope="module", params=list(CASES), ids=list(CASES))
def pair(request: pytest.FixtureRequest) -> tuple[arlib.VARFit, object, np.ndarray]:
    from statsmodels.tsa.api import VAR

    series, lags, trend = CASES[request.param]
    y = macro_growth(series)
    ours = arlib.fit_var(y, lags, trend=trend, names=list(series))
    ref = VAR(y).fit(lags, trend=trend)
    return ours, ref, y


def test_estimates(pair: tuple) -> None:
    ours, ref, _ = pair
    agree(ours.params, ref.params)
    agree(ours.coefs, ref.coefs)
    agree(ours.stderr, ref.stderr)
    agree(ours.sigma_u, ref.sigma_u)
    agree(ours.sigma_u_ml, ref.sigma_u_mle)
    agree(ours.resid, ref.resid)
    assert ours.nobs == ref.nobs and ours.df_resid == ref.df_resid
    agree(ours.llf, ref.llf)
    assert ours.is_stable == ref.is_stable()


def test_information_criteria_count_intercepts_like_statsmodels(pair: tuple) -> None:
    ours, ref, _ = pair
    agree(ours.aic, ref.aic)
    agree(ours.bic, ref.bic)
    agree(ours.hq, ref.hqic)
    agree(ours.fpe, ref.fpe)
    # the convention, explicitly: penalty uses n·k = p·n² + n·d free coefficients
    _, logdet = np.linalg.slogdet(ours.sigma_u_ml)
    assert ours.aic == pytest.approx(logdet + 2 * ours.n * ours.k_regressors / ours.nobs, rel=1e-13)


def test_unit_and_orthogonal_responses(pair: tuple) -> None:
    ours, ref, _ = pair
    agree(arlib.impulse_responses(ours, 12, shocks="unit"), ref.ma_rep(12))
    agree(arlib.impulse_responses(ours, 12), ref.orth_ma_rep(12))
    irf = ref.irf(12)
    agree(arlib.impulse_responses(ours, 12, cumulative=True), irf.orth_cum_effects)


def test_asymptotic_response_bands(pair: tuple) -> None:
    """Delta-method standard errors of unit and Cholesky responses, plain and cumulative, against
    statsmodels' `irf(H).stderr` / `cum_effect_stderr` (Lütkepohl 2005, Sec. 3.7, in both); the
    band limits are Θ̂ ± z_{(1+c)/2} · s.e. with z from scipy's normal quantile."""
    from scipy import stats

    ours, ref, _ = pair
    irf = ref.irf(8)
    for shocks, orth in (("unit", False), ("cholesky", True)):
        for cumulative, ref_se in ((False, irf.stderr), (True, irf.cum_effect_stderr)):
            band = arlib.irf_bands(
                ours, 8, shocks=shocks, kind="asymptotic", coverage=0.8, cumulative=cumulative
            )
            se = ref_se(orth=orth)
            agree(band.std, se)
            z = stats.norm.ppf(0.9)
            agree(band.lower, band.point - z * se)
            agree(band.upper, band.point + z * se)


def test_cholesky_decomposition(pair: tuple) -> None:
    ours, ref, _ = pair
    agree(arlib.variance_decomposition(ours, 10), ref.fevd(10).decomp.transpose(1, 0, 2))


def test_granger_f_tests_every_pair(pair: tuple) -> None:
    ours, ref, _ = pair
    n = ours.n
    for caused, causing in itertools.permutations(range(n), 2):
        res = arlib.granger_test(ours, caused, causing)
        f_ref = ref.test_causality(caused, causing, kind="f")
        agree(res.f_stat, f_ref.test_statistic)
        agree(res.p_value, f_ref.pvalue)
        assert res.df == tuple(f_ref.df)
        w_ref = ref.test_causality(caused, causing, kind="wald")
        agree(res.wald_stat, w_ref.test_statistic)
        agree(res.wald_p_value, w_ref.pvalue)
    # a block test: all others cause the first
    res = arlib.granger_test(ours, 0, list(range(1, n)))
    agree(res.f_stat, ref.test_causality(0, list(range(1, n)), kind="f").test_statistic)


def test_lag_choices_and_criteria_tables(pair: tuple) -> None:
    from statsmodels.tsa.api import VAR

    ours, _, y = pair
    sel = arlib.select_lags(y, 8, trend=ours.trend)
    ref = VAR(y).select_order(8, trend=ours.trend)
    # statsmodels starts its table at p = 1 when trend = "n" (p = 0 would be pure white noise
    # with no parameters); arlib keeps p = 0 in every table. Compare over the common rows.
    skip = len(sel.aic) - len(ref.ics["aic"])
    assert skip == (1 if ours.trend == "n" else 0)
    ours_best = {
        k: skip + int(np.argmin(getattr(sel, k)[skip:])) for k in ("aic", "bic", "hq", "fpe")
    }
    assert ours_best == {
        "aic": ref.selected_orders["aic"],
        "bic": ref.selected_orders["bic"],
        "hq": ref.selected_orders["hqic"],
        "fpe": ref.selected_orders["fpe"],
    }
    if skip == 0:
        assert sel.best == ours_best
    agree(sel.aic[skip:], ref.ics["aic"])
    agree(sel.bic[skip:], ref.ics["bic"])
    agree(sel.hq[skip:], ref.ics["hqic"])
    agree(sel.fpe[skip:], ref.ics["fpe"])


@pytest.mark.parametrize("coverage", [0.95, 0.9])
def test_forecast_intervals(pair: tuple, coverage: float) -> None:
    ours, ref, y = pair
    fc = arlib.forecast(ours, y, 8, coverage=coverage)
    mean, lower, upper = ref.forecast_interval(y[-ours.lags :], 8, alpha=1 - coverage)
    agree(fc.mean, mean)
    agree(fc.lower, lower)
    agree(fc.upper, upper)
    agree(fc.mse, ref.forecast_cov(8))


def test_forecast_mse_with_estimation_uncertainty() -> None:
    """Lütkepohl (2005) eq. 3.5.13, Σ_ŷ(h) = Σ_y(h) + Ω(h)/T. statsmodels adds the term only
    with exactly one deterministic term (an intercept), so the "c" case is compared; arlib also
    covers trend "n" (tests/arlib/test_forecast.py) and refuses "ct"."""
    from statsmodels.tsa.api import VAR

    series, lags, trend = CASES["gdp-cons-inv VAR(2) c"]
    y = macro_growth(series)
    ref = VAR(y).fit(lags, trend=trend)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # statsmodels notes it added parameter uncertainty
        cov = ref.forecast_cov(8, method="auto")
    ours = arlib.fit_var(y, lags, trend=trend)
    agree(arlib.forecast(ours, y, 8, estimation_uncertainty=True).mse, cov)


def test_delta_method_standard_errors(pair: tuple) -> None:
    """Lütkepohl (2005) Sec. 3.7 asymptotic standard errors of unit, Cholesky and cumulative
    responses (statsmodels irf.stderr / cum_effect_stderr)."""
    ours, ref, _ = pair
    irf = ref.irf(10)
    agree(arlib.irf_bands(ours, 10, kind="asymptotic").std, irf.stderr(orth=True))
    agree(arlib.irf_bands(ours, 10, kind="asymptotic", shocks="unit").std, irf.stderr(orth=False))
    agree(
        arlib.irf_bands(ours, 10, kind="asymptotic", cumulative=True).std,
        irf.cum_effect_stderr(orth=True),
    )


def test_residual_checks(pair: tuple) -> None:
    ours, ref, _ = pair
    h = ours.lags + 8
    port = arlib.portmanteau_test(ours, h)
    plain, adjusted = ref.test_whiteness(h), ref.test_whiteness(h, adjusted=True)
    if ours.trend == "n":
        # statsmodels demeans residuals before the autocovariances; Lütkepohl's eq. 4.4.23 (and
        # arlib) does not. With an intercept the residuals have mean zero and the two coincide;
        # without one they differ slightly, so only the degrees of freedom are compared here.
        assert port.df == plain.df
    else:
        agree(port.statistic, plain.test_statistic)
        agree(port.adjusted_statistic, adjusted.test_statistic)
        agree(port.p_value, plain.pvalue)
        assert port.df == plain.df
    norm = arlib.normality_test(ours)
    ref_norm = ref.test_normality()
    agree(norm.statistic, ref_norm.test_statistic)
    agree(norm.p_value, ref_norm.pvalue)
    assert norm.df == ref_norm.df


def test_autocovariances_of_the_fitted_process(pair: tuple) -> None:
    ours, ref, _ = pair
    # statsmodels' var_acf mishandles nlags=0 for p > 1, so compare from 5 lags
    agree(arlib.autocovariance(ours, 5), ref.acf(5))
