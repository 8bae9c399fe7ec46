"""Shrinkage VAR (arlib.shrinkage_var) and its rolling engine: equivalences and closed forms.

Reference checks against outside constructions (dummy observations, the matrix-variate t density,
numeric integration, simulated truth) are in tests/reference/test_shrinkage_reference.py.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pytest

import arlib
from arlib._shrink import log_ml, log_ml_slope, prepare, window_moments
from arlib._shrink_rolling import RollingShrinkage, rolling_shrinkage

from .conftest import A1, A2, SIGMA, simulate


@pytest.fixture(scope="module")
def levels() -> np.ndarray:
    """(520, 3) VAR(2) rows shifted far from zero (100, −50, 3) with a gap of NaN rows."""
    y = simulate(np.stack([A1, A2]), SIGMA, 520, seed=7, c=np.array([0.1, -0.2, 0.3]))
    y = y + np.array([100.0, -50.0, 3.0])
    y[300:302, 1] = np.nan
    return y


def _window_fit(y: np.ndarray, e: int, window: int, p: int, **kw: Any) -> arlib.ShrinkageFit:
    """shrinkage_var on a window's usable rows (the rows stacked as `rolling_shrinkage` uses
    them: a window without a gap is just its rows)."""
    return arlib.shrinkage_var(y[e - window + 1 : e + 1], p, **kw)


@pytest.mark.parametrize(
    ("trend", "prior", "tightness"),
    [("c", "white_noise", "auto"), ("c", "random_walk", "auto"), ("n", "white_noise", "auto"),
     ("c", "random_walk", 0.3)],
)  # fmt: skip
def test_rolling_equals_single_fit(levels: np.ndarray, trend: str, prior: str, tightness: Any) -> None:
    """Every window of the batched engine, λ search included, equals the single fit to 1e-8
    (relative; the engine sums cross-products by blocks, the single fit directly, so they differ
    by rounding only — about 1e-12 here, 1e-10 for trend "n" where series at 100 are not shifted)."""
    y = levels[:, :]
    window, p = 90, 2
    r = rolling_shrinkage(y, window, p, 8, step=5, trend=trend, prior_mean=prior,
                          tightness=tightness, responses="generalized")  # fmt: skip
    assert isinstance(r, RollingShrinkage) and r.granger_f is None
    checked = 0
    for w in range(len(r)):
        e = int(r.ends[w])
        if not np.isfinite(y[e - window + 1 : e + 1]).all():
            continue  # windows with the gap: covered by test_gaps_skip_or_fit_on_usable_rows
        with _quiet():
            f = _window_fit(y, e, window, p, trend=trend, prior_mean=prior, tightness=tightness)
        scale = np.abs(f.sigma_u).max()
        assert abs(np.log(f.tightness / r.tightness[w])) < 1e-8
        np.testing.assert_allclose(r.coefs[w], f.coefs, rtol=0, atol=1e-8)
        np.testing.assert_allclose(r.sigma_u[w], f.sigma_u, rtol=0, atol=1e-8 * scale)
        np.testing.assert_allclose(r.log_marginal_likelihood[w], f.log_marginal_likelihood, rtol=1e-8)
        if trend == "c":
            assert r.intercept is not None and f.intercept is not None
            np.testing.assert_allclose(r.intercept[w], f.intercept, rtol=0, atol=1e-8 * 100)
        table = arlib.connectedness(f, 8).table
        np.testing.assert_allclose(r.pairwise[w], table, rtol=0, atol=1e-8)
        assert r.responses is not None
        np.testing.assert_allclose(
            r.responses[w], arlib.impulse_responses(f, 8, shocks="generalized"), atol=1e-8
        )
        checked += 1
    assert checked >= 60


class _quiet:
    """Silence the unstable-process warning of near-unit-root windows (trend "n" on levels)."""

    def __enter__(self) -> None:
        import warnings

        self._cm = warnings.catch_warnings()
        self._cm.__enter__()
        warnings.simplefilter("ignore", arlib.UnstableProcessWarning)

    def __exit__(self, *exc: object) -> None:
        self._cm.__exit__(*exc)


def test_gaps_skip_or_fit_on_usable_rows(levels: np.ndarray) -> None:
    """A window with a gap is fitted on its usable observations (rows t − p..t finite): the same
    as stacking those observations' cross-products directly."""
    y = levels
    r = rolling_shrinkage(y, 90, 2, 5, ends=np.array([330, 380]))
    assert r.ok.all()
    assert r.nobs[0] == 88 - 4  # NaN in rows 300, 301 remove observations 300..303
    # direct: moments of the usable observations only
    e, p = 330, 2
    rows = y[e - 89 : e + 1]
    from arlib._estimate import design_matrix

    X, Y = design_matrix(rows, p, "n"), rows[p:]
    keep = np.isfinite(X).all(axis=1) & np.isfinite(Y).all(axis=1)
    X, Y = X[keep], Y[keep]
    Xc, Yc = X - X.mean(0), Y - Y.mean(0)
    from arlib._shrink import posterior, search_tightness

    prep = prepare((Xc.T @ Xc)[None], (Xc.T @ Yc)[None], (Yc.T @ Yc)[None],
                   np.array([float(len(Y))]), np.zeros(3), p, 1.0, True)  # fmt: skip
    x = search_tightness(prep)
    post = posterior(prep, x)
    assert abs(np.exp(x[0]) - r.tightness[0]) < 1e-8 * r.tightness[0]
    np.testing.assert_allclose(r.coefs[0, 0], post["B"][0][:3].T, atol=1e-8)
    short = rolling_shrinkage(y, 8, 2, 5, ends=np.array([303]))  # 2 usable observations
    assert not short.ok[0] and "usable observations" in short.skip_reason[0]
    assert len(rolling_shrinkage(y, 90, 2, 5, after=len(y) - 1)) == 0  # no window asked for


