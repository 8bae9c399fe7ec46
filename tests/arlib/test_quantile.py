"""Quantile VAR and its connectedness (arlib._quantile, arlib._quantile_rolling).

Outside references: statsmodels' `QuantReg` (a general-purpose reference library) and an
independent least-absolute-deviations linear programme solved by scipy's HiGHS, built here.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import linprog
from statsmodels.regression.quantile_regression import QuantReg
from statsmodels.tools.sm_exceptions import ConvergenceWarning, IterationLimitWarning

import arlib
from arlib._estimate import design_matrix

from .conftest import A1, A2, SIGMA, simulate

TAUS = (0.05, 0.5, 0.95)


def rho(u: np.ndarray, tau: float) -> float:
    """Σ ρ_τ(u) = Σ u (τ − 1[u < 0]) (Koenker & Bassett 1978, eq. 3.1), written out here."""
    return float(np.sum(np.where(u < 0, (tau - 1.0) * u, tau * u)))


@pytest.fixture(scope="module")
def bp_data() -> np.ndarray:
    """(250, 3) a VAR(2) window in basis-point units (×100), Student-t(5) shocks (seeded)."""
    rng = np.random.default_rng(7)
    y = np.zeros((350, 3))
    chol = np.linalg.cholesky(SIGMA)
    for t in range(2, 350):
        y[t] = A1 @ y[t - 1] + A2 @ y[t - 2] + chol @ rng.standard_t(5, 3)
    return 100.0 * y[100:]


@pytest.mark.filterwarnings("ignore::statsmodels.tools.sm_exceptions.IterationLimitWarning")
@pytest.mark.filterwarnings("ignore::statsmodels.tools.sm_exceptions.ConvergenceWarning")
@pytest.mark.parametrize("tau", TAUS)
def test_coefficients_equal_statsmodels_quantreg(bp_data: np.ndarray, tau: float) -> None:
    # Reference: statsmodels QuantReg (iteratively reweighted least squares) on the same window.
    # Tolerance 1e-6: QuantReg floors |residuals| at 1e-6 (in y's units) in its weights
    # (statsmodels/regression/quantile_regression.py, `mask = np.abs(resid) < 0.000001`), so
    # its answer is the exact vertex up to about 1e-6 in the fitted values of the k basic rows;
    # with y in basis points (residuals of order 100) that is ~1e-8 in the slopes and ~1e-6
    # absolute (1e-8 relative) in the intercepts — we measured at most 2e-6 absolute in every
    # coefficient for data of unit scale, which is why the data are in basis points.
    fit = arlib.quantile_var(bp_data, 2, tau)
    Z = design_matrix(bp_data, 2, "c")
    for i in range(3):
        ref = QuantReg(bp_data[2:, i], Z).fit(q=tau, max_iter=20000, p_tol=1e-10).params
        np.testing.assert_allclose(fit.params[:, i], ref, rtol=1e-6, atol=1e-6)
        # the check-function objective at our solution is not larger than at the reference's
        ours = rho(bp_data[2:, i] - Z @ fit.params[:, i], tau)
        theirs = rho(bp_data[2:, i] - Z @ ref, tau)
        assert ours <= theirs + 1e-12 * abs(theirs)
        assert ours == pytest.approx(float(fit.objective[i]), rel=1e-12)
    assert ConvergenceWarning and IterationLimitWarning  # imported for the filters above


def lad_lp(X: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Least absolute deviations as its own LP: min 1'(u⁺ + u⁻) s.t. Xb + u⁺ − u⁻ = y (dense)."""
    m, k = X.shape
    c = np.concatenate([np.zeros(k), np.ones(2 * m)])
    A = np.hstack([X, np.eye(m), -np.eye(m)])
    res = linprog(c, A_eq=A, b_eq=y, bounds=[(None, None)] * k + [(0, None)] * (2 * m))
    assert res.status == 0
    return res.x[:k]


