"""TVP-VAR with forgetting factors (`arlib.tvp_var`) against closed forms and direct recursions.

Sources: the Kalman filter with forgetting factors of Koop & Korobilis (2013, Journal of
Econometrics 177; 2014, European Economic Review 71) in the layout of Antonakakis,
Chatziantoniou & Gabauer (2020, JRFM 13(4), 84) (equations recalled from memory, written out in
`arlib/_tvp.py`); recursive least squares equals least squares on all rows so far, and with an
exponential forgetting factor equals exponentially weighted least squares (textbook identities,
e.g. Ljung & Söderström 1983, Theory and Practice of Recursive Identification, ch. 2 — recalled
from memory); `arlib.fit_var` for least squares; the single-model connectedness functions of
arlib for the per-date measures.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import arlib
from arlib import InvalidInputError, TVPState, tvp_var
from arlib._decompose import fevd_kernel
from arlib._frequency import band_weights, frequency_kernel
from arlib._joint import joint_kernel
from arlib._tvp import _measures

from .conftest import A1, A2, SIGMA, simulate

BANDS = ((1, 5), (5, 20), (20, math.inf))
C = np.array([0.1, -0.2, 0.3])


@pytest.fixture(scope="module")
def y() -> np.ndarray:
    return simulate(np.stack([A1, A2]), SIGMA, 500, seed=7, c=C)


def params_of(res: arlib.TimeVaryingVAR, t: int) -> np.ndarray:
    """(k, n) B at date t in `fit_var`'s `params` layout (const, lag 1, lag 2, ...)."""
    blocks = [res.intercept[t][None, :]] if res.intercept is not None else []
    blocks += [res.coefs[t, lag].T for lag in range(res.lags)]
    return np.concatenate(blocks)


# ---------------------------------------------------------------------------------------------
# no forgetting = least squares on all rows so far
# ---------------------------------------------------------------------------------------------


@pytest.mark.parametrize("covariance", ["kronecker", "full"])
def test_no_forgetting_with_training_prior_equals_expanding_window_least_squares(y, covariance):
    # Source: RLS identity — the Bayesian update of constant coefficients from the flat-prior
    # posterior of rows 0..m−1 (B̂, (Z'Z)^{-1}, as the training prior is) reproduces least
    # squares on rows 0..t exactly. κ₁ = 1 (no forgetting), κ₂ = 1 (Σ fixed at the prior's Σ̂,
    # so the full-P gain is I ⊗ g too: GLS with common regressors is OLS). The prior's
    # influence is thus that of a diffuse prior, taken analytically over the training rows
    # instead of with a huge variance. Tolerance 1e-8 (brief); the recursion stays at ~1e-12.
    res = tvp_var(y, 2, 5, kappa1=1.0, kappa2=1.0, training=40, covariance=covariance)
    assert res.ends[0] == 40 and res.ends[-1] == len(y) - 1
    for t in [*range(0, len(res), 37), len(res) - 1]:
        row = int(res.ends[t])
        ols = arlib.fit_var(y[: row + 1], 2)
        np.testing.assert_allclose(params_of(res, t), ols.params, rtol=0, atol=1e-8)
    # Σ fixed: every date carries the training fit's Σ̂_u
    prior = arlib.fit_var(y[:40], 2)
    np.testing.assert_allclose(res.sigma_u[-1], prior.sigma_u, rtol=0, atol=1e-13)


