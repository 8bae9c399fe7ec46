"""The rolling-window engine gives, window by window, the numbers of the single-fit functions.

Reference for every window: `fit_var`, `connectedness`, `granger_test`, `impulse_responses`,
`variance_decomposition`, `portmanteau_test` and `select_lags` on the same rows (those functions
are themselves checked against published examples and statsmodels in tests/reference/), plus
statsmodels' VAR directly as an outside reference library for a few windows, and LAPACK's
eigenvalues for the spectral radius.

Tolerance: the contract is agreement to 1e-8. The engine solves each window from cross-products
by Cholesky; its relative error is about κ·1e-16 and windows with κ > 1e6 (or failing the other
guards) are refitted directly, so 1e-8 leaves a wide margin (observed differences are ~1e-13).
Quantities with units are compared in units of each series' residual standard deviation
(`check_window`), so an absolute floor of 1e-10 only matters for entries that are zero in exact
arithmetic, whatever the units of the data (tests with levels to 1e6 and unit ratios to 1e8).
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from scipy import stats

import arlib
from arlib import _rolling_kernels as K
from arlib._diagnostics import portmanteau_test

RTOL = 1e-8
ATOL = 1e-10


def close(actual: np.ndarray, expected: np.ndarray, what: str) -> None:
    np.testing.assert_allclose(actual, expected, rtol=RTOL, atol=ATOL, err_msg=what)


def random_var(n: int, p: int, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
    """A random stable VAR(p): coefficients (p, n, n) with companion spectral radius <= 0.9,
    and a random covariance with correlations (the scenario is invented for the test)."""
    A = rng.standard_normal((p, n, n)) * 0.45 / np.sqrt(n) / p
    radius = float(np.abs(np.linalg.eigvals(arlib.companion_matrix(A))).max())
    if radius > 0.9:
        A *= 0.9 / radius
    F = rng.standard_normal((n, n)) / np.sqrt(n)
    return A, F @ F.T + 0.5 * np.eye(n)


def simulate(
    n: int, p: int, T: int, seed: int, *, trend: str = "c", scale: float = 1.0
) -> np.ndarray:
    """T rows from a random stable VAR(p) with intercept (and a mild drift for "ct")."""
    rng = np.random.default_rng(seed)
    A, S = random_var(n, p, rng)
    chol = np.linalg.cholesky(S)
    c = rng.uniform(-0.5, 0.5, n)
    y = np.zeros((T + 100, n))
    for t in range(p, T + 100):
        y[t] = c + sum(A[i] @ y[t - 1 - i] for i in range(p)) + chol @ rng.standard_normal(n)
        if trend == "ct":
            y[t] += 0.002 * t
    return scale * y[100:]


def check_window(res: arlib.RollingVAR, w: int, rows: np.ndarray, lags: int) -> None:
    """Compare window w of `res` with the single-fit functions on `rows`.

    Quantities with units are compared in units of each series' residual standard deviation
    s_i = sqrt(Σ̂_u,ii) of the reference fit (coefficients A_ij s_j / s_i, Σ_u,ij / (s_i s_j),
    intercepts c_i / s_i, ...): the same comparison as on the raw numbers for unit-scale data,
    and a meaningful one for series in wildly different units (a raw absolute floor would hide
    every error in a series measured in small units)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", arlib.UnstableProcessWarning)
        fit = arlib.fit_var(rows, lags, trend=res.trend)
    n = fit.n
    s = np.sqrt(np.diag(fit.sigma_u))
    assert res.ok[w] and res.skip_reason[w] == ""
    assert res.nobs[w] == fit.nobs and res.lags[w] == lags
    ratio = s[None, :] / s[:, None]  # [i, j] = s_j / s_i
    close(res.coefs[w, :lags] * ratio, fit.coefs * ratio, "coefs")
    assert np.all(res.coefs[w, lags:] == 0.0)
    close(res.sigma_u[w] / np.outer(s, s), fit.sigma_u / np.outer(s, s), "sigma_u")
    if fit.intercept is not None:
        close(res.intercept[w] / s, fit.intercept / s, "intercept")
    if fit.trend_coef is not None:
        close(res.trend_coef[w] / s, fit.trend_coef / s, "trend_coef")
    close(res.spectral_radius[w], fit.spectral_radius, "spectral radius")
    for name in ("aic", "bic", "hq", "fpe"):
        close(getattr(res, name)[w], getattr(fit, name), name)
    conn = arlib.connectedness(fit, res.horizon)
    close(res.pairwise[w], conn.table, "pairwise table")
    close(res.total_connectedness[w], conn.total, "total connectedness")
    close(res.to_others[w], conn.to_others, "to others")
    close(res.from_others[w], conn.from_others, "from others")
    close(res.net[w], conn.net, "net")
    if res.granger_f is not None:
        for i in range(n):
            assert np.isnan(res.granger_f[w, i, i]) and np.isnan(res.granger_p[w, i, i])
            for j in range(n):
                if i != j:
                    g = arlib.granger_test(fit, caused=i, causing=j)
                    close(res.granger_f[w, i, j], g.f_stat, f"granger F [{i}, {j}]")
                    close(res.granger_p[w, i, j], g.p_value, f"granger p [{i}, {j}]")
                    assert tuple(res.granger_df[w]) == g.df
    if res.responses is not None:
        irf = arlib.impulse_responses(fit, res.horizon, shocks=res.response_kind)
        # response of i in units of s_i; a unit shock to j is one s_j per s_j of shock
        unit = s[:, None] if res.response_kind != "unit" else s[:, None] / s[None, :]
        close(res.responses[w] / unit, irf / unit, f"{res.response_kind} responses")
    if res.decomposition is not None:
        dec = arlib.variance_decomposition(fit, res.horizon, method=res.decomposition_kind)
        close(res.decomposition[w], dec, f"{res.decomposition_kind} decomposition")
    if res.portmanteau_p is not None:
        port = portmanteau_test(fit, res.portmanteau_lags)
        close(res.portmanteau_p[w], port.adjusted_p_value, "portmanteau p-value")


