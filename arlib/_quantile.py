"""Quantile VAR: equation-by-equation quantile regression at τ, and its connectedness.

Model (Koenker & Bassett 1978; the VAR form of Ando, Greenwood-Nimmo & Shin 2022, Sec. 2):
for each equation i and a quantile level τ ∈ (0, 1),

    Q_τ(y_{i,t} | z_t) = z_t' b_i(τ),   z_t = [1, y_{t−1}', …, y_{t−p}']'   (k = d + n·p)

    b̂_i(τ) = argmin_b Σ_t ρ_τ(y_{i,t} − z_t'b),   ρ_τ(u) = u (τ − 1[u < 0])      (K&B eq. 3.1)

`params` (k, n) holds b̂_i(τ) in column i, laid out like `VARFit.params` ("const" first, then
lag 1's n series, lag 2's, …), so ``coefs[l][i, j]`` is the effect of series j at lag l+1 on the
τ-quantile of series i.

The exact solver
----------------
The check-function problem is the linear programme min τ 1'u⁺ + (1 − τ) 1'u⁻ subject to
Zb + u⁺ − u⁻ = y, u± >= 0. One of its optimal solutions is a vertex: a set h of k observations
fitted exactly, b = Z_h^{-1} y_h (Koenker 2005, Sec. 6.2). We solve it by the simplex method on
this set of basic observations (Barrodale & Roberts 1973; Koenker & d'Orey 1987), written for
batches of problems that share one design Z (the n equations at every τ of a window):

    residuals r = y − Z b;  ψ_t = τ − 1[r_t < 0] for t ∉ h;  G = Z Z_h^{-1}  (G[h_j, l] = δ_jl)
    a = G' ψ  (k,): moving off basic observation j in direction ±d_j, d_j = Z_h^{-1} e_j, has the
        directional derivative  D⁺_j = (1 − τ) − a_j,   D⁻_j = τ + a_j
        (plus Σ_{t∈Z₀} ρ_τ(∓G_tj) over non-basic observations fitted exactly, Z₀, if any)
    optimal  ⇔  −τ <= a_j <= 1 − τ for all j (no descending edge; Koenker 2005, Thm. 2.1)
    otherwise take the steepest edge (j, σ) and a Barrodale–Roberts line search: the objective
        along b + s σ d_j is convex piecewise linear with kinks at s_t = r_t / (σ G_tj) > 0;
        its slope starts at D^σ_j < 0 and grows by |G_tj| at each kink; the observation q at
        which it turns non-negative enters h in place of h_j.
    Z_h^{-1} is updated by the rank-one (Sherman–Morrison) formula of the exchange,
        Z_h^{-1} ← Z_h^{-1} − d_j (x_q'Z_h^{-1} − e_j') / (x_q'd_j),
    and G is never formed whole (a = Z_h^{-T}(Z'ψ) and the edge's column Z d_j are two matrix
    products per exchange). Z_h^{-1}, b and r are recomputed from scratch every `REFRESH`
    exchanges and at the end (b = Z_h^{-1} y_h by a fresh inverse), so the reported b is the exact
    vertex, to the rounding of one k × k inversion.

Every exchange lowers the objective strictly (positive step along a descending edge) unless a
non-basic residual is exactly zero. Tolerance: an edge counts as descending when its derivative
is below −`OPT_TOL` (1e-9, in units of the check function per unit step, against derivatives of
order 1); a residual counts as zero when |r_t| <= 1e-12 · max|y|. A vertex with exactly-fitted
non-basic observations (ties, possible with rounded data) is degenerate: the edge test is then
necessary but not sufficient for optimality, so such problems — and any that reach
`MAX_EXCHANGES` — are re-solved by scipy's `linprog` (HiGHS) and the better of the
two solutions is kept (`fallbacks` counts those where the LP's was better). For continuous data
this has probability zero (none in the benchmark's 41,436 fits).

Warm start: a previous solution's basic set is a valid start for a nearby problem (the next
rolling window, see `_quantile_rolling`): observations that left are exchanged for entering ones
(largest |G_qj|, so Z_h stays well conditioned) and the simplex continues from there.

The covariance at τ
-------------------
The generalized decomposition needs Σ(τ), "the covariance matrix of the errors" e_t(τ) of the
quantile VAR (Ando, Greenwood-Nimmo & Shin 2022, Sec. 2, as we recall it — not checked against
the paper here). We use the sample covariance of the τ-residuals ê_t(τ) = y_t − B̂(τ)'z_t,

    Σ̂(τ) = (1 / (T_eff − 1)) Σ_t (ê_t − ē)(ê_t − ē)',   ē = mean of ê_t(τ),

centred because ê_t(τ) has, by construction, a non-zero mean away from the median (its
τ-quantile is zero, not its mean): the mean is a constant offset, the part of B̂(τ)'s intercept
that shifts the τ-quantile, not a shock. An uncentred E[ee'] would add the rank-one ēē' and
read the quantile offsets as perfectly correlated shocks — for a VAR with i.i.d. errors it would
make tail connectedness large even though the cross effects are those of the mean model. With
centring, a location-shift model (B(τ) equal to the OLS slopes, only intercepts moving with τ)
gives Σ̂(τ) ≈ Σ̂_OLS and connectedness at every τ close to OLS's (tested). The divisor does not
matter for the generalized decomposition (invariant to scaling Σ).

References
----------
Koenker, R. and Bassett, G. (1978). Regression quantiles. Econometrica 46(1), 33–50 (the
    check-function problem; equation and theorem numbers here and below recalled from memory).
Barrodale, I. and Roberts, F. D. K. (1973). An improved algorithm for discrete ℓ1 linear
    approximation. SIAM Journal on Numerical Analysis 10(5), 839–848.
Koenker, R. and d'Orey, V. (1987). Computing regression quantiles. Applied Statistics 36(3),
    383–393.
Koenker, R. (2005). Quantile Regression. Cambridge University Press, Sec. 2.2 (Thm 2.1,
    subgradient condition), Sec. 6.2 (the simplex on basic observations).
Ando, T., Greenwood-Nimmo, M. and Shin, Y. (2022). Quantile connectedness: modeling tail
    behavior in the topology of financial networks. Management Science 68(4), 2401–2431.
Pesaran, M. H. and Shin, Y. (1998). Economics Letters 58, 17–29 (generalized FEVD).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy.optimize import linprog

from ._estimate import (
    TREND_TERMS,
    _check_constant,
    _check_rows,
    _regressor_names,
    companion_matrix,
    design_matrix,
)
from ._validate import (
    ArlibError,
    InvalidInputError,
    as_data,
    as_real_array,
    check_int,
    check_option,
    readonly,
    warn_unstable,
)

#: Edge derivatives above −OPT_TOL count as non-descending (check-function units per unit step).
OPT_TOL = 1e-9
#: |r_t| <= ZERO_TOL · max|y| counts as an exactly fitted observation.
ZERO_TOL = 1e-12
#: Exchanges between fresh recomputations of Z_h^{-1} and G.
REFRESH = 64
#: Exchanges after which a problem goes to the LP fallback.
MAX_EXCHANGES = 2000
#: Deterministic terms a quantile VAR may carry.
QUANTILE_TRENDS = ("n", "c")


# ---------------------------------------------------------------------------------------------
# the check function
# ---------------------------------------------------------------------------------------------


def check_loss(resid: np.ndarray, tau: Any) -> np.ndarray:
    """Σ_t ρ_τ(r_t) over the rows of `resid` (..., T, P) → (..., P).

    ρ_τ(u) = u (τ − 1[u < 0])  (Koenker & Bassett 1978, eq. 3.1); `tau` broadcasts against P.
    """
    r = np.asarray(resid)
    return (r * (np.asarray(tau) - (r < 0))).sum(axis=-2)


# ---------------------------------------------------------------------------------------------
# batched simplex on basic observations (trusts its inputs)
# ---------------------------------------------------------------------------------------------


@dataclass
class SimplexState:
    """Working state of P problems min_b Σ_t ρ_{τ_p}(Y[t, p] − X[t]'b) sharing X (m, k).

    basis (P, k) int rows of X (the optimal vertices); binv (P, k, k) X_h^{-1}; beta (P, k);
    resid (P, m); exchanges (P,) int; degenerate (P,) bool (stopped at a degenerate vertex or the
    exchange cap: checked by the LP); fallback (P,) bool (the LP's solution was better and is kept).
    """

    basis: np.ndarray
    binv: np.ndarray
    beta: np.ndarray
    resid: np.ndarray
    exchanges: np.ndarray
    fallback: np.ndarray
    degenerate: np.ndarray


def _fresh(X: np.ndarray, Yt: np.ndarray, basis: np.ndarray) -> tuple[np.ndarray, ...]:
    """Z_h^{-1}, b = Z_h^{-1} y_h and r = y − Z b (zero on h) from scratch."""
    P = basis.shape[0]
    Xh = X[basis]  # (P, k, k)
    binv = np.linalg.inv(Xh)
    yh = np.take_along_axis(Yt, basis, axis=1)  # (P, k)
    beta = np.einsum("pkl,pl->pk", binv, yh)
    resid = Yt - beta @ X.T
    resid[np.arange(P)[:, None], basis] = 0.0
    return binv, beta, resid


def initial_basis(X: np.ndarray, P: int) -> np.ndarray:
    """(P, k) a cold start: k linearly independent rows of X, by QR with column pivoting on X'."""
    from scipy.linalg import qr

    _, _, piv = qr(X.T, mode="economic", pivoting=True)
    k = X.shape[1]
    return np.tile(np.sort(piv[:k]), (P, 1))


def simplex(
    X: np.ndarray, Y: np.ndarray, tau: np.ndarray, basis: np.ndarray, *, lp_fallback: bool = True
) -> SimplexState:
    """Solve P quantile regressions that share the design X (m, k) from the start `basis`.

    Y (m, P) one response per problem; tau (P,); basis (P, k) rows of X with X_h nonsingular.
    Returns the optimal vertex of each problem (module docstring for the method and tolerances).
    G = X Z_h^{-1} is never formed whole: a = Z_h^{-T}(X'ψ) and the edge's column X d_j are two
    matrix products per exchange, (P, m)(m, k) and (P, k)(k, m). The working arrays hold only
    the problems still moving (compacted when some stop).
    """
    m, k = X.shape
    Yt = np.ascontiguousarray(Y.T)  # (P, m)
    P = Yt.shape[0]
    XT = np.ascontiguousarray(X.T)
    out_basis = basis.copy()
    exchanges = np.zeros(P, dtype=np.int64)
    degenerate = np.zeros(P, dtype=bool)
    # working set
    idx = np.arange(P)
    bas = basis.copy()
    bi, beta, r = _fresh(X, Yt, bas)
    nb = np.ones((P, m), dtype=bool)
    nb[np.arange(P)[:, None], bas] = False
    tau_a = tau[:, None].astype(float)
    ztol = (ZERO_TOL * np.maximum(np.abs(Yt).max(axis=1), np.finfo(float).tiny))[:, None]
    ex = np.zeros(P, dtype=np.int64)
    since = 0
    while idx.size:
        if since >= REFRESH:
            bi, beta, r = _fresh(X, Yt[idx], bas)
            since = 0
        A = idx.size
        rows = np.arange(A)
        zero = nb & (np.abs(r) <= ztol)
        psi = np.where(r < 0, tau_a - 1.0, tau_a)
        psi[~nb] = 0.0
        has_zero = zero.any(axis=1)
        if has_zero.any():
            psi[zero] = 0.0
        a = np.einsum("pl,plj->pj", psi @ X, bi)  # a_j = Σ_t ψ_t x_t'd_j = (G'ψ)_j
        both = np.concatenate([(1.0 - tau_a) - a, tau_a + a], axis=1)  # D⁺_j, D⁻_j  (A, 2k)
        for i in np.flatnonzero(has_zero):  # + Σ ρ_τ(∓G_tj) over exactly fitted t ∉ h (rare)
            gz = X[zero[i]] @ bi[i]  # (z, k)
            t_ = tau_a[i, 0]
            both[i, :k] += np.where(gz > 0, (1.0 - t_) * gz, -t_ * gz).sum(axis=0)
            both[i, k:] += np.where(gz < 0, (t_ - 1.0) * gz, t_ * gz).sum(axis=0)
        pick = both.argmin(axis=1)
        best = both[rows, pick]
        stop = (best >= -OPT_TOL) | (ex >= MAX_EXCHANGES)
        if stop.any():
            gone = idx[stop]
            out_basis[gone] = bas[stop]
            exchanges[gone] = ex[stop]
            degenerate[gone] = has_zero[stop] | (ex[stop] >= MAX_EXCHANGES)
            go = ~stop
            idx, bas, bi, beta, r, nb = idx[go], bas[go], bi[go], beta[go], r[go], nb[go]
            tau_a, ztol, ex, zero = tau_a[go], ztol[go], ex[go], zero[go]
            pick, best = pick[go], best[go]
            A = idx.size
            rows = np.arange(A)
            if not A:
                break
        j = pick % k
        sigma = np.where(pick < k, 1.0, -1.0)
        dj = bi[rows, :, j]  # (A, k) d_j = Z_h^{-1} e_j
        gcol = (dj * sigma[:, None]) @ XT  # (A, m) x_t'δ along δ = σ d_j
        # kinks s_t = r_t / g_t > 0 of non-basic, not exactly fitted observations
        ok = (r * gcol > 0) & nb
        if has_zero.any():
            ok &= ~zero
        s = np.divide(r, gcol, out=np.full_like(r, np.inf), where=ok)
        order = np.argsort(s, axis=1)
        kink = (np.abs(gcol) * ok)[rows[:, None], order]  # slope gained at each kink
        slope = best[:, None] + np.cumsum(kink, axis=1)
        pos = np.argmax(slope >= 0.0, axis=1)
        q = order[rows, pos]
        t = s[rows, q]
        bad = ~np.isfinite(t)
        if bad.any():  # no kink ahead: cannot happen for m > k with rank k; leave to the LP
            ex[bad] = MAX_EXCHANGES
            t = np.where(bad, 0.0, t)
            q = np.where(bad, bas[rows, j], q)
        # step: b += t σ d_j, r −= t g; observation q enters h in place of h_j
        beta += (t * sigma)[:, None] * dj
        r -= t[:, None] * gcol
        r[rows, q] = 0.0
        nb[rows, bas[rows, j]] = True
        nb[rows, q] = False
        bas[rows, j] = q
        # Sherman–Morrison exchange of row j of Z_h: Z_h^{-1} ← Z_h^{-1} − d_j (g_q − e_j')/g_qj
        gq = np.einsum("pk,pkl->pl", X[q], bi)  # (A, k) g_q = x_q' Z_h^{-1}
        piv = np.where(bad, 1.0, gq[rows, j])
        gq[rows, j] -= 1.0
        bi -= dj[:, :, None] * (gq / piv[:, None])[:, None, :]
        ex += 1
        since += 1
    binv, beta, resid = _fresh(X, Yt, out_basis)
    fallback = np.zeros(P, dtype=bool)
    if lp_fallback and degenerate.any():
        for p_ in np.flatnonzero(degenerate):
            b_lp = lp_quantile(X, Yt[p_], float(tau[p_]))
            r_lp = Yt[p_] - X @ b_lp
            if check_loss(r_lp[:, None], tau[p_])[0] < check_loss(resid[p_][:, None], tau[p_])[0]:
                beta[p_] = b_lp
                resid[p_] = r_lp
                fallback[p_] = True
    return SimplexState(out_basis, binv, beta, resid, exchanges, fallback, degenerate)


def lp_quantile(X: np.ndarray, y: np.ndarray, tau: float) -> np.ndarray:
    """(k,) b minimising Σ ρ_τ(y − Xb) as the LP min τ1'u⁺ + (1−τ)1'u⁻, Xb + u⁺ − u⁻ = y (HiGHS).

    The general-purpose route: used for degenerate problems (see `simplex`) and as the
    benchmark's baseline; independent of the basic-observation simplex.
    """
    from scipy.sparse import csr_matrix, eye, hstack

    m, k = X.shape
    c = np.concatenate([np.zeros(k), np.full(m, tau), np.full(m, 1.0 - tau)])
    A = hstack([csr_matrix(X), eye(m), -eye(m)], format="csr")
    bounds = [(None, None)] * k + [(0, None)] * (2 * m)
    res = linprog(c, A_eq=A, b_eq=y, bounds=bounds, method="highs")
    if res.status != 0:
        msg = f"the LP solver failed on a quantile regression at τ={tau}: {res.message}"
        raise ArlibError(msg)
    return np.asarray(res.x[:k])


def centred_covariance(resid: np.ndarray) -> np.ndarray:
    """(..., n, n) Σ̂(τ) = Σ_t (ê_t − ē)(ê_t − ē)' / (T_eff − 1) from residuals (..., T_eff, n)."""
    e = resid - resid.mean(axis=-2, keepdims=True)
    return np.swapaxes(e, -1, -2) @ e / (resid.shape[-2] - 1)


# ---------------------------------------------------------------------------------------------
# results
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False, repr=False)
class QuantileRegression:
    """One linear quantile regression at τ. Arrays read-only.

    Attributes
    ----------
    params : (k,) b̂(τ).   resid : (m,) y − X b̂.   objective : Σ ρ_τ(resid).
    basis : (k,) rows of X fitted exactly at the simplex's last vertex, sorted (the optimal vertex
        unless `fallback`, when the LP's solution replaced b̂).
    quantile : τ.   exchanges : simplex exchanges made.   fallback : solved by the LP fallback.
    """

    params: np.ndarray
    resid: np.ndarray
    objective: float
    basis: np.ndarray
    quantile: float
    exchanges: int
    fallback: bool

    def __repr__(self) -> str:
        return (
            f"QuantileRegression(quantile={self.quantile}, k={self.params.shape[0]}, "
            f"objective={self.objective:.6g})"
        )


@dataclass(frozen=True, eq=False, repr=False)
class QuantileVARFit:
    """A VAR fitted equation by equation by quantile regression at τ; usable as a `VARLike`.

    Attributes
    ----------
    y : (T, n) the data.   names : n series names.   trend : "n" | "c".   lags : p.
    quantile : τ.   nobs : T_eff = T − p.   k_regressors : k = d + n·p.
    params : (k, n) B̂(τ), column i = equation i (`regressor_names` order).
    coefs : (p, n, n), ``coefs[l][i, j]`` = effect of series j at lag l+1 on the τ-quantile of i.
    intercept : (n,) or None.
    resid : (T_eff, n) ê_t(τ) = y_t − B̂(τ)'z_t, row j belongs to row p + j of `y`.
    sigma_u : (n, n) Σ̂(τ), the centred covariance of `resid` (module docstring).
    objective : (n,) Σ_t ρ_τ(ê_{i,t}) per equation.
    basis : (n, k) rows of the regression (0 = row p of y) fitted exactly, per equation.
    exchanges : (n,) simplex exchanges.   fallbacks : equations solved by the LP fallback.
    companion, spectral_radius, is_stable : of `coefs`, as in `VARProcess`.
    """

    y: np.ndarray
    names: tuple[str, ...]
    trend: str
    lags: int
    quantile: float
    nobs: int
    k_regressors: int
    params: np.ndarray
    coefs: np.ndarray
    intercept: np.ndarray | None
    resid: np.ndarray
    sigma_u: np.ndarray
    objective: np.ndarray
    basis: np.ndarray
    exchanges: np.ndarray
    fallbacks: int
    companion: np.ndarray
    spectral_radius: float
    is_stable: bool

    @property
    def n(self) -> int:
        """Number of series."""
        return int(self.y.shape[1])

    @property
    def regressor_names(self) -> tuple[str, ...]:
        """k labels of the rows of `params`: "const", then "<name>.L<lag>"."""
        return _regressor_names(self.names, self.lags, self.trend)

    def __repr__(self) -> str:
        return (
            f"QuantileVARFit(quantile={self.quantile}, n={self.n}, lags={self.lags}, "
            f"nobs={self.nobs}, names={list(self.names)!r}, "
            f"spectral_radius={self.spectral_radius:.4f})"
        )


# ---------------------------------------------------------------------------------------------
# public entry points
# ---------------------------------------------------------------------------------------------


def check_quantile(value: Any, arg: str = "quantile") -> float:
    """τ as a float strictly inside (0, 1)."""
    try:
        tau = float(value)
    except (TypeError, ValueError):
        tau = float("nan")
    if isinstance(value, bool) or not 0.0 < tau < 1.0:
        msg = (
            f"`{arg}` must be a quantile level strictly between 0 and 1, got {value!r}; "
            "use e.g. 0.05 (lower tail), 0.5 (median) or 0.95 (upper tail)"
        )
        raise InvalidInputError(msg)
    return tau


def quantile_regression(x: Any, y: Any, quantile: float = 0.5) -> QuantileRegression:
    """Linear quantile regression b̂(τ) = argmin_b Σ_t ρ_τ(y_t − x_t'b) by the exact simplex.

    Parameters
    ----------
    x : (m, k) regressors (include a column of ones for an intercept), rank k.
    y : (m,) response.   quantile : τ in (0, 1).

    Raises
    ------
    InvalidInputError : shapes, NaN/inf, τ outside (0, 1), m <= k or rank-deficient x.
    """
    X = as_real_array(x, "x", "a numeric array of shape (m, k)")
    Y = as_real_array(y, "y", "a numeric array of shape (m,)")
    if X.ndim == 1:
        X = X[:, None]
    if X.ndim != 2 or Y.ndim != 1 or Y.shape[0] != X.shape[0]:
        msg = f"`x` must be (m, k) and `y` (m,) with the same m; got {X.shape} and {Y.shape}"
        raise InvalidInputError(msg)
    if not (np.isfinite(X).all() and np.isfinite(Y).all()):
        msg = "`x` and `y` must be finite; drop rows with NaN/inf before fitting"
        raise InvalidInputError(msg)
    tau = check_quantile(quantile)
    m, k = X.shape
    if m <= k or np.linalg.matrix_rank(X) < k:
        msg = (
            f"`x` ({m} rows, {k} columns) must have more rows than columns and full column "
            "rank; drop collinear columns or add rows"
        )
        raise InvalidInputError(msg)
    st = simplex(X, Y[:, None], np.array([tau]), initial_basis(X, 1))
    params = st.beta[0].copy()
    resid = st.resid[0].copy()
    basis = np.sort(st.basis[0])
    readonly(params, resid, basis)
    return QuantileRegression(
        params=params, resid=resid, objective=float(check_loss(resid[:, None], tau)[0]),
        basis=basis, quantile=tau, exchanges=int(st.exchanges[0]), fallback=bool(st.fallback[0]),
    )  # fmt: skip


def quantile_var(
    y: Any,
    lags: int,
    quantile: float = 0.5,
    *,
    trend: str = "c",
    names: Sequence[str] | None = None,
) -> QuantileVARFit:
    """Fit a VAR(p) equation by equation by quantile regression at τ (module docstring).

    The result is a `VARLike` whose `sigma_u` is Σ̂(τ): pass it to `connectedness(fit, H)`,
    `variance_decomposition(fit, H, method="generalized")` or `impulse_responses` for the
    quantile connectedness of Ando, Greenwood-Nimmo & Shin (2022).

    Parameters
    ----------
    y : (T, n) rows oldest first, no NaN.   lags : p >= 1.   quantile : τ in (0, 1).
    trend : "c" (intercept, default) or "n".   names : n series names.

    Raises
    ------
    InvalidInputError : bad shapes, NaN/inf, a constant series, too few rows, τ outside (0, 1),
        collinear regressors.

    Warns
    -----
    UnstableProcessWarning : the companion matrix of B̂(τ) has spectral radius >= 1.
    """
    data, labels = as_data(y, names)
    p = check_int(lags, "lags", minimum=1, hint="a VAR needs at least one lag")
    tau = check_quantile(quantile)
    check_option(trend, "trend", QUANTILE_TRENDS)
    T, n = data.shape
    d = len(TREND_TERMS[trend])
    _check_rows(T, n, p, d, "y")
    _check_constant(data, labels, "y")
    Z = design_matrix(data, p, trend)
    Y = data[p:]
    T_eff, k = Z.shape
    if np.linalg.matrix_rank(Z) < k:
        msg = (
            f"the {k} regressors of `y` (lags={p}, trend={trend!r}) are collinear over its "
            f"{T_eff} usable rows; drop a duplicated series or use fewer lags"
        )
        raise InvalidInputError(msg)
    st = simplex(Z, Y, np.full(n, tau), initial_basis(Z, n))
    B = st.beta.T.copy()  # (k, n)
    resid = st.resid.T.copy()  # (T_eff, n)
    sigma = centred_covariance(resid)
    coefs = B[d:].reshape(p, n, n).transpose(0, 2, 1).copy()
    comp = companion_matrix(coefs)
    radius = float(np.abs(np.linalg.eigvals(comp)).max())
    intercept = B[0].copy() if d else None
    objective = check_loss(resid, tau)
    basis = np.sort(st.basis, axis=1)
    readonly(data, B, coefs, intercept, resid, sigma, objective, basis, st.exchanges, comp)
    if radius >= 1.0:
        warn_unstable(radius, what=f"quantile VAR at τ={tau}")
    return QuantileVARFit(
        y=data, names=labels, trend=trend, lags=p, quantile=tau, nobs=T_eff, k_regressors=k,
        params=B, coefs=coefs, intercept=intercept, resid=resid, sigma_u=sigma,
        objective=objective, basis=basis, exchanges=st.exchanges, fallbacks=int(st.fallback.sum()),
        companion=comp, spectral_radius=radius, is_stable=radius < 1.0,
    )  # fmt: skip