def test_no_forgetting_with_a_diffuse_prior_converges_to_least_squares(y):
    # Source: as above, with a numerically diffuse prior B₀ = 0, V₀ = c·I from row p on.
    # The prior leaves B_t − B̂_t = −(Z'Z + I/c)^{-1} (I/c) B̂_t, at most ‖B̂‖ / (c·λ_min(Z'Z));
    # with c = 1e8 and λ_min(Z'Z) of order 10–100 after 300 rows that is ~1e-9. A larger c
    # does not help: the first update subtracts numbers of size c and loses c·1e-16 absolutely,
    # which is why the training prior above is the exact way to make the prior negligible.
    p, n = 2, y.shape[1]
    k = 1 + n * p
    c = 1e8
    state = TVPState(
        params=np.zeros((k, n)), cov=c * np.eye(k), sigma=np.eye(n), tail=y[:p], row=p,
        lags=p, trend="c", kappa1=1.0, kappa2=1.0, covariance="kronecker",
        names=("y0", "y1", "y2"),
    )  # fmt: skip
    res = tvp_var(y[p:], horizon=5, state=state)
    for row in (300, 400, len(y) - 1):
        t = int(np.flatnonzero(res.ends == row)[0])
        ols = arlib.fit_var(y[: row + 1], 2)
        Z = np.column_stack([np.ones(row + 1 - p)] + [y[p - i : row + 1 - i] for i in (1, 2)])
        lam = np.linalg.eigvalsh(Z.T @ Z)[0]
        bound = np.abs(ols.params).max() * k / (c * lam)  # prior bias bound, entrywise (loose)
        np.testing.assert_allclose(params_of(res, t), ols.params, rtol=0, atol=max(bound, 1e-8))


def test_forgetting_equals_exponentially_weighted_least_squares_with_the_prior(y):
    # Source: RLS with exponential forgetting (Ljung & Söderström 1983, ch. 2, recalled from
    # memory): B_t = argmin Σ_s κ^{t−s} ‖y_s − B'z_s‖² + κ^{t−t₀+1} tr((B−B₀)'V₀^{-1}(B−B₀)),
    # i.e. B_t = (κ^{m} V₀^{-1} + Σ_s κ^{t−s} z_s z_s')^{-1} (κ^{m} V₀^{-1} B₀ + Σ κ^{t−s} z_s y_s')
    # with m = number of filtered dates. Solved directly here; tolerance 1e-9 (well-conditioned
    # normal equations, ~1e-13 expected).
    kappa = 0.95
    res = tvp_var(y, 2, 5, kappa1=kappa, training=30)
    prior = arlib.fit_var(y[:30], 2)
    Z = np.column_stack([np.ones(len(y) - 2)] + [y[2 - i : len(y) - i] for i in (1, 2)])
    Y = y[2:]
    for t in (0, 10, 200, len(res) - 1):
        row = int(res.ends[t])
        rows = np.arange(30, row + 1)  # filtered rows; Z row index = row − p
        w = kappa ** (row - rows)
        Zs, Ys = Z[rows - 2], Y[rows - 2]
        m = t + 1
        prec0 = np.linalg.inv(prior.gram_inv) * kappa**m
        lhs = prec0 + (Zs * w[:, None]).T @ Zs
        rhs = prec0 @ prior.params + (Zs * w[:, None]).T @ Ys
        np.testing.assert_allclose(params_of(res, t), np.linalg.solve(lhs, rhs), atol=1e-9)