# n = 1..15 across the cases; lags 1–3; every trend; every stored identification
CASES = [
    (1, 1, "c", "unit", "cholesky"),
    (1, 3, "ct", "generalized", "generalized"),
    (2, 2, "n", "cholesky", "generalized"),
    (3, 1, "ct", "generalized", "cholesky"),
    (4, 3, "c", "unit", "generalized"),
    (6, 2, "c", "cholesky", "cholesky"),
    (9, 1, "n", "generalized", None),
    (12, 2, "ct", None, "generalized"),
    (15, 1, "c", "unit", None),
    (15, 2, "ct", "cholesky", "cholesky"),
]


@pytest.mark.parametrize(("n", "p", "trend", "resp", "dec"), CASES)
def test_windows_equal_single_fit_functions(
    n: int, p: int, trend: str, resp: str | None, dec: str | None
) -> None:
    window = max(60, 2 * (p + 2 + n * p + n))
    y = simulate(n, p, window + 90, seed=100 * n + 10 * p, trend=trend)
    res = arlib.rolling_var(
        y, window, p, 6, trend=trend, step=3, responses=resp, decomposition=dec,
        portmanteau_lags=p + 4,
    )  # fmt: skip
    assert res.ok.all()
    assert np.array_equal(res.ends, np.arange(window - 1, y.shape[0], 3))
    rng = np.random.default_rng(n)
    for w in rng.choice(len(res), size=5, replace=False):
        check_window(res, int(w), y[res.starts[w] : res.ends[w] + 1], p)


@pytest.mark.slow
@pytest.mark.parametrize("n", list(range(1, 16)))
@pytest.mark.parametrize("p", [1, 2, 3])
@pytest.mark.parametrize("trend", ["n", "c", "ct"])
def test_many_random_windows_equal_single_fits(n: int, p: int, trend: str) -> None:
    window = max(50, p + 2 + n * p + n + 12)
    y = simulate(n, p, window + 300, seed=7 * n + p, trend=trend)
    res = arlib.rolling_var(y, window, p, 5, trend=trend, responses="generalized")
    rng = np.random.default_rng(n * p)
    for w in rng.choice(len(res), size=12, replace=False):
        check_window(res, int(w), y[res.starts[w] : res.ends[w] + 1], p)


def test_headline_shape_against_statsmodels() -> None:
    """Outside reference: statsmodels' VAR on three windows (coefficients, Σ_u, the Granger F
    statistic of its `test_causality`, which uses the same F(p, n·(T − k)) form)."""
    sm_var = pytest.importorskip("statsmodels.tsa.api").VAR
    y = simulate(5, 2, 400, seed=3)
    res = arlib.rolling_var(y, 150, 2, 10)
    for w in (0, 97, len(res) - 1):
        sm = sm_var(y[res.starts[w] : res.ends[w] + 1]).fit(2, trend="c")
        close(res.coefs[w], sm.coefs, "coefs vs statsmodels")
        close(res.intercept[w], sm.intercept, "intercept vs statsmodels")
        close(res.sigma_u[w], sm.sigma_u, "sigma_u vs statsmodels")
        test = sm.test_causality(caused=1, causing=3, kind="f")
        close(res.granger_f[w, 1, 3], test.test_statistic, "Granger F vs statsmodels")
        close(res.granger_p[w, 1, 3], test.pvalue, "Granger p vs statsmodels")
        assert tuple(res.granger_df[w]) == tuple(test.df)