def test_slope_and_curvature_are_the_derivatives(var2_data: np.ndarray) -> None:
    """The analytic d/dlogλ and d²/dlogλ² of the log marginal likelihood equal central
    differences (step 1e-4: truncation error ~1e-8 relative, rounding ~1e-10)."""
    XX, XY, YY, N, _, _ = window_moments(var2_data, 2, True)
    prep = prepare(XX, XY, YY, N, np.array([1.0, 0.0, 1.0]), 2, 1.0, True)
    h = 1e-4
    for x in (-4.0, -1.5, 0.3, 1.8):
        g, c = log_ml_slope(prep, np.array([x]))
        fd1 = (log_ml(prep, np.array([x + h])) - log_ml(prep, np.array([x - h]))) / (2 * h)
        fd2 = (log_ml_slope(prep, np.array([x + h]))[0] - log_ml_slope(prep, np.array([x - h]))[0]) / (2 * h)
        np.testing.assert_allclose(g, fd1, rtol=1e-6, atol=1e-6)
        np.testing.assert_allclose(c, fd2, rtol=1e-6, atol=1e-6)


def test_chosen_tightness_maximises_the_marginal_likelihood(var2_data: np.ndarray) -> None:
    """"auto" gives the λ where log p(Y | λ) is largest: no point of a fine grid over the range
    is higher (the grid's spacing allows 1e-9 of slack), and the slope there is zero."""
    fit = arlib.shrinkage_var(var2_data, 2)
    assert fit.tightness_chosen
    XX, XY, YY, N, _, _ = window_moments(np.asarray(var2_data), 2, True)
    prep = prepare(XX, XY, YY, N, np.zeros(3), 2, 1.0, True)
    xs = np.linspace(np.log(1e-3), np.log(10.0), 2001)
    vals = np.array([log_ml(prep, np.array([x]))[0] for x in xs])
    assert fit.log_marginal_likelihood >= vals.max() - 1e-9
    assert abs(log_ml_slope(prep, np.array([np.log(fit.tightness)]))[0][0]) < 1e-6
    fixed = arlib.shrinkage_var(var2_data, 2, tightness=fit.tightness)
    np.testing.assert_allclose(fixed.coefs, fit.coefs, atol=1e-12)
    assert not fixed.tightness_chosen