def test_levels_far_from_zero_give_the_same_filter_as_the_changes_themselves():
    # Source: closed form — the model is equivariant under y ↦ a + b·y (every series shifted
    # by a and scaled by b): least squares (the training prior) and each Kalman/RLS update map
    # to the same transformation, so the lag matrices A_l and every connectedness table are
    # unchanged, Σ_t scales by b² and the one-step errors by b. Series held as levels near
    # 1e5 that move by hundredths are what users load (prices in a small currency unit). The
    # covariance-form recursion lost the coefficients to cancellation against the levels
    # (total connectedness off by 2.8 points on the headline benchmark's data); the filter
    # now works about the series' mean. Tolerances: 1e-6 in coefficients and percent.
    a, b = 1e5, 0.01
    kw = {"kappa1": 0.98, "kappa2": 0.97, "training": 40, "bands": BANDS, "truncation": 30}
    base = tvp_var(y_changes := simulate(np.stack([A1, A2]), SIGMA, 800, seed=11, c=C), 2, 6, **kw)
    far = tvp_var(a + b * y_changes, 2, 6, **kw)
    np.testing.assert_allclose(far.coefs, base.coefs, rtol=0, atol=1e-6)
    np.testing.assert_allclose(far.sigma_u / b**2, base.sigma_u, rtol=1e-6, atol=0)
    np.testing.assert_allclose(far.prediction_error / b, base.prediction_error, rtol=0, atol=1e-6)
    for name in ("pairwise", "total_connectedness", "band_pairwise"):
        np.testing.assert_allclose(getattr(far, name), getattr(base, name), rtol=0, atol=1e-6)
    # the continued filter keeps it: the state's V holds the levels' scale
    half = tvp_var(a + b * y_changes[:500], 2, 6, **kw)
    rest = tvp_var(a + b * y_changes[500:], horizon=6, state=half.state, bands=BANDS, truncation=30)
    np.testing.assert_allclose(rest.coefs, base.coefs[-len(rest) :], rtol=0, atol=1e-6)


# ---------------------------------------------------------------------------------------------
# a coefficient that breaks at a known date
# ---------------------------------------------------------------------------------------------


def test_coefficient_moves_to_its_new_value_within_the_memory_of_kappa1():
    # Source: exponentially weighted least squares (above). y1_t = a_t · y2_{t−1} + e1_t with y2
    # white noise, a_t = 0.2 before row b and 0.8 from row b on. The regressor y2_{t−1} is
    # uncorrelated with the other regressors and has constant variance, so m dates after the
    # break the estimate covers, in expectation, a share 1 − κ₁^m of the jump (the prior's
    # weight κ₁^{b−m₀} ≈ 1e-4 is negligible). κ₁ = 0.98: memory 1/(1 − κ₁) = 50 dates, share
    # 0.636 after 50 dates, 0.951 after 150. Average over 40 simulated paths; tolerance 0.06 of
    # the jump (the mean's standard error here is ≈ 0.015 of the jump; 4 s.e.).
    kappa, b, jump = 0.98, 500, 0.6
    paths = []
    for seed in range(40):
        rng = np.random.default_rng(1000 + seed)
        T = b + 200
        e = rng.standard_normal((T, 2))
        yy = np.zeros((T, 2))
        yy[:, 1] = e[:, 1]
        a = np.where(np.arange(T) >= b, 0.2 + jump, 0.2)
        yy[1:, 0] = a[1:] * yy[:-1, 1] + 0.5 * e[1:, 0]
        res = tvp_var(yy, 1, 2, kappa1=kappa, training=50)
        paths.append(res.coefs[:, 0, 0, 1])
        ends = res.ends
    share = (np.mean(paths, axis=0) - 0.2) / jump
    at = {m: share[int(np.flatnonzero(ends == b - 1 + m)[0])] for m in (0, 50, 150)}
    assert abs(at[0]) < 0.06
    assert abs(at[50] - (1 - kappa**50)) < 0.06
    assert abs(at[150] - (1 - kappa**150)) < 0.06


# ---------------------------------------------------------------------------------------------
# the Kalman recursion against a direct, unbatched re-implementation
# ---------------------------------------------------------------------------------------------


def direct_filter(y, p, train, kappa1, kappa2):
    """The papers' recursion date by date with the full state vector β = vec B (n·k) and
    X_t = I_n ⊗ z_t' built explicitly; prior from least squares on the training rows."""
    T, n = y.shape
    prior = arlib.fit_var(y[:train], p)
    k = prior.params.shape[0]
    beta = prior.params.T.reshape(n * k).copy()  # equation blocks
    P = np.kron(prior.sigma_u, prior.gram_inv)
    S = prior.sigma_u.copy()
    coefs, sigmas = [], []
    for t in range(train, T):
        z = np.concatenate([[1.0]] + [y[t - i] for i in range(1, p + 1)])
        X = np.kron(np.eye(n), z[None, :])
        P_pred = P / kappa1
        e = y[t] - X @ beta
        S_pred = kappa2 * S + (1 - kappa2) * np.outer(e, e)
        K = P_pred @ X.T @ np.linalg.inv(X @ P_pred @ X.T + S_pred)
        beta = beta + K @ e
        P = (np.eye(n * k) - K @ X) @ P_pred
        eps = y[t] - X @ beta
        S = kappa2 * S + (1 - kappa2) * np.outer(eps, eps)
        coefs.append(beta.reshape(n, k).T.copy())
        sigmas.append(S.copy())
    return np.array(coefs), np.array(sigmas)