def test_expanding_windows_equal_fits_from_row_zero() -> None:
    y = simulate(4, 2, 260, seed=11, trend="ct")
    res = arlib.rolling_var(y, 80, 2, 5, trend="ct", expanding=True, step=7)
    assert np.all(res.starts == 0)
    assert np.array_equal(res.nobs, res.ends + 1 - 2)
    for w in (0, 5, len(res) // 2, len(res) - 1):
        check_window(res, w, y[: res.ends[w] + 1], 2)


def test_after_and_ends_reproduce_the_full_run() -> None:
    y = simulate(5, 2, 900, seed=5)
    full = arlib.rolling_var(y, 120, 2, 8, responses="generalized")
    # nightly case: only windows ending after a given row
    new = arlib.rolling_var(y, 120, 2, 8, responses="generalized", after=850)
    assert np.array_equal(new.ends, full.ends[full.ends > 850])
    # blocks of ends, as the pipeline splits a universe across workers, joined back
    parts = np.array_split(full.ends, 3)
    blocks = [arlib.rolling_var(y, 120, 2, 8, responses="generalized", ends=e) for e in parts]
    joined = arlib.RollingVAR.concat(blocks[::-1])
    sel = full.ends > 850
    for name in ("coefs", "intercept", "sigma_u", "spectral_radius", "aic", "pairwise",
                 "total_connectedness", "granger_f", "granger_p", "responses", "nobs", "ends"):  # fmt: skip
        np.testing.assert_allclose(getattr(new, name), getattr(full, name)[sel], rtol=1e-11,
                                   atol=1e-13, err_msg=name)  # fmt: skip
        np.testing.assert_allclose(getattr(joined, name), getattr(full, name), rtol=1e-11,
                                   atol=1e-13, err_msg=name)  # fmt: skip
    assert not joined.coefs.flags.writeable


def test_sparse_explicit_ends() -> None:
    y = simulate(3, 1, 700, seed=8)
    res = arlib.rolling_var(y, 100, 1, 5, ends=np.array([99, 400, 401, 699]))
    for w in range(4):
        check_window(res, w, y[res.starts[w] : res.ends[w] + 1], 1)


def test_gaps_use_only_complete_observations() -> None:
    """A NaN row removes the observations that need it (itself and the next p rows)."""
    n, p, window = 3, 2, 80
    y = simulate(n, p, 300, seed=21)
    y[150, 1] = np.nan  # one value missing: the whole row is a gap
    res = arlib.rolling_var(y, window, p, 5, granger=True)
    for w in range(len(res)):
        s, e = res.starts[w], res.ends[w]
        if e < 150 or s > 150:  # window without the gap: an ordinary fit
            assert res.nobs[w] == window - p
            continue
        t = np.arange(s + p, e + 1)
        keep = (t < 150) | (t > 150 + p)  # observations whose rows t−p..t avoid row 150
        assert res.nobs[w] == keep.sum()
    # reference for one window with the gap in the middle: least squares on complete rows
    w = int(np.flatnonzero(res.starts == 120)[0])
    t = np.arange(120 + p, res.ends[w] + 1)
    t = t[(t < 150) | (t > 150 + p)]
    Z = np.column_stack([np.ones(t.size)] + [y[t - lag] for lag in range(1, p + 1)])
    B, *_ = np.linalg.lstsq(Z, y[t], rcond=None)
    U = y[t] - Z @ B
    close(res.intercept[w], B[0], "intercept with a gap")
    close(res.coefs[w], B[1:].reshape(p, n, n).transpose(0, 2, 1), "coefs with a gap")
    close(res.sigma_u[w], U.T @ U / (t.size - Z.shape[1]), "sigma_u with a gap")


def test_gap_in_first_row_equals_fit_on_following_rows() -> None:
    """With a constant only, a NaN first row leaves exactly the fit on the rows after it."""
    y = simulate(3, 1, 200, seed=4)
    y[50] = np.nan
    res = arlib.rolling_var(y, 60, 1, 5, ends=np.array([109]))
    assert res.starts[0] == 50
    check_window(res, 0, y[51:110], 1)


def test_windows_with_too_few_observations_are_skipped() -> None:
    """Skipped exactly when fewer than k + n usable observations remain (k = 3, n = 2)."""
    y = simulate(2, 1, 200, seed=9)
    y[100:140] = np.nan
    res = arlib.rolling_var(y, 45, 1, 5)
    short = res.nobs < 5
    assert short.sum() >= 5
    assert not res.ok[short].any() and res.ok[~short].all()
    for w in np.flatnonzero(short):
        assert "usable observations" in res.skip_reason[w]
        assert np.isnan(res.coefs[w]).all() and np.isnan(res.total_connectedness[w])
        assert np.isnan(res.granger_p[w]).all()
    edge = int(np.flatnonzero(~short & (res.starts > 95))[0])  # 5 observations after the gap
    assert res.nobs[edge] == 5
    check_window(res, edge, y[141 - 1 : res.ends[edge] + 1], 1)
    fine = int(np.flatnonzero(res.ends < 100)[-1])
    check_window(res, fine, y[res.starts[fine] : res.ends[fine] + 1], 1)


def test_near_collinear_window_matches_direct_fit_or_is_marked() -> None:
    """Series 2 = series 0 + tiny noise over rows 200..299. Windows there have a huge condition
    number (κ ≈ 1e10); they are refitted directly, by `fit_var`'s own computation, so their
    coefficients, intercepts and Σ_u are `fit_var`'s bit for bit. What is derived from them
    agrees to the sensitivity of each quantity at that conditioning (observed, with margin):
    connectedness and Granger F to 1e-8 relative; responses, whose moving-average recursion
    sums coefficients of ±1e4 that nearly cancel, to 1e-7 of their largest entry (observed
    2e-8, the same recursion in another order of operations); the spectral radius, an eigenvalue
    of a far-from-normal companion matrix here, to 1e-6 relative (observed 4e-8); the
    information criteria, through log det of a near-singular Σ̃_u, to 1e-5 absolute (observed
    4e-7 — log det moves by about cond(Σ̃_u) · 1e-16). An exact copy makes the regressors
    singular: those windows are skipped with fit_var's reason, the rest of the run is
    unaffected."""
    rng = np.random.default_rng(2)
    y = simulate(3, 1, 400, seed=12)
    y[200:300, 2] = y[200:300, 0] + 1e-5 * rng.standard_normal(100)
    res = arlib.rolling_var(y, 80, 1, 5, responses="generalized")
    near = (res.starts >= 200) & (res.ends < 300)
    assert res.condition_number[near].min() > 1e6 > res.condition_number[res.ends < 190].max()
    for w in np.flatnonzero(near)[::3]:
        fit = arlib.fit_var(y[res.starts[w] : res.ends[w] + 1], 1)
        np.testing.assert_array_equal(res.coefs[w], fit.coefs)
        np.testing.assert_array_equal(res.sigma_u[w], fit.sigma_u)
        np.testing.assert_array_equal(res.intercept[w], fit.intercept)
        close(res.total_connectedness[w], arlib.connectedness(fit, 5).total, "total")
        close(res.pairwise[w], arlib.connectedness(fit, 5).table, "pairwise")
        close(res.granger_f[w, 0, 2], arlib.granger_test(fit, 0, 2).f_stat, "Granger F")
        irf = arlib.impulse_responses(fit, 5, shocks="generalized")
        np.testing.assert_allclose(res.responses[w], irf, rtol=0, atol=1e-7 * np.abs(irf).max())
        np.testing.assert_allclose(res.spectral_radius[w], fit.spectral_radius, rtol=1e-6)
        np.testing.assert_allclose(res.aic[w], fit.aic, rtol=0, atol=1e-5)
    exact = y.copy()
    exact[200:300, 2] = 2.0 * exact[200:300, 0]
    res2 = arlib.rolling_var(exact, 80, 1, 5, names=["rates", "fx", "equity"])
    inside = (res2.starts >= 200) & (res2.ends < 300)
    assert not res2.ok[inside].any()
    assert all("collinear" in r or "singular" in r for r in res2.skip_reason[inside])
    assert any("'rates.L1', 'equity.L1'" in r for r in res2.skip_reason[inside])  # by name
    assert res2.ok[res2.ends < 200].all()
    np.testing.assert_allclose(
        res2.coefs[res2.ends < 200], res.coefs[res.ends < 200], rtol=1e-12, atol=1e-14
    )


def test_units_do_not_decide_which_windows_are_fitted() -> None:
    """Two independent white-noise series, one in units a million times smaller: every window
    is fitted (none skipped as "singular" because of units) and equals the single fits, and
    statsmodels' VAR (outside reference library) agrees on a few windows."""
    sm_var = pytest.importorskip("statsmodels.tsa.api").VAR
    y = np.random.default_rng(15).standard_normal((400, 2))
    y[:, 0] *= 1e6
    for trend in ("n", "c", "ct"):
        res = arlib.rolling_var(y, 60, 2, 5, trend=trend)
        assert res.ok.all(), set(res.skip_reason[~res.ok])
        for w in (0, 111, len(res) - 1):
            rows = y[res.starts[w] : res.ends[w] + 1]
            check_window(res, w, rows, 2)
            sm = sm_var(rows).fit(2, trend=trend)
            s = np.sqrt(np.diag(sm.sigma_u))
            close(res.coefs[w] * s[None, None, :] / s[None, :, None],
                  sm.coefs * s[None, None, :] / s[None, :, None], "coefs vs statsmodels")  # fmt: skip
            close(res.sigma_u[w] / np.outer(s, s), sm.sigma_u / np.outer(s, s), "Σu vs statsmodels")


def scaled_data(kind: str, seed: int) -> np.ndarray:
    """(360, 3) invented data, badly scaled or far from zero (the scenario is invented):
    "levels": a stationary VAR(2) around levels 1e6, 2e5 and −7e5 (unit-size moves);
    "units": the same series in units 1, 1e4 and 1e8 times apart, around levels of 100 units;
    "walk": random walks at 1e6 with moves of 1e-3 (nine digits between level and move);
    "mixed": one series at 1e6, the others near zero (the regressors are not collinear, yet a
    window's residual sum of squares, formed from cross-products of the raw values, would cancel
    twelve digits without an intercept)."""
    y = simulate(3, 2, 360, seed=seed)
    if kind == "mixed":
        return y + np.array([1e6, 0.0, 0.0])
    if kind == "levels":
        return y + np.array([1e6, 2e5, -7e5])
    if kind == "units":
        return (y + 100.0) * np.array([1.0, 1e4, 1e8])
    return 1e6 + 1e-3 * np.cumsum(y, axis=0)


@pytest.mark.parametrize("trend", ["n", "c", "ct"])
@pytest.mark.parametrize("kind", ["levels", "units", "walk", "mixed"])
def test_far_from_zero_and_badly_scaled_windows_equal_single_fits(kind: str, trend: str) -> None:
    """Every window of series far from zero (levels to 1e6, nine digits between level and
    move) or in units up to 1e8 apart agrees with `fit_var` and the other single-fit functions
    to the documented 1e-8 (in units of each series' residual s.d., `check_window`), and is
    fitted exactly when `fit_var` fits its rows."""
    y = scaled_data(kind, seed={"levels": 41, "units": 42, "walk": 43, "mixed": 44}[kind])
    res = arlib.rolling_var(y, 80, 2, 6, trend=trend, responses="generalized",
                            decomposition="cholesky", portmanteau_lags=5)  # fmt: skip
    assert res.ok.all(), set(res.skip_reason[~res.ok])
    for w in range(0, len(res), 14):
        check_window(res, w, y[res.starts[w] : res.ends[w] + 1], 2)


def test_far_from_zero_without_intercept_expanding_and_univariate() -> None:
    """Trend "n" with a series at 1e6: expanding windows, and a single series (whose one
    regressor cannot be collinear with anything), equal the single fits — the residual
    cross-products are never taken from a cancelling difference of raw cross-products."""
    y = scaled_data("mixed", seed=45)
    res = arlib.rolling_var(y, 80, 2, 6, trend="n", expanding=True, step=23)
    for w in range(len(res)):
        check_window(res, w, y[: res.ends[w] + 1], 2)
    one = 1e6 + np.cumsum(simulate(1, 1, 300, seed=46), axis=0)
    res = arlib.rolling_var(one, 60, 1, 4, trend="n", step=20)
    for w in range(len(res)):
        check_window(res, w, one[res.starts[w] : res.ends[w] + 1], 1)


def test_near_duplicates_far_from_zero_are_refused_as_fit_var_refuses() -> None:
    """Series 2 = series 0 + δ·noise around a level of 1e6 (moves of size 1 and 0.01), for δ
    from clearly distinct to an exact copy: a window is fitted exactly when `fit_var` fits its
    rows, and a skipped window gives fit_var's own reason."""
    rng = np.random.default_rng(16)
    for trend, move in (("n", 1.0), ("c", 1.0), ("c", 1e-2), ("ct", 1e-2)):
        base = simulate(3, 1, 300, seed=16) * move + 1e6
        for delta in (1e-2, 1e-3, 1e-5, 1e-7, 1e-9, 0.0):
            y = base.copy()
            y[:, 2] = y[:, 0] + delta * move * rng.standard_normal(300)
            res = arlib.rolling_var(y, 70, 1, 5, trend=trend, ends=np.arange(69, 300, 23))
            for w in range(len(res)):
                rows = y[res.starts[w] : res.ends[w] + 1]
                try:
                    with warnings.catch_warnings():
                        warnings.simplefilter("ignore", arlib.UnstableProcessWarning)
                        fit = arlib.fit_var(rows, 1, trend=trend)
                except arlib.InvalidInputError as exc:
                    assert not res.ok[w], (trend, delta, w, str(exc))
                    assert res.skip_reason[w] == f"not fitted: {exc}".replace("`y` ", "the window ")
                    continue
                assert res.ok[w], (trend, delta, w, res.skip_reason[w])
                s = np.sqrt(np.diag(fit.sigma_u))
                close(res.sigma_u[w] / np.outer(s, s), fit.sigma_u / np.outer(s, s), "Σu")
                close(res.total_connectedness[w], arlib.connectedness(fit, 5).total, "total")


@pytest.mark.parametrize("criterion", ["aic", "bic", "hq", "fpe"])
def test_lag_selection_equals_select_lags(criterion: str) -> None:
    """The chosen order is select_lags' minimiser over p = 1..max_lags on the window's rows,
    and the window is then fitted with that order."""
    y = simulate(3, 2, 420, seed=31)
    res = arlib.rolling_var(y, 90, None, 5, criterion=criterion, max_lags=4, step=11)
    assert res.coefs.shape[1] == 4 and res.criterion == criterion
    for w in range(len(res)):
        rows = y[res.starts[w] : res.ends[w] + 1]
        sel = arlib.select_lags(rows, 4)
        expected = int(np.argmin(getattr(sel, criterion)[1:])) + 1
        assert res.lags[w] == expected, (w, getattr(sel, criterion))
    for w in (0, len(res) // 2, len(res) - 1):
        check_window(res, w, y[res.starts[w] : res.ends[w] + 1], int(res.lags[w]))
    if criterion == "aic":
        assert len(set(res.lags.tolist())) > 1  # the check exercised several orders


def test_univariate_window() -> None:
    y = simulate(1, 2, 200, seed=1)[:, 0]
    res = arlib.rolling_var(y, 60, 2, 5)
    assert res.coefs.shape == (len(res), 2, 1, 1)
    np.testing.assert_array_equal(res.total_connectedness, 0.0)
    np.testing.assert_allclose(res.pairwise, 100.0, rtol=1e-14)
    np.testing.assert_array_equal(res.net, 0.0)
    assert np.isnan(res.granger_f).all() and np.isnan(res.granger_p).all()
    check_window(res, 17, y[res.starts[17] : res.ends[17] + 1, None], 2)


def test_result_shapes_and_read_only() -> None:
    n, p, H = 4, 2, 7
    y = simulate(n, p, 300, seed=2)
    res = arlib.rolling_var(y, 100, p, H, responses="unit", decomposition="cholesky",
                            portmanteau_lags=6, names=list("abcd"))  # fmt: skip
    W = len(res)
    assert W == 201 and res.names == ("a", "b", "c", "d")
    shapes = {
        "ends": (W,), "starts": (W,), "nobs": (W,), "lags": (W,), "coefs": (W, p, n, n),
        "intercept": (W, n), "sigma_u": (W, n, n), "spectral_radius": (W,), "aic": (W,),
        "bic": (W,), "hq": (W,), "fpe": (W,), "condition_number": (W,),
        "total_connectedness": (W,), "to_others": (W, n), "from_others": (W, n),
        "net": (W, n), "pairwise": (W, n, n), "granger_f": (W, n, n), "granger_p": (W, n, n),
        "granger_df": (W, 2), "responses": (W, H + 1, n, n), "decomposition": (W, H, n, n),
        "portmanteau_p": (W,), "skip_reason": (W,), "ok": (W,),
    }  # fmt: skip
    for name, shape in shapes.items():
        arr = getattr(res, name)
        assert arr.shape == shape, name
        assert not arr.flags.writeable, name
    assert res.trend_coef is None
    np.testing.assert_allclose(res.pairwise.sum(axis=-1), 100.0, rtol=1e-12)
    np.testing.assert_allclose(res.decomposition.sum(axis=-1), 1.0, rtol=1e-12)
    np.testing.assert_allclose(res.total_connectedness, res.from_others.mean(axis=1), rtol=1e-12)
    with pytest.raises(AttributeError):
        res.window = 3  # type: ignore[misc]  # frozen, written on purpose
    assert "201 rolling windows" in repr(res)


def test_bad_input_is_refused_with_the_fix() -> None:
    y = simulate(3, 1, 200, seed=1)
    bad = y.copy()
    bad[17, 2] = np.inf
    with pytest.raises(arlib.InvalidInputError, match="row 17 of series 'y2'"):
        arlib.rolling_var(bad, 50, 1, 5)
    with pytest.raises(arlib.InvalidInputError, match=r"window`=11 leaves 9 .* use window >= 12"):
        arlib.rolling_var(y, 11, 2, 5)  # k = 1 + 3·2 = 7 coefficients, n = 3: 2 + 7 + 3 rows
    with pytest.raises(arlib.InvalidInputError, match="criterion"):
        arlib.rolling_var(y, 50, None, 5)
    with pytest.raises(arlib.InvalidInputError, match="ends"):
        arlib.rolling_var(y, 50, 1, 5, ends=np.array([10, 60]))
    with pytest.raises(arlib.InvalidInputError, match="strictly increasing"):
        arlib.rolling_var(y, 50, 1, 5, ends=np.array([80, 60]))
    with pytest.raises(arlib.InvalidInputError, match="responses"):
        arlib.rolling_var(y, 50, 1, 5, responses="orthogonal")
    with pytest.raises(arlib.InvalidInputError, match="portmanteau_lags"):
        arlib.rolling_var(y, 50, 2, 5, portmanteau_lags=2)
    with pytest.raises(arlib.InvalidInputError, match="longer than the 200 rows"):
        arlib.rolling_var(y, 201, 1, 5)
    with pytest.raises(arlib.InvalidInputError, match="workers"):
        arlib.rolling_var(y, 50, 1, 5, workers=0)


# ---------------------------------------------------------------------------------------------
# kernels
# ---------------------------------------------------------------------------------------------


def test_window_sums_equal_direct_sums_and_do_not_depend_on_the_batch() -> None:
    """Anchored sums (rolling) and block running sums (expanding) equal direct sums, with large
    means (cancellation would show), and a window's sum is the same bit for bit whichever other
    windows are computed with it."""
    rng = np.random.default_rng(0)
    z = rng.standard_normal((300, 5)) + 100.0
    il, jl = np.tril_indices(5)
    L, cut = 41, 120
    for first in (np.arange(79, 120), np.array([80, 81, 95, 119]), np.array([79])):
        got = K.anchored_window_sums(z, first, cut, L)
        for w, a in enumerate(first):
            direct = z[a : a + L].T @ z[a : a + L]
            np.testing.assert_allclose(got[w], direct, rtol=1e-14)
    every = K.anchored_window_sums(z, np.arange(79, 120), cut, L)
    some = K.anchored_window_sums(z, np.array([83, 84, 101]), cut, L)
    assert np.array_equal(some, every[[4, 5, 22]])
    ends = np.array([5, 255, 256, 299])
    got, row0, carry = K.running_block_sums(z, 0, ends, 64, np.zeros(15))
    for w, e in enumerate(ends):
        direct = z[: e + 1].T @ z[: e + 1]
        np.testing.assert_allclose(got[w][il, jl], direct[il, jl], rtol=1e-14)
    # continuing from the carried block sum gives the same bits as one pass
    first_part, row0, carry = K.running_block_sums(z, 0, ends[:2], 64, np.zeros(15))
    rest, _, _ = K.running_block_sums(z[row0:], row0, ends[2:], 64, carry)
    assert np.array_equal(np.concatenate([first_part, rest]), got)


def test_spectral_radius_kernel_matches_lapack() -> None:
    """Certified squaring/Ritz path vs LAPACK eigenvalues, including hard spectra: equal moduli
    (a real pair ±ρ, a complex pair with the modulus of a real root), a Jordan block, zero."""
    rng = np.random.default_rng(5)
    batches = []
    for n, p in [(2, 1), (3, 2), (5, 3), (12, 2), (15, 1)]:
        A = np.stack([random_var(n, p, rng)[0] for _ in range(40)])
        batches.append((A, n, p))
    rot = np.array([[0.0, -0.7], [0.7, 0.0]])
    hard = np.zeros((4, 1, 4, 4))
    hard[0, 0] = np.diag([0.7, -0.7, 0.2, 0.1])
    hard[1, 0, :2, :2] = rot
    hard[1, 0, 2, 2] = 0.7
    hard[2, 0] = np.array([[0.6, 1.0, 0, 0], [0, 0.6, 0, 0], [0, 0, 0.1, 0], [0, 0, 0, 0.3]])
    batches.append((hard, 4, 1))
    for A, n, p in batches:
        acat = np.concatenate(list(np.moveaxis(A, 1, 0)), axis=-1)
        rho, certified = K.spectral_radius_batch(acat, n, p)
        ref = np.abs(np.linalg.eigvals(arlib.companion_matrix(A))).max(axis=-1)
        np.testing.assert_allclose(rho, ref, rtol=1e-10, atol=1e-12)
        if n * p > 4:
            assert certified.mean() > 0.5  # the fast path is exercised
    acat = np.concatenate(list(np.moveaxis(batches[3][0], 1, 0)), axis=-1)
    _, certified = K.spectral_radius_batch(acat, 12, 2)
    assert certified.mean() > 0.9
    # a matrix's radius and its certification (so whether LAPACK is used) do not depend on the
    # other matrices of the batch: the whole batch, one at a time, and odd sub-batches agree bit
    # for bit, the hard spectra (which fall back to LAPACK) included
    hard5 = np.zeros((4, 1, 5, 5))  # the hard spectra with a fifth, small root: N > 4
    hard5[:, :, :4, :4] = hard
    hard5[:, :, 4, 4] = 0.05
    mixed = np.concatenate([np.stack([random_var(5, 1, rng)[0] for _ in range(9)]), hard5])
    acat = np.concatenate(list(np.moveaxis(mixed, 1, 0)), axis=-1)
    assert 0 < K.spectral_radius_batch(acat, 5, 1)[1].sum() < len(acat)  # both paths taken
    for A, n, p in [*batches[:3], (mixed, 5, 1)]:
        acat = np.concatenate(list(np.moveaxis(A, 1, 0)), axis=-1)
        rho, cert = K.spectral_radius_batch(acat, n, p)
        for sl in [slice(w, w + 1) for w in range(len(acat))] + [slice(3, 10), slice(0, 5)]:
            r_sub, c_sub = K.spectral_radius_batch(acat[sl], n, p)
            assert np.array_equal(r_sub, rho[sl]) and np.array_equal(c_sub, cert[sl])


def test_blocked_solve_equals_the_whole_factorisation() -> None:
    """`solve_grams` factors the regressor block and the residual Schur complement separately;
    its blocks are those of LAPACK's Cholesky factor of the whole augmented matrix (Golub & Van
    Loan 2013, Sec. 4.2: the factor is unique), its coefficients those of least squares, its
    `inv_diag` the diagonal of (X'X)^{-1}; `factor=False` leaves out only the assembled factor.
    Tolerance: every quantity is a backward-stable function of a matrix with condition number
    below 1e4 here, so 1e-11 relative is far above rounding and far below any real error."""
    rng = np.random.default_rng(11)
    n, p = 12, 2
    k = 1 + n * p
    m = k + n
    rows = rng.standard_normal((6, 260, n * p + n)) + 0.3
    z = np.concatenate([np.ones((6, 260, 1)), rows], axis=-1)
    G = np.swapaxes(z, 1, 2) @ z
    full = K.solve_grams(G, k, m, 1)
    lean = K.solve_grams(G, k, m, 1, factor=False)
    L = np.linalg.cholesky(G)
    np.testing.assert_allclose(full["L"], L, rtol=1e-11, atol=1e-11 * np.abs(L).max())
    np.testing.assert_allclose(lean["L21"], L[:, k:, :k], rtol=1e-11, atol=1e-11)
    np.testing.assert_allclose(lean["L22"], L[:, k:, k:], rtol=1e-11, atol=1e-11)
    assert "L" not in lean
    for key in ("coef_t", "sse", "inv", "inv_diag", "logdet_sse", "cond", "sse_cond"):
        assert np.array_equal(full[key], lean[key]), key
    for w in range(6):
        B, *_ = np.linalg.lstsq(z[w, :, :k], z[w, :, k:], rcond=None)
        np.testing.assert_allclose(full["coef_t"][w], B.T, rtol=1e-11, atol=1e-12)
        U = z[w, :, k:] - z[w, :, :k] @ B
        np.testing.assert_allclose(full["sse"][w], U.T @ U, rtol=1e-11)
        inv_xx = np.linalg.inv(G[w, :k, :k])
        np.testing.assert_allclose(full["inv_diag"][w], np.diag(inv_xx), rtol=1e-11)
    assert full["ok"].all()
    bad = G.copy()
    bad[2, 5, :] = bad[2, :, 5] = 0.0  # a regressor that is zero throughout: not definite
    sol = K.solve_grams(bad, k, m, 1, factor=False)
    assert sol["ok"].tolist() == [True, True, False, True, True, True]
    assert np.isinf(sol["cond"][2]) and np.isfinite(sol["cond"][[0, 1, 3, 4, 5]]).all()


def test_granger_kernel_equals_the_wald_form_from_the_full_inverse() -> None:
    """`granger_f` forms only the p×p blocks V_j of (X'X)^{-1}; the F statistics equal
    b' V^{-1} b / (p σ_ii) with V taken from the explicit inverse (Lütkepohl 2005, eq. 3.6.5),
    for p = 1, 2 (closed forms) and 3 (batched Cholesky). Tolerance as above."""
    rng = np.random.default_rng(12)
    for n, p in [(3, 1), (12, 2), (4, 3)]:
        k = 1 + n * p
        z = np.concatenate(
            [np.ones((4, 200, 1)), rng.standard_normal((4, 200, n * p + n))], axis=-1
        )
        G = np.swapaxes(z, 1, 2) @ z
        sol = K.solve_grams(G, k, k + n, 1, factor=False)
        sig = np.diagonal(sol["sse"], axis1=1, axis2=2) / (200 - k)
        F = K.granger_f(sol["coef_t"], sol["inv"], sig, n, p, 1)
        for w in range(4):
            inv_xx = np.linalg.inv(G[w, :k, :k])
            for i in range(n):
                for j in range(n):
                    if i == j:
                        assert np.isnan(F[w, i, j])
                        continue
                    idx = 1 + np.arange(p) * n + j
                    b = sol["coef_t"][w, i, idx]
                    V = inv_xx[np.ix_(idx, idx)]
                    want = b @ np.linalg.solve(V, b) / (p * sig[w, i])
                    np.testing.assert_allclose(F[w, i, j], want, rtol=1e-10)


@pytest.mark.parametrize("df1", [1, 2, 3, 4, 6])
def test_f_survival_matches_scipy(df1: int) -> None:
    """Closed form for even df1 (Abramowitz & Stegun 1964, 26.6.4) vs scipy.stats.f.sf."""
    f = np.array([0.0, 0.01, 0.5, 1.0, 2.5, 7.0, 30.0, np.nan])
    df2 = np.array([20, 200, 2676, 2676, 999, 50, 3000, 40])
    got = K.f_survival(f, df1, df2)
    want = stats.f.sf(f, df1, df2)
    np.testing.assert_allclose(got, want, rtol=1e-11, atol=1e-300)


# ---------------------------------------------------------------------------------------------
# determinism: a window's numbers do not depend on how the windows were grouped
# ---------------------------------------------------------------------------------------------


def awkward_data() -> np.ndarray:
    """(760, 4) invented data with every hard case in one sample: series 1 sits at a level of 50
    (centring matters), series 3 nearly copies series 0 over rows 250..379 (condition numbers
    from ordinary through far above the refit limit: about 30 windows refitted directly), series
    2 is exactly twice series 1 over rows 560..699 (collinear windows, skipped with fit_var's
    reason) and row 450 is missing (windows with fewer rows)."""
    y = simulate(4, 2, 760, seed=77)
    rng = np.random.default_rng(78)
    y[:, 1] += 50.0
    y[250:380, 3] = y[250:380, 0] + 1e-5 * rng.standard_normal(130)
    y[560:700, 2] = 2.0 * y[560:700, 1]
    y[450, 0] = np.nan
    return y


DETERMINISM_CASES = {
    "c, every output": dict(trend="c", responses="generalized", decomposition="cholesky",
                            portmanteau_lags=6),
    "ct": dict(trend="ct", responses="cholesky", decomposition="generalized"),
    "n": dict(trend="n", responses="unit"),
    "expanding": dict(trend="c", expanding=True, decomposition="generalized"),
    "lag selection": dict(trend="c", criterion="aic", max_lags=3, lags=None),
}  # fmt: skip


def assert_identical(a: arlib.RollingVAR, b: arlib.RollingVAR, what: str) -> None:
    """Every field equal bit for bit (NaN where NaN), skip reasons as text."""
    from dataclasses import fields

    for f in fields(arlib.RollingVAR):
        x, z = getattr(a, f.name), getattr(b, f.name)
        if isinstance(x, np.ndarray) and x.dtype != object:
            np.testing.assert_array_equal(x, z, err_msg=f"{what}: {f.name}", strict=True)
        elif isinstance(x, np.ndarray):
            assert x.tolist() == z.tolist(), f"{what}: {f.name}"
        else:
            assert x == z, f"{what}: {f.name}"


@pytest.mark.parametrize("case", list(DETERMINISM_CASES))
def test_every_number_is_independent_of_how_windows_are_grouped(
    case: str, monkeypatch: pytest.MonkeyPatch
) -> None:
    """A full run, the nightly `after=` run, `ends=` blocks of odd sizes joined by `concat`, and a
    run on a shorter history (yesterday's data) give the same numbers bit for bit for every
    window they share — condition numbers, refit decisions and skip reasons included. Windows are
    grouped into blocks and chunks internally; none of that may show in a window's numbers."""
    y = awkward_data()
    kw: dict = {"lags": 2, **DETERMINISM_CASES[case]}
    lags = kw.pop("lags")
    full = arlib.rolling_var(y, 100, lags, 6, **kw)
    # the sample exercises what it claims to: skipped windows, refits, ordinary windows
    assert full.ok.sum() > 400
    if case not in ("expanding", "lag selection"):
        assert (~full.ok).any()
        assert (full.condition_number > arlib._rolling.FAST_COND_LIMIT).sum() >= 20  # refits
    if case in ("c, every output", "ct"):
        assert np.nanmin(full.condition_number) < 1e3
    idx = np.flatnonzero(full.ends > 517)
    new = arlib.rolling_var(y, 100, lags, 6, after=517, **kw)
    assert_identical(new, _take(full, idx), "after=517")
    sizes = [1, 2, 7, 13, 61, 1, 3, 97, 5]
    cuts = np.cumsum(sizes)
    parts = np.split(full.ends, cuts[cuts < len(full)])
    blocks = [arlib.rolling_var(y, 100, lags, 6, ends=e, **kw) for e in parts]
    joined = arlib.RollingVAR.concat(blocks[::-1])
    assert_identical(joined, full, "ends= blocks joined")
    shorter = arlib.rolling_var(y[:-37], 100, lags, 6, **kw)
    assert_identical(shorter, _take(full, np.arange(len(shorter))), "37 rows fewer")
    monkeypatch.setattr(arlib._rolling, "CHUNK_BYTES", 1)  # chunks of 16 windows
    small = arlib.rolling_var(y, 100, lags, 6, **kw)
    assert_identical(small, full, "chunks of 16 windows")
    monkeypatch.setattr(arlib._rolling, "GRAM_BYTES", 1)  # sums of a block cut into pieces
    pieces = arlib.rolling_var(y, 100, lags, 6, **kw)
    assert_identical(pieces, full, "sums in pieces of 16 windows")
    threads = arlib.rolling_var(y, 100, lags, 6, workers=3, **kw)  # chunks on 3 threads
    assert_identical(threads, full, "workers=3")


def test_headline_shape_is_independent_of_grouping(monkeypatch: pytest.MonkeyPatch) -> None:
    """The headline shape (12 series, two lags: a 24×24 companion on the certified spectral
    path, the blocked factorisation of a 37×37 augmented matrix, Granger blocks) gives the
    same bits in one run, in `ends=` blocks of odd sizes, after `after=`, and in chunks of 16."""
    y = simulate(12, 2, 520, seed=15)
    full = arlib.rolling_var(y, 200, 2, 10)
    assert full.ok.all() and len(full) == 321
    sizes = [1, 5, 16, 17, 100, 2]
    cuts = np.cumsum(sizes)
    parts = np.split(full.ends, cuts)
    joined = arlib.RollingVAR.concat([arlib.rolling_var(y, 200, 2, 10, ends=e) for e in parts])
    assert_identical(joined, full, "ends= blocks joined")
    new = arlib.rolling_var(y, 200, 2, 10, after=400)
    assert_identical(new, _take(full, np.flatnonzero(full.ends > 400)), "after=400")
    monkeypatch.setattr(arlib._rolling, "CHUNK_BYTES", 1)  # chunks of 16 windows
    assert_identical(arlib.rolling_var(y, 200, 2, 10), full, "chunks of 16 windows")


def _take(res: arlib.RollingVAR, idx: np.ndarray) -> arlib.RollingVAR:
    """The windows `idx` of a result, as a result of their own."""
    from dataclasses import fields, replace

    arrays = {
        f.name: getattr(res, f.name)[idx]
        for f in fields(res)
        if isinstance(getattr(res, f.name), np.ndarray)
    }
    return replace(res, **arrays)