def test_tightness_at_the_edge_of_the_range() -> None:
    """White noise with a white-noise prior: the marginal likelihood keeps rising as λ → 0, so
    the search returns the range's lower edge (1e-3)."""
    y = np.random.default_rng(3).standard_normal((300, 3))
    fit = arlib.shrinkage_var(y, 2)
    assert fit.tightness == pytest.approx(1e-3, rel=1e-12) or fit.tightness > 1e-3
    XX, XY, YY, N, _, _ = window_moments(y, 2, True)
    prep = prepare(XX, XY, YY, N, np.zeros(3), 2, 1.0, True)
    if fit.tightness > 1e-3 * (1 + 1e-9):  # interior: the slope vanishes
        assert abs(log_ml_slope(prep, np.array([np.log(fit.tightness)]))[0][0]) < 1e-6
    else:  # at the edge the slope points out of the range
        assert log_ml_slope(prep, np.array([np.log(1e-3)]))[0][0] < 0


def test_fit_is_a_model_for_responses_decompositions_and_forecasts(var2_data: np.ndarray) -> None:
    """A ShrinkageFit is VARLike: responses, decompositions, connectedness and forecasts take it
    and equal those of the process with the posterior-mean parameters."""
    fit = arlib.shrinkage_var(var2_data, 2, prior_mean="random_walk")
    assert isinstance(fit, arlib.VARLike)
    proc = arlib.var_process(fit.coefs, fit.sigma_u, fit.intercept)
    np.testing.assert_array_equal(arlib.impulse_responses(fit, 6), arlib.impulse_responses(proc, 6))
    np.testing.assert_array_equal(
        arlib.variance_decomposition(fit, 6, method="generalized"),
        arlib.variance_decomposition(proc, 6, method="generalized"),
    )
    c = arlib.connectedness(fit, 10)
    assert c.total == pytest.approx(arlib.connectedness(proc, 10).total, abs=1e-12)
    f1 = arlib.forecast(fit, var2_data, 3)
    f2 = arlib.forecast(proc, var2_data, 3)
    np.testing.assert_allclose(f1.mean, f2.mean, atol=1e-12)
    # one step ahead by hand: c + A1 y_T + A2 y_{T−1}
    y = np.asarray(var2_data)
    hand = fit.intercept + fit.coefs[0] @ y[-1] + fit.coefs[1] @ y[-2]
    np.testing.assert_allclose(f1.mean[0], hand, atol=1e-12)


def test_posterior_draws_have_the_posterior_moments(var2_data: np.ndarray) -> None:
    """Exact draws: the mean of Σ draws is S̄/(ν̄ − n − 1) and the mean of coefficient draws B̄
    (Monte Carlo, 4000 draws: tolerances are 5 Monte Carlo standard errors)."""
    fit = arlib.shrinkage_var(var2_data[:120], 2, tightness=0.2)
    coefs, sig = arlib.shrinkage_draws(fit, 4000, seed=11)
    assert coefs.shape == (4000, 2, 3, 3) and sig.shape == (4000, 3, 3)
    se_sig = sig.std(axis=0) / np.sqrt(4000)
    assert (np.abs(sig.mean(axis=0) - fit.sigma_u) < 5 * se_sig + 1e-12).all()
    se_c = coefs.std(axis=0) / np.sqrt(4000)
    assert (np.abs(coefs.mean(axis=0) - fit.coefs) < 5 * se_c + 1e-12).all()