def test_full_covariance_filter_agrees_with_a_direct_loop(y):
    # Source: the recursion as written in arlib/_tvp.py's docstring (papers' layout), coded
    # independently with explicit Kronecker products and an inverse. Tolerance 1e-9: both are
    # the same arithmetic in different order, over 470 dates (~1e-12 observed).
    res = tvp_var(y, 2, 5, kappa1=0.97, kappa2=0.95, training=30, covariance="full")
    coefs, sigmas = direct_filter(y, 2, 30, 0.97, 0.95)
    got = np.array([params_of(res, t) for t in range(len(res))])
    np.testing.assert_allclose(got, coefs, rtol=0, atol=1e-9)
    np.testing.assert_allclose(res.sigma_u, sigmas, rtol=0, atol=1e-9)


def test_kronecker_filter_equals_the_full_one_when_sigma_is_fixed(y):
    # Source: module docstring derivation — with P₀ = Σ₀ ⊗ V₀ and κ₂ = 1 the full gain is I ⊗ g,
    # so both recursions are the same filter for any κ₁. With κ₂ < 1 they differ (Σ_{t|t−1}
    # weights the full one's update), but only slightly for slowly moving Σ.
    kw = {"kappa1": 0.97, "training": 30}
    kron = tvp_var(y, 2, 5, kappa2=1.0, **kw)
    full = tvp_var(y, 2, 5, kappa2=1.0, covariance="full", **kw)
    np.testing.assert_allclose(kron.coefs, full.coefs, rtol=0, atol=1e-10)
    np.testing.assert_allclose(kron.intercept, full.intercept, rtol=0, atol=1e-10)
    k2 = tvp_var(y, 2, 5, kappa2=0.99, **kw)
    f2 = tvp_var(y, 2, 5, kappa2=0.99, covariance="full", **kw)
    assert 0 < np.abs(k2.coefs - f2.coefs).max() < 0.1


def test_kronecker_filter_agrees_with_a_direct_loop(y):
    # Source: the RLS form of the module docstring, coded with the explicit full state and
    # P = Σ ⊗ V kept as a full matrix, but with the gain's Σ equal to P's own factor.
    res = tvp_var(y, 2, 5, kappa1=0.96, kappa2=0.9, training=30)
    prior = arlib.fit_var(y[:30], 2)
    n, k = 3, prior.params.shape[0]
    beta = prior.params.T.reshape(n * k).copy()
    V = prior.gram_inv.copy()
    S = prior.sigma_u.copy()
    for t in range(30, len(y)):
        z = np.concatenate([[1.0]] + [y[t - i] for i in (1, 2)])
        X = np.kron(np.eye(n), z[None, :])
        P_pred = np.kron(S, V / 0.96)  # any Σ gives the same gain: it cancels in K
        e = y[t] - X @ beta
        K = P_pred @ X.T @ np.linalg.inv(X @ P_pred @ X.T + S)
        beta = beta + K @ e
        V = V / 0.96 - np.outer(V / 0.96 @ z, z @ V / 0.96) / (1 + z @ V @ z / 0.96)
        eps = y[t] - X @ beta
        S = 0.9 * S + 0.1 * np.outer(eps, eps)
        i = t - 30
        np.testing.assert_allclose(params_of(res, i), beta.reshape(n, k).T, atol=1e-9)
        np.testing.assert_allclose(res.sigma_u[i], S, atol=1e-9)


