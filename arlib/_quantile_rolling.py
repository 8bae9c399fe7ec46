"""Rolling quantile VARs: every window's equation-by-equation quantile fit at several τ, warm-started.

For each window (its rows end−window+1 .. end, observations t whose p lags lie in the window and
are finite, as in `rolling_var`) and each τ in `quantiles`, the n equations are fitted by
`_quantile.simplex` — all n·Q problems of a window in one batch, since they share the design —
and Σ̂(τ), the generalized decomposition and the Diebold–Yilmaz measures follow as in
`quantile_var` + `connectedness` (tested equal window by window).

Warm start: each problem starts from the previous window's optimal basic set (its k exactly
fitted observations). Basic observations that left the window are exchanged, one at a time, for
the entering observation q with the largest |x_q' Z_h^{-1} e_j| (the exchange keeps Z_h
nonsingular and well conditioned; a rank-one update of Z_h^{-1}); the simplex then walks from
that vertex, typically a handful of exchanges instead of the ~3k of a cold start. The answer does
not depend on the start: the optimal vertex is unique for continuous data, and a window whose
start fails (a singular basis) is solved cold. ``warm=False`` starts every window cold (for
comparison; same numbers).

References
----------
Koenker, R. and Bassett, G. (1978). Econometrica 46(1), 33–50.
Ando, T., Greenwood-Nimmo, M. and Shin, Y. (2022). Management Science 68(4), 2401–2431.
Diebold, F. X. and Yilmaz, K. (2012). International Journal of Forecasting 28, 57–66.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from ._decompose import fevd_kernel, spillover_measures
from ._estimate import TREND_TERMS, design_matrix, spectral_radius
from ._quantile import (
    QUANTILE_TRENDS,
    centred_covariance,
    check_loss,
    check_quantile,
    initial_basis,
    simplex,
)
from ._rolling_kernels import usable_observations
from ._validate import (
    InvalidInputError,
    as_names,
    as_real_array,
    check_int,
    check_option,
    readonly,
)

#: Default quantile levels: lower tail, median, upper tail.
DEFAULT_QUANTILES = (0.05, 0.5, 0.95)


@dataclass(frozen=True, eq=False, repr=False)
class RollingQuantileVAR:
    """Per-window quantile VAR results. Q quantiles, W windows, n series, p lags. Read-only.

    A skipped window (``ok[w]`` False) has NaN in every float array and its reason in
    ``skip_reason[w]``.

    Attributes
    ----------
    quantiles : (Q,) the τ levels, in the order given.
    ends : (W,) int, row of each window's last row.   starts : (W,) int, its first row.
    nobs : (W,) int, observations (regression rows) in the window.
    coefs : (Q, W, p, n, n), ``coefs[q, w, l][i, j]`` = effect of j at lag l+1 on i's τ_q-quantile.
    intercept : (Q, W, n) or None (trend "n").
    sigma_u : (Q, W, n, n) Σ̂(τ), the centred covariance of the window's τ-residuals.
    objective : (Q, W, n) Σ_t ρ_τ(ê_{i,t}) per equation.
    exchanges : (Q, W, n) int, simplex exchanges per equation (warm-start diagnostics).
    fallbacks : number of problems re-solved by the LP fallback (degenerate vertices).
    spectral_radius : (Q, W) of each window's companion matrix at τ.
    total_connectedness : (Q, W) percent.   to_others, from_others, net : (Q, W, n) percent.
    pairwise : (Q, W, n, n) percent, [q, w, i, j] = share of i's H-step forecast-error variance
        due to shocks in j (generalized with Σ̂(τ), row-normalised); rows sum to 100.
    skip_reason : (W,) object, "" when fitted.   ok : (W,) bool.
    names, lags, horizon, window, step, trend, warm : as used.
    """

    quantiles: np.ndarray
    ends: np.ndarray
    starts: np.ndarray
    nobs: np.ndarray
    coefs: np.ndarray
    intercept: np.ndarray | None
    sigma_u: np.ndarray
    objective: np.ndarray
    exchanges: np.ndarray
    fallbacks: int
    spectral_radius: np.ndarray
    total_connectedness: np.ndarray
    to_others: np.ndarray
    from_others: np.ndarray
    net: np.ndarray
    pairwise: np.ndarray
    skip_reason: np.ndarray
    ok: np.ndarray
    names: tuple[str, ...]
    lags: int
    horizon: int
    window: int
    step: int
    trend: str
    warm: bool

    def __len__(self) -> int:
        return int(self.ends.shape[0])

    @property
    def n(self) -> int:
        """Number of series."""
        return len(self.names)

    def __repr__(self) -> str:
        return (
            f"RollingQuantileVAR({len(self)} windows, quantiles={self.quantiles.tolist()}, "
            f"n={self.n}, lags={self.lags}, window={self.window}, horizon={self.horizon})"
        )


def _check_quantiles(quantiles: Any) -> tuple[float, ...]:
    if isinstance(quantiles, int | float | np.floating):
        quantiles = (quantiles,)
    try:
        items = list(quantiles)
    except TypeError:
        msg = f"`quantiles` must be a list of levels in (0, 1), got {quantiles!r}"
        raise InvalidInputError(msg) from None
    if not items:
        msg = "`quantiles` is empty; give at least one level, e.g. [0.05, 0.5, 0.95]"
        raise InvalidInputError(msg)
    out = tuple(check_quantile(v, "quantiles") for v in items)
    if len(set(out)) != len(out):
        msg = f"`quantiles` repeats a level: {list(out)!r}; list each τ once"
        raise InvalidInputError(msg)
    return out


def _replace_leavers(
    Xw: np.ndarray, basis: np.ndarray, valid: np.ndarray, binv: np.ndarray
) -> np.ndarray:
    """Exchange basic observations that left the window (``valid`` False) for entering rows.

    basis (P, k) local rows (arbitrary where invalid), binv (P, k, k) the previous Z_h^{-1}.
    Each round exchanges one invalid slot j per problem for the non-basic row q maximising
    |x_q' Z_h^{-1} e_j|, then updates Z_h^{-1} by Sherman–Morrison (`_quantile.simplex`).
    """
    basis = basis.copy()
    binv = binv.copy()
    m = Xw.shape[0]
    P = basis.shape[0]
    taken = np.zeros((P, m), dtype=bool)
    rows_p, cols_p = np.nonzero(valid)
    taken[rows_p, basis[rows_p, cols_p]] = True
    while True:
        need = ~valid
        probs = np.flatnonzero(need.any(axis=1))
        if not probs.size:
            return basis
        j = need[probs].argmax(axis=1)
        dj = binv[probs, :, j]  # (A, k)
        col = dj @ Xw.T  # (A, m) x_q' Z_h^{-1} e_j
        score = np.where(taken[probs], -1.0, np.abs(col))
        q = score.argmax(axis=1)
        a = np.arange(probs.size)
        gq = Xw[q][:, None, :] @ binv[probs]  # (A, 1, k) x_q' Z_h^{-1}
        gq = gq[:, 0, :]
        piv = gq[a, j]
        gq[a, j] -= 1.0
        binv[probs] -= dj[:, :, None] * (gq / piv[:, None])[:, None, :]
        basis[probs, j] = q
        taken[probs, q] = True
        valid[probs, j] = True


def rolling_quantile_var(
    y: Any,
    window: int,
    lags: int,
    horizon: int,
    *,
    quantiles: Sequence[float] = DEFAULT_QUANTILES,
    step: int = 1,
    trend: str = "c",
    ends: Any = None,
    after: int | None = None,
    names: Sequence[str] | None = None,
    warm: bool = True,
) -> RollingQuantileVAR:
    """Quantile VAR connectedness on every rolling window at each τ in `quantiles`.

    Each window's numbers equal `quantile_var` on the window's rows followed by
    `connectedness(fit, horizon)` (module docstring; tested).

    Parameters
    ----------
    y : (T, n) rows oldest first; NaN marks missing rows (observations whose p lags are not all
        finite are left out, as in `rolling_var`); inf is refused.
    window : rows per window.   lags : p >= 1.   horizon : H >= 1.
    quantiles : τ levels in (0, 1) (default 0.05, 0.5, 0.95).
    step : spacing of the default window ends window−1, window−1+step, ...
    trend : "c" (default) or "n".
    ends : explicit window ends (row indices, strictly increasing); overrides the grid.
    after : keep only ends > after (the nightly update).
    names : n series names.   warm : warm-start each window from the previous one's solution.

    Raises
    ------
    InvalidInputError : bad shapes or options, inf, a window too short for the model, ends
        outside the data. Windows that cannot be fitted are skipped (``ok`` False), not raised.
    """
    data = as_real_array(y, "y", "a numeric array of shape (T, n)")
    if data.ndim == 1:
        data = data[:, None]
    if data.ndim != 2 or 0 in data.shape:
        msg = f"`y` must be (T, n) with T, n >= 1, got shape {data.shape}; stack series as columns"
        raise InvalidInputError(msg)
    if np.isinf(data).any():
        row, col = np.argwhere(np.isinf(data))[0]
        msg = f"`y` has inf at row {row}, series {col}; use NaN for a missing value"
        raise InvalidInputError(msg)
    T, n = data.shape
    labels = as_names(names, n)
    p = check_int(lags, "lags", minimum=1, hint="a VAR needs at least one lag")
    H = check_int(horizon, "horizon", minimum=1)
    check_option(trend, "trend", QUANTILE_TRENDS)
    taus = _check_quantiles(quantiles)
    Q = len(taus)
    d = len(TREND_TERMS[trend])
    k = d + n * p
    need = p + k + n
    win = check_int(
        window, "window", minimum=need,
        hint=f"a quantile VAR of {n} series with lags={p} needs p + k + n = {need} rows per window",
    )  # fmt: skip
    stp = check_int(step, "step", minimum=1)
    if ends is None:
        grid = np.arange(win - 1, T, stp)
    else:
        grid = np.asarray(ends, dtype=np.int64).ravel()
        if grid.size and (
            (np.diff(grid) <= 0).any() or grid[0] < win - 1 or grid[-1] >= T
        ):
            msg = (
                f"`ends` must be strictly increasing rows in [{win - 1}, {T - 1}] (a window of "
                f"{win} rows ending at each), got {grid[:5].tolist()}…"
            )
            raise InvalidInputError(msg)
    if after is not None:
        grid = grid[grid > int(after)]
    W = grid.size
    ok_rows = usable_observations(np.isfinite(data).all(axis=1), p)
    filled = np.where(np.isfinite(data), data, 0.0)
    Zg = np.full((T, k), np.nan)
    if T > p:
        Zg[p:] = design_matrix(filled, p, trend)
    tau_vec = np.repeat(np.asarray(taus), n)  # problem q·n + i ↔ (τ_q, equation i)
    coefs = np.full((Q, W, p, n, n), np.nan)
    intercept = np.full((Q, W, n), np.nan) if d else None
    sigma = np.full((Q, W, n, n), np.nan)
    objective = np.full((Q, W, n), np.nan)
    exchanges = np.zeros((Q, W, n), dtype=np.int64)
    nobs = np.zeros(W, dtype=np.int64)
    reason = np.full(W, "", dtype=object)
    fallbacks = 0
    prev_basis: np.ndarray | None = None  # (P, k) global rows
    prev_binv: np.ndarray | None = None
    for w, end in enumerate(grid):
        start = end - win + 1
        obs = np.flatnonzero(ok_rows[start + p : end + 1]) + start + p
        nobs[w] = obs.size
        if obs.size < k + n + 1:
            reason[w] = f"{obs.size} usable observations for {k} coefficients per equation"
            prev_basis = None
            continue
        Xw = Zg[obs]
        Yw = np.tile(filled[obs], Q)  # (m, Q·n)
        start_basis = None
        if warm and prev_basis is not None and prev_binv is not None:
            local = np.searchsorted(obs, prev_basis).clip(max=obs.size - 1)
            valid = obs[local] == prev_basis
            try:
                start_basis = _replace_leavers(Xw, local, valid, prev_binv)
            except (FloatingPointError, ZeroDivisionError):
                start_basis = None
        st = None
        if start_basis is not None:
            try:
                st = simplex(Xw, Yw, tau_vec, start_basis)
            except np.linalg.LinAlgError:
                st = None
        if st is None:
            try:
                st = simplex(Xw, Yw, tau_vec, initial_basis(Xw, Q * n))
            except np.linalg.LinAlgError:
                st = None
        if st is None:
            reason[w] = "collinear regressors in the window"
            prev_basis = None
            continue
        prev_basis = obs[st.basis]
        prev_binv = st.binv
        fallbacks += int(st.fallback.sum())
        B = st.beta.reshape(Q, n, k)  # [q, i, :] = b̂_i(τ_q)
        coefs[:, w] = B[:, :, d:].reshape(Q, n, p, n).transpose(0, 2, 1, 3)
        if intercept is not None:
            intercept[:, w] = B[:, :, 0]
        resid = st.resid.reshape(Q, n, -1).transpose(0, 2, 1)  # (Q, m, n)
        sigma[:, w] = centred_covariance(resid)
        objective[:, w] = check_loss(resid, np.asarray(taus)[:, None, None])
        exchanges[:, w] = st.exchanges.reshape(Q, n)
    ok = reason == ""
    pairwise = np.full((Q, W, n, n), np.nan)
    radius = np.full((Q, W), np.nan)
    if ok.any():
        c, s = coefs[:, ok], sigma[:, ok]
        pairwise[:, ok] = 100.0 * fevd_kernel(c, s, H, "generalized", None)[..., -1, :, :]
        radius[:, ok] = spectral_radius(c)
    g = spillover_measures(pairwise)
    starts = grid - win + 1
    quantile_arr = np.asarray(taus)
    readonly(
        quantile_arr, grid, starts, nobs, coefs, intercept, sigma, objective, exchanges, radius,
        g["total"], g["to_others"], g["from_others"], g["net"], pairwise, reason, ok,
    )  # fmt: skip
    return RollingQuantileVAR(
        quantiles=quantile_arr, ends=grid, starts=starts, nobs=nobs, coefs=coefs,
        intercept=intercept, sigma_u=sigma, objective=objective, exchanges=exchanges,
        fallbacks=fallbacks, spectral_radius=radius, total_connectedness=g["total"],
        to_others=g["to_others"], from_others=g["from_others"], net=g["net"], pairwise=pairwise,
        skip_reason=reason, ok=ok, names=labels, lags=p, horizon=H, window=win, step=stp,
        trend=trend, warm=bool(warm),
    )  # fmt: skip