def test_median_equals_least_absolute_deviations(var2_data: np.ndarray) -> None:
    # At τ = 0.5, ρ_τ(u) = |u|/2: the fit is least absolute deviations (Koenker & Bassett 1978,
    # Sec. 1). Reference: the LAD linear programme above, solved by scipy's HiGHS. Tolerance
    # 1e-9: both return the same vertex Z_h^{-1} y_h, equal up to rounding of a k × k solve.
    y = var2_data[:250]
    fit = arlib.quantile_var(y, 2, 0.5)
    Z = design_matrix(y, 2, "c")
    for i in range(3):
        np.testing.assert_allclose(fit.params[:, i], lad_lp(Z, y[2:, i]), atol=1e-9)


def test_quantile_regression_vertex_and_objective() -> None:
    # The optimum is a vertex: k rows fitted exactly (Koenker 2005, Thm 2.1), and it satisfies
    # the subgradient condition: ψ-weighted regressors of the other rows, mapped through
    # X_h^{-1}, lie in [−τ, 1 − τ] (closed form written out here).
    rng = np.random.default_rng(3)
    X = np.column_stack([np.ones(120), rng.standard_normal((120, 2))])
    y = X @ np.array([1.0, 0.5, -0.3]) + rng.standard_exponential(120)
    for tau in (0.1, 0.5, 0.9):
        res = arlib.quantile_regression(X, y, tau)
        h = res.basis
        assert np.abs(res.resid[h]).max() < 1e-12
        rest = np.setdiff1d(np.arange(120), h)
        psi = np.where(res.resid[rest] < 0, tau - 1.0, tau)
        a = np.linalg.solve(X[h].T, X[rest].T @ psi)
        assert (a >= -tau - 1e-9).all() and (a <= 1 - tau + 1e-9).all()


def test_ties_fall_back_to_the_lp_and_stay_optimal() -> None:
    # Rounded data make exactly fitted non-basic rows (degenerate vertices); whatever route the
    # solver takes, the objective equals that of an independent LP (HiGHS) to rounding.
    rng = np.random.default_rng(11)
    y = np.round(rng.standard_normal((150, 2)), 1)
    fit = arlib.quantile_var(y, 1, 0.5)
    Z = design_matrix(y, 1, "c")
    for i in range(2):
        ref = lad_lp(Z, y[1:, i])
        assert float(fit.objective[i]) <= rho(y[1:, i] - Z @ ref, 0.5) + 1e-9


def test_degenerate_vertices_go_to_the_lp_and_end_optimal() -> None:
    # Integer data and binary regressors: many rows fitted exactly at every vertex (degenerate),
    # where the edge test alone may stop early; those problems are checked by the LP (HiGHS) and
    # end at the LP's objective (to rounding).
    from arlib._quantile import check_loss, initial_basis, simplex

    rng = np.random.default_rng(3)
    X = np.column_stack([np.ones(60), rng.integers(0, 2, 60), rng.integers(0, 3, 60)]).astype(float)
    Y = rng.integers(0, 4, (60, 4)).astype(float)
    for tau in (0.25, 0.5, 0.75):
        st = simplex(X, Y, np.full(4, tau), initial_basis(X, 4))
        assert st.degenerate.all()
        for i in range(4):
            ref = lad_lp(X, Y[:, i]) if tau == 0.5 else None
            want = rho(Y[:, i] - X @ ref, tau) if ref is not None else None
            got = float(check_loss(st.resid[i][:, None], tau)[0])
            assert got == pytest.approx(rho(Y[:, i] - X @ st.beta[i], tau), abs=1e-12)
            if want is not None:
                assert got <= want + 1e-9


def test_quantile_fit_is_varlike_and_feeds_connectedness(var2_data: np.ndarray) -> None:
    # Connectedness from the fit equals the Pesaran–Shin generalized decomposition computed
    # directly from B̂(τ) and Σ̂(τ) (closed form: DY 2012 eq. 2 with Ψ_h from the recursion).
    fit = arlib.quantile_var(var2_data, 2, 0.05)
    assert isinstance(fit, arlib.VARLike)
    e = fit.resid - fit.resid.mean(axis=0)
    np.testing.assert_allclose(fit.sigma_u, e.T @ e / (fit.nobs - 1), rtol=1e-12)
    H = 8
    n = 3
    phi = [np.eye(n)]
    for h in range(1, H):
        phi.append(sum(fit.coefs[j] @ phi[h - 1 - j] for j in range(min(h, 2))))
    S = fit.sigma_u
    num = sum((P_ @ S) ** 2 for P_ in phi) / np.diag(S)[None, :]
    table = 100 * num / num.sum(axis=1, keepdims=True)
    c = arlib.connectedness(fit, H)
    np.testing.assert_allclose(c.table, table, rtol=1e-10)