# ---------------------------------------------------------------------------------------------
# per-date connectedness = the single-model functions on that date's (B_t, Σ_t)
# ---------------------------------------------------------------------------------------------


def test_per_date_measures_equal_single_model_calls(y):
    # Source: Diebold & Yilmaz (2012), Baruník & Křehlík (2018), Lastrapes & Wiesen (2021) as
    # implemented by arlib.connectedness / frequency_connectedness / joint_connectedness.
    res = tvp_var(y, 2, 8, bands=BANDS, truncation=40, joint=True, training=30)
    for t in (0, 123, len(res) - 1):
        proc = arlib.var_process(res.coefs[t], res.sigma_u[t], res.intercept[t])
        dy = arlib.connectedness(proc, 8)
        np.testing.assert_allclose(res.pairwise[t], dy.table, atol=1e-10)
        assert math.isclose(res.total_connectedness[t], dy.total, abs_tol=1e-10)
        np.testing.assert_allclose(res.net[t], dy.net, atol=1e-10)
        fc = arlib.frequency_connectedness(proc, bands=BANDS, truncation=40)
        np.testing.assert_allclose(res.band_pairwise[t], fc.tables, atol=1e-10)
        np.testing.assert_allclose(res.band_total[t], fc.total, atol=1e-10)
        np.testing.assert_allclose(res.band_net[t], fc.net, atol=1e-10)
        np.testing.assert_allclose(res.band_within_total[t], fc.within_total, atol=1e-10)
        jc = arlib.joint_connectedness(proc, 8)
        np.testing.assert_allclose(res.joint_from_others[t], jc.from_others, atol=1e-10)
        assert math.isclose(res.joint_total[t], jc.total, abs_tol=1e-10)
        np.testing.assert_allclose(res.joint_to_others[t], jc.to_others, atol=1e-10)
        jb = arlib.joint_frequency_connectedness(proc, bands=BANDS, truncation=40)
        np.testing.assert_allclose(res.joint_band_from_others[t], jb.from_others, atol=1e-10)
        np.testing.assert_allclose(res.joint_band_total[t], jb.total, atol=1e-10)
        np.testing.assert_allclose(res.joint_band_variance[t], jb.variance_share, atol=1e-10)
        assert math.isclose(res.spectral_radius[t], proc.spectral_radius, rel_tol=1e-12)


@pytest.mark.parametrize(
    ("horizon", "truncation", "grid"), [(10, 30, 30), (10, 30, 91), (12, 7, 512)]
)
def test_per_date_kernels_equal_the_frequency_and_decomposition_kernels(horizon, truncation, grid):
    # The per-date kernels take the band sums as low-rank quadratic forms of the MA terms
    # (`_frequency.band_projection`: Toeplitz eigenpairs, one band as the remainder) instead of an
    # rfft of size N; they must equal `_frequency.frequency_kernel` on its grid N — also N = L and odd N — and
    # `_decompose.fevd_kernel`'s generalized last step. Tolerance 1e-12 (rounding of fractions).
    rng = np.random.default_rng(horizon + truncation + grid)
    D, n, p = 6, 4, 3
    coefs = rng.normal(size=(D, p, n, n)) * 0.25 / n
    a = rng.normal(size=(D, n, n))
    sigma = a @ a.transpose(0, 2, 1) + 0.2 * np.eye(n)
    got = _measures(coefs, sigma, horizon, BANDS, truncation, grid, joint=True)
    weights = band_weights(BANDS, grid)
    ref_bands = frequency_kernel(coefs, sigma, truncation, grid, weights)
    ref_gen = fevd_kernel(coefs, sigma, horizon, "generalized", None)[:, -1]
    np.testing.assert_allclose(got["band_pairwise"] / 100, ref_bands, rtol=0, atol=1e-12)
    np.testing.assert_allclose(got["pairwise"] / 100, ref_gen, rtol=0, atol=1e-12)
    np.testing.assert_allclose(got["joint"], joint_kernel(coefs, sigma, horizon), atol=1e-12)