def test_draws_have_the_matrix_t_marginals(var2_data: np.ndarray) -> None:
    """Each coefficient's marginal posterior is Student t with ν̄ − n + 1 degrees of freedom,
    location B̄ and scale² Ω̄_rr S̄_cc / (ν̄ − n + 1) (the matrix-t marginal, Kadiyala & Karlsson
    1997 Sec. 3; recalled from memory, property of the inverse-Wishart's diagonal blocks). The
    draws' 5%, 50%, 95% quantiles of three coefficients match it within Monte Carlo error
    (8000 draws: the quantile's standard error is about sqrt(q(1−q)/m)/f(x_q) ≈ 0.017–0.028 scale
    units; tolerance 0.1 scale units)."""
    from scipy import stats

    fit = arlib.shrinkage_var(var2_data[:150], 2, tightness=0.3)
    coefs, _ = arlib.shrinkage_draws(fit, 8000, seed=3)
    n = 3
    dof = fit.post_dof - n + 1
    for lag, i, j in ((0, 0, 0), (0, 1, 2), (1, 2, 0)):
        r = lag * n + j  # row of B̄ for series j at lag + 1; column i is equation i
        loc = fit.post_coef[r, i]
        scale = np.sqrt(fit.post_omega[r, r] * fit.post_scale[i, i] / dof)
        got = np.quantile(coefs[:, lag, i, j], [0.05, 0.5, 0.95])
        want = loc + scale * stats.t.ppf([0.05, 0.5, 0.95], dof)
        assert np.all(np.abs(got - want) < 0.1 * scale), (got, want)


def test_posterior_bands_bracket_the_posterior_mean_responses(var2_data: np.ndarray) -> None:
    """Posterior bands: lower <= median <= upper everywhere; `point` is the responses of the
    posterior mean; the h = 1 unit-shock band is the 90% interval of A_1's draws."""
    fit = arlib.shrinkage_var(var2_data[:150], 2, tightness=0.3)
    b = arlib.shrinkage_bands(fit, 6, shocks="unit", draws=2000, coverage=0.9, seed=5)
    assert b.kind == "posterior" and b.point.shape == (7, 3, 3)
    np.testing.assert_allclose(b.point, arlib.impulse_responses(fit, 6, shocks="unit"), atol=1e-12)
    assert (b.lower <= b.median).all() and (b.median <= b.upper).all()
    coefs, _ = arlib.shrinkage_draws(fit, 2000, seed=5)
    np.testing.assert_allclose(b.lower[1], np.quantile(coefs[:, 0], 0.05, axis=0), atol=1e-12)


def test_concat_of_blocks_equals_one_run(var2_data: np.ndarray) -> None:
    """Blocks of window ends joined with RollingVAR.concat equal one run, bit for bit (a window's
    sums depend on its own rows and a fixed grid only)."""
    y = np.asarray(var2_data)
    whole = rolling_shrinkage(y, 80, 2, 5, step=3)
    a = rolling_shrinkage(y, 80, 2, 5, step=3, ends=whole.ends[:40])
    b = rolling_shrinkage(y, 80, 2, 5, step=3, after=int(whole.ends[39]))
    joined = RollingShrinkage.concat([a, b])
    np.testing.assert_array_equal(joined.tightness, whole.tightness)
    np.testing.assert_array_equal(joined.pairwise, whole.pairwise)


@pytest.mark.parametrize(
    ("kwargs", "needle"),
    [({"tightness": -1.0}, "tightness"), ({"tightness": "high"}, "tightness"),
     ({"prior_mean": "drift"}, "prior_mean"), ({"trend": "ct"}, "trend"),
     ({"lag_decay": -0.5}, "lag_decay"), ({"prior_mean": ["random_walk", "x", 0.0]}, "'y1'")],
)  # fmt: skip
def test_bad_options_are_named(var2_data: np.ndarray, kwargs: dict, needle: str) -> None:
    with pytest.raises(arlib.InvalidInputError, match=needle):
        arlib.shrinkage_var(var2_data, 2, **kwargs)


def test_constant_series_is_refused_by_name() -> None:
    y = np.random.default_rng(0).standard_normal((100, 3))
    y[:, 2] = 4.0
    with pytest.raises(arlib.InvalidInputError, match="'c'"):
        arlib.shrinkage_var(y, 1, names=["a", "b", "c"])