@pytest.mark.filterwarnings("ignore::arlib.UnstableProcessWarning")  # tail fits of 118 rows may be
def test_rolling_equals_single_fits_window_by_window() -> None:
    # Warm-started rolling fits equal cold single fits of the same rows: the optimal vertex is
    # unique for continuous data, whatever the start (tolerance: rounding of k × k solves).
    y = simulate(np.stack([A1, A2]), SIGMA, 400, seed=5)
    y[200, 1] = np.nan  # a gap: observations needing row 200 are left out
    roll = arlib.rolling_quantile_var(y, 120, 2, 6, quantiles=TAUS, step=7)
    assert roll.ok.all() and roll.exchanges.sum() > 0
    for w in range(len(roll)):
        rows = y[roll.starts[w] : roll.ends[w] + 1]
        if np.isnan(rows).any():
            continue
        for q, tau in enumerate(TAUS):
            fit = arlib.quantile_var(rows, 2, tau)
            np.testing.assert_allclose(roll.coefs[q, w], fit.coefs, atol=1e-10)
            np.testing.assert_allclose(roll.sigma_u[q, w], fit.sigma_u, rtol=1e-9)
            c = arlib.connectedness(fit, 6)
            np.testing.assert_allclose(roll.pairwise[q, w], c.table, atol=1e-8)
            assert roll.total_connectedness[q, w] == pytest.approx(c.total, abs=1e-8)
    cold = arlib.rolling_quantile_var(y, 120, 2, 6, quantiles=TAUS, step=7, warm=False)
    np.testing.assert_allclose(cold.coefs, roll.coefs, atol=1e-10)
    # warm starts take fewer exchanges than cold starts (after the first window)
    assert roll.exchanges[:, 1:].sum() < 0.5 * cold.exchanges[:, 1:].sum()


def test_rolling_window_with_gap_uses_only_complete_observations() -> None:
    y = simulate(np.stack([A1, A2]), SIGMA, 300, seed=8)
    y[150, 0] = np.nan
    roll = arlib.rolling_quantile_var(y, 200, 2, 5, quantiles=(0.5,), ends=[249])
    Z = design_matrix(np.nan_to_num(y[50:250]), 2, "c")
    keep = np.array([not np.isnan(y[50 + 2 + i - 2 : 50 + 2 + i + 1]).any() for i in range(198)])
    assert roll.nobs[0] == keep.sum() == 195
    for i in range(3):
        np.testing.assert_allclose(
            roll.intercept[0, 0, i], lad_lp(Z[keep], y[52:250, i][keep])[0], atol=1e-9
        )


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"quantiles": (0.0, 0.5)}, "strictly between 0 and 1"),
        ({"quantiles": (0.5, 0.5)}, "repeats"),
        ({"quantiles": ()}, "empty"),
        ({"window": 10}, "window"),
        ({"trend": "ct"}, "trend"),
    ],
)
def test_bad_options_name_the_argument(kwargs: dict, match: str) -> None:
    y = simulate(np.stack([A1, A2]), SIGMA, 200, seed=2)
    args = {"window": 100, "quantiles": TAUS} | kwargs
    with pytest.raises(arlib.InvalidInputError, match=match):
        arlib.rolling_quantile_var(y, args.pop("window"), 2, 5, **args)


def test_quantile_var_rejects_bad_tau() -> None:
    with pytest.raises(arlib.InvalidInputError, match=r"`quantile`.*1\.5"):
        arlib.quantile_var(np.random.default_rng(0).standard_normal((50, 2)), 1, 1.5)