def test_per_date_measures_do_not_depend_on_the_chunks_of_dates(y, monkeypatch):
    # Dates are measured in chunks within arlib._tvp.CHUNK_BYTES; each date's arithmetic is its
    # own (one recursion, projection and eigenproblem per date), so the chunking shows in no bit.
    res = tvp_var(y, 2, 8, bands=BANDS, truncation=30, joint=True)
    monkeypatch.setattr(arlib._tvp, "CHUNK_BYTES", 1)  # one date per chunk
    one = tvp_var(y, 2, 8, bands=BANDS, truncation=30, joint=True)
    fields = ("pairwise", "band_pairwise", "band_total", "joint_from_others", "joint_band_from_others",
              "spectral_radius")
    for field in fields:
        np.testing.assert_array_equal(getattr(one, field), getattr(res, field), err_msg=field)


def test_result_shapes_and_read_only(y):
    res = tvp_var(y, 2, 8, bands=BANDS, truncation=20, joint=True)
    D, n, p = len(res), 3, 2
    assert res.training == max(arlib.minimum_window(n, p), 4 * (1 + n * p))
    assert D == len(y) - res.training
    shapes = {
        "ends": (D,), "coefs": (D, p, n, n), "intercept": (D, n), "sigma_u": (D, n, n),
        "prediction_error": (D, n), "spectral_radius": (D,), "total_connectedness": (D,),
        "to_others": (D, n), "pairwise": (D, n, n), "band_pairwise": (D, 3, n, n),
        "band_total": (D, 3), "band_net": (D, 3, n), "joint_from_others": (D, n),
        "joint_total": (D,), "joint_band_from_others": (D, 3, n), "joint_band_total": (D, 3),
        "joint_band_variance": (D, 3, n),
    }  # fmt: skip
    for name, shape in shapes.items():
        arr = getattr(res, name)
        assert arr.shape == shape, name
        assert not arr.flags.writeable, name
    np.testing.assert_allclose(res.pairwise.sum(axis=-1), 100.0, atol=1e-10)
    assert not res.state.params.flags.writeable
    reused = tvp_var(y, 2, 8, reuse_training=True)
    assert reused.ends[0] == 2 and len(reused) == len(y) - 2
    quick = tvp_var(y, 2, 8, stability=False)
    assert quick.spectral_radius is None
    np.testing.assert_array_equal(quick.pairwise, tvp_var(y, 2, 8).pairwise)
    no_const = tvp_var(y, 2, 8, trend="n")
    assert no_const.intercept is None and no_const.state.params.shape == (6, 3)


# ---------------------------------------------------------------------------------------------
# continuing from a stored state
# ---------------------------------------------------------------------------------------------


@pytest.mark.parametrize("covariance", ["kronecker", "full"])
def test_continuing_from_the_state_equals_one_run_over_all_rows(y, covariance):
    # The nightly update: filter rows 0..349, store the state, then feed rows 350.. in two more
    # calls (one of a single row). Every output must equal one run over all rows to 1e-10 (the
    # same recursion; the Kronecker filter's blocks of dates then start at other rows, which
    # changes rounding only, ~1e-13).
    kw = {"bands": BANDS, "truncation": 30, "joint": True}
    full = tvp_var(y, 2, 6, kappa1=0.98, kappa2=0.97, covariance=covariance, **kw)
    first = tvp_var(y[:350], 2, 6, kappa1=0.98, kappa2=0.97, covariance=covariance, **kw)
    one = tvp_var(y[350:351], horizon=6, state=first.state, **kw)
    rest = tvp_var(y[351:], horizon=6, state=one.state, **kw)
    assert one.ends.tolist() == [350] and rest.ends[0] == 351
    for name in ("ends", "coefs", "intercept", "sigma_u", "prediction_error", "pairwise",
                 "total_connectedness", "band_pairwise", "band_total", "joint_from_others",
                 "spectral_radius"):  # fmt: skip
        joined = np.concatenate([getattr(r, name) for r in (first, one, rest)])
        np.testing.assert_allclose(joined, getattr(full, name), rtol=0, atol=1e-10, err_msg=name)
    for name in ("params", "cov", "sigma", "tail"):
        np.testing.assert_allclose(
            getattr(rest.state, name), getattr(full.state, name), rtol=0, atol=1e-10
        )
    assert rest.state.row == full.state.row == len(y)


# ---------------------------------------------------------------------------------------------
# bad inputs
# ---------------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("kwargs", "pattern"),
    [
        ({"kappa1": 0.0}, r"`kappa1` must be .* in \(0, 1\].*kappa1=0.99"),
        ({"kappa1": 1.5}, r"`kappa1` must be .* in \(0, 1\]"),
        ({"kappa1": float("nan")}, r"`kappa1`"),
        ({"kappa2": -0.1}, r"`kappa2` must be .* in \(0, 1\].*kappa2=0.99"),
        ({"kappa2": "high"}, r"`kappa2`"),
        ({"training": 5}, r"`training` must be >= 12.*p \+ k \+ n = 12 rows"),
        ({"training": 600}, r"`y` has 500 rows.*training=600.*smaller `training`"),
        ({"covariance": "diagonal"}, r"`covariance` must be one of"),
        ({"trend": "ct"}, r"`trend` must be one of \['n', 'c'\]"),
    ],
)
def test_bad_inputs_name_the_argument_and_the_fix(y, kwargs, pattern):
    with pytest.raises(InvalidInputError, match=pattern):
        tvp_var(y, 2, 5, **kwargs)


def test_missing_rows_are_refused_with_their_row_and_series(y):
    gappy = y.copy()
    gappy[123, 1] = np.nan
    with pytest.raises(InvalidInputError, match=r"NaN at row 123 of series 'y1'"):
        tvp_var(gappy, 2, 5)
    res = tvp_var(y[:300], 2, 5)
    with pytest.raises(InvalidInputError, match=r"NaN at row 3 of series 'y1'"):
        tvp_var(gappy[120:130], horizon=5, state=res.state)
    assert "TimeVaryingVAR(272 dates (rows 28..299)" in repr(res)
    assert repr(res.state).startswith("TVPState(row=300, n=3, lags=2")


def test_too_few_rows_for_the_default_training_sample():
    y = np.random.default_rng(0).standard_normal((28, 3))
    with pytest.raises(InvalidInputError, match=r"`y` has 28 rows.*training=28.*more than 28"):
        tvp_var(y, 2, 5)


def test_state_settings_cannot_be_changed(y):
    res = tvp_var(y[:300], 2, 5)
    with pytest.raises(InvalidInputError, match=r"`lags`=3 differs from the state's 2"):
        tvp_var(y[300:], 3, 5, state=res.state)
    with pytest.raises(InvalidInputError, match=r"`kappa1`=0.9 differs"):
        tvp_var(y[300:], horizon=5, kappa1=0.9, state=res.state)
    with pytest.raises(InvalidInputError, match=r"`y` has 2 series but the state has 3"):
        tvp_var(y[300:, :2], horizon=5, state=res.state)
    with pytest.raises(InvalidInputError, match=r"`training`"):
        tvp_var(y[300:], horizon=5, training=50, state=res.state)
    broken = TVPState(**{**vars(res.state), "sigma": np.eye(2)})
    with pytest.raises(InvalidInputError, match=r"`state`.sigma has shape \(2, 2\).*\(3, 3\)"):
        tvp_var(y[300:], horizon=5, state=broken)
    with pytest.raises(InvalidInputError, match=r"`lags` is required"):
        tvp_var(y, horizon=5)
