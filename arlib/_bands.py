"""Confidence bands for impulse responses, variance decompositions and connectedness.

Residual bootstrap (recursive design; Lütkepohl 2005, Appendix D.3; Kilian 1998):

1. centre the residuals, û_t − ū;
2. draw T_eff rows with replacement, rebuild y* recursively from the first p observed rows
   with the estimated coefficients (y*_t = ĉ + d̂·(t+1) + Σ_j Â_j y*_{t−j} + u*_t);
3. refit the VAR (same lags and trend) to y* and recompute the statistic;
4. percentile interval: the (1 − c)/2 and (1 + c)/2 quantiles over the draws (Efron's percentile
   method), with the median of the draws alongside.

Kilian (1998) bias correction ("bootstrap after bootstrap"): a first bootstrap estimates the
bias Ψ = mean(Â*) − Â of the lag coefficients; the data for the second bootstrap are generated
from Ã = Â − Ψ and every second-stage estimate is corrected to Â* − Ψ. Whenever a correction
would make the model unstable, Ψ is shrunk by δ = 1, 0.99, 0.98, ... until the corrected
model is stable (Kilian 1998, Sec. 2, step 1b); an unstable Â is left uncorrected.

Delta method for Cholesky (and unit) responses, Lütkepohl (2005) Prop. 3.6, eqs. 3.7.4–3.7.8:

    Var(vec Θ̂_i) ≈ C_i Σ̂_α C_i' + C̄_i Σ̂_σ C̄_i' / T_eff
    C_i = (P' ⊗ I_n) G_i,   G_i = Σ_{m=0}^{i−1} J (B')^{i−1−m} ⊗ Φ_m,   C̄_i = (I_n ⊗ Φ_i) H
    H = L_n' {L_n [(I_n ⊗ P) K_nn + (P ⊗ I_n)] L_n'}^{-1},   Σ̂_σ = 2 D_n⁺ (Σ̂_u ⊗ Σ̂_u) D_n⁺'
    Σ̂_α = the lag-coefficient block of (Z'Z)^{-1} ⊗ Σ̂_u

(B the companion matrix, J = [I_n 0 … 0]); bands are Θ̂ ± z_{(1+c)/2} · s.e.

References
----------
Kilian, L. (1998). Small-sample confidence intervals for impulse response functions. Review of
    Economics and Statistics 80, 218–230.
Lütkepohl, H. (2005). New Introduction to Multiple Time Series Analysis. Springer. Sec. 3.7,
    Appendix D.3.
Efron, B. and Tibshirani, R. J. (1993). An Introduction to the Bootstrap. Chapman & Hall, Ch. 13.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import stats

from ._decompose import METHODS, fevd_kernel, spillover_measures
from ._estimate import TREND_TERMS, VARFit, companion_matrix, deterministic_terms
from ._frames import Columns, FrameMixin, date_lead, long_columns
from ._responses import SHOCKS, cholesky_impact, ma_kernel, resolve_order, response_kernel
from ._validate import (
    InvalidInputError,
    as_rng,
    check_fraction,
    check_int,
    check_option,
    readonly,
)

#: Band construction per option name.
KINDS = ("bootstrap", "asymptotic")


@dataclass(frozen=True, eq=False, repr=False)
class Bands(FrameMixin):
    """Pointwise confidence bands around an array statistic (arrays read-only).

    Attributes
    ----------
    point : the statistic at the estimates (same shape as the statistic, e.g. (H+1, n, n)).
    lower, upper : pointwise band limits.
    median : median of the bootstrap draws (the point estimate for asymptotic bands).
    std : bootstrap standard deviation or asymptotic standard error.
    coverage : nominal pointwise coverage.   kind : "bootstrap", "asymptotic" or "posterior"
        (`shrinkage_bands`: quantiles of exact posterior draws).
    draws : bootstrap replications used (0 for asymptotic bands).
    bias_corrected : whether Kilian's (1998) correction was applied.
    names : series names.   date : the fit's last date (datetime64) or None without dates.
    axes : the statistic's axis names, e.g. ("horizon", "response", "shock").

    ``to_frame()`` / ``to_polars()``: one row per entry of the statistic — ``date`` (when
    known), one column per axis (responses: ``horizon``, ``response``, ``shock``;
    decompositions: ``step``, ``variable``, ``shock``; connectedness tables: ``variable``,
    ``shock``; directional measures: ``series``; the total: none), then ``point``, ``lower``,
    ``upper``, ``median``, ``std``.
    """

    point: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    median: np.ndarray
    std: np.ndarray
    coverage: float
    kind: str
    draws: int
    bias_corrected: bool
    names: tuple[str, ...] = ()
    date: np.datetime64 | None = None
    labels: tuple[tuple[str, tuple[Any, ...]], ...] = ()

    @property
    def axes(self) -> tuple[str, ...]:
        """Axis names of the statistic, e.g. ("horizon", "response", "shock")."""
        return tuple(a for a, _ in self.labels)

    def _columns(self) -> Columns:
        axes = [(a, np.asarray(lab, dtype=object)) for a, lab in self.labels]
        out = long_columns(self.point, axes, value="point", lead=date_lead(self.date))
        for name in ("lower", "upper", "median", "std"):
            out[name] = np.asarray(getattr(self, name)).reshape(-1)
        return out

    def __repr__(self) -> str:
        return (
            f"Bands(shape={self.point.shape}, coverage={self.coverage}, kind={self.kind!r}, "
            f"draws={self.draws}, bias_corrected={self.bias_corrected})"
        )


@dataclass(frozen=True, eq=False, repr=False)
class ConnectednessBands:
    """Bands for every connectedness measure (each a `Bands`; `total` has shape ())."""

    table: Bands
    total: Bands
    to_others: Bands
    from_others: Bands
    net: Bands
    horizon: int
    names: tuple[str, ...]
    date: np.datetime64 | None = None

    def __repr__(self) -> str:
        return (
            f"ConnectednessBands(total={float(self.total.point):.2f}% "
            f"[{float(self.total.lower):.2f}, {float(self.total.upper):.2f}], "
            f"horizon={self.horizon}, draws={self.total.draws})"
        )


# ---------------------------------------------------------------------------------------------
# bootstrap engine
# ---------------------------------------------------------------------------------------------


def _stabilise(coefs: np.ndarray, bias: np.ndarray) -> np.ndarray:
    """Â − δΨ with δ = 1, 0.99, ... until stable (Kilian 1998); Â unchanged if Â is unstable.

    coefs (..., p, n, n) batched, bias (p, n, n).
    """
    out = np.array(coefs, copy=True)
    batch = out.reshape(-1, *out.shape[-3:])
    for b in range(batch.shape[0]):
        if _radius(batch[b]) >= 1.0:
            continue
        for delta in np.arange(100, -1, -1) / 100:
            trial = batch[b] - delta * bias
            if _radius(trial) < 1.0:
                batch[b] = trial
                break
    return batch.reshape(out.shape)


def _radius(coefs: np.ndarray) -> float:
    return float(np.abs(np.linalg.eigvals(companion_matrix(coefs))).max())


def _generate(
    fit: VARFit, coefs: np.ndarray, det_coef: np.ndarray, draws: int, rng: np.random.Generator
) -> np.ndarray:
    """(draws, T, n) bootstrap samples from `coefs` with resampled centred residuals."""
    y = np.asarray(fit.y)
    T, n = y.shape
    p = fit.lags
    resid = np.asarray(fit.resid)
    centred = resid - resid.mean(axis=0)
    picks = rng.integers(0, centred.shape[0], size=(draws, T - p))
    shocks = centred[picks]  # (draws, T − p, n)
    det = deterministic_terms(np.arange(T), fit.trend) @ det_coef  # (T, n)
    out = np.empty((draws, T, n))
    out[:, :p] = y[:p]
    for t in range(p, T):  # y*_t = det_t + Σ_j A_j y*_{t−j} + u*_t
        row = det[t] + shocks[:, t - p]
        for j in range(p):
            row = row + out[:, t - 1 - j] @ coefs[j].T
        out[:, t] = row
    return out


def _refit(samples: np.ndarray, p: int, trend: str) -> tuple[np.ndarray, np.ndarray]:
    """Batched least squares on (draws, T, n) samples → coefs (draws, p, n, n), Σ̂_u (draws, n, n)."""
    draws, T, n = samples.shape
    det = deterministic_terms(np.arange(p, T), trend)
    Z = np.concatenate(
        [np.broadcast_to(det, (draws, *det.shape))]
        + [samples[:, p - i : T - i] for i in range(1, p + 1)],
        axis=2,
    )
    Y = samples[:, p:]
    Q, R = np.linalg.qr(Z)
    B = np.linalg.solve(R, np.swapaxes(Q, 1, 2) @ Y)  # R B = Q'Y
    U = Y - Z @ B
    k = Z.shape[2]
    sigma = np.swapaxes(U, 1, 2) @ U / (T - p - k)
    d = len(TREND_TERMS[trend])
    coefs = B[:, d:].reshape(draws, p, n, n).transpose(0, 1, 3, 2)
    return coefs, sigma


def bootstrap_models(
    fit: VARFit, draws: int, rng: np.random.Generator, *, bias_correction: bool = False
) -> tuple[np.ndarray, np.ndarray]:
    """Bootstrap coefficient and covariance draws, (draws, p, n, n) and (draws, n, n).

    With `bias_correction`, Kilian's (1998) two-stage correction (module docstring).
    """
    A = np.asarray(fit.coefs)
    d = len(TREND_TERMS[fit.trend])
    det_coef = np.asarray(fit.params[:d])
    if not bias_correction:
        return _refit(_generate(fit, A, det_coef, draws, rng), fit.lags, fit.trend)
    first, _ = _refit(_generate(fit, A, det_coef, draws, rng), fit.lags, fit.trend)
    bias = first.mean(axis=0) - A  # Ψ = E*(Â*) − Â
    A_tilde = _stabilise(A, bias)
    coefs, sigma = _refit(_generate(fit, A_tilde, det_coef, draws, rng), fit.lags, fit.trend)
    return _stabilise(coefs, bias), sigma


def _percentile_bands(
    point: np.ndarray, samples: np.ndarray, coverage: float, bias_corrected: bool
) -> Bands:
    if not np.isfinite(samples).all():
        msg = (
            "bootstrap draws produced non-finite statistics (a replicate was singular or "
            "explosive); use more data, fewer lags or bias_correction=True"
        )
        raise InvalidInputError(msg)
    qs = np.quantile(samples, [(1 - coverage) / 2, 0.5, (1 + coverage) / 2], axis=0)
    lo, med, hi = (np.array(q) for q in qs)
    std = np.array(samples.std(axis=0, ddof=1))
    point = np.array(point, dtype=np.float64)
    readonly(point, lo, med, hi, std)
    return Bands(
        point=point, lower=lo, upper=hi, median=med, std=std, coverage=coverage,
        kind="bootstrap", draws=int(samples.shape[0]), bias_corrected=bias_corrected,
    )  # fmt: skip


def _check_fit(fit: Any) -> VARFit:
    if not isinstance(fit, VARFit):
        msg = (
            f"`fit` must be an estimated VARFit (bands describe estimation uncertainty), got "
            f"{type(fit).__name__}"
        )
        raise InvalidInputError(msg)
    return fit


def _common(fit: Any, horizon: int, coverage: float, draws: int) -> tuple[VARFit, int, float, int]:
    model = _check_fit(fit)
    H = check_int(horizon, "horizon", minimum=1)
    level = check_fraction(coverage, "coverage")
    B = check_int(draws, "draws", minimum=20, hint="percentile bands need at least 20 draws; "
                  "use 500 or more for 90% bands")  # fmt: skip
    return model, H, level, B


# ---------------------------------------------------------------------------------------------
# public
# ---------------------------------------------------------------------------------------------


def irf_bands(
    fit: VARFit,
    horizon: int,
    *,
    shocks: str = "cholesky",
    cumulative: bool = False,
    order: Sequence[int | str] | None = None,
    coverage: float = 0.9,
    kind: str = "bootstrap",
    draws: int = 500,
    rng: np.random.Generator | int | None = None,
    bias_correction: bool = False,
) -> Bands:
    """Pointwise bands for `impulse_responses(fit, horizon, ...)`, arrays (H+1, n, n).

    Parameters
    ----------
    fit : `VARFit`.   horizon : H >= 1.   shocks, cumulative, order : as `impulse_responses`.
    coverage : pointwise coverage in (0, 1), default 0.9.
    kind : "bootstrap" (residual bootstrap, percentile intervals) or "asymptotic" (delta method,
        Lütkepohl 2005 Sec. 3.7; shocks "cholesky" or "unit" only).
    draws : bootstrap replications (>= 20).   rng : Generator or integer seed (reproducible).
    bias_correction : Kilian (1998) bootstrap-after-bootstrap (bootstrap only).
    """
    model, H, level, B = _common(fit, horizon, coverage, draws)
    check_option(shocks, "shocks", SHOCKS)
    check_option(kind, "kind", KINDS)
    perm = resolve_order(order, model.names)
    if perm is not None and shocks != "cholesky":
        msg = f"`order` only applies to shocks='cholesky', not shocks={shocks!r}; drop `order`"
        raise InvalidInputError(msg)
    point = response_kernel(np.asarray(model.coefs), np.asarray(model.sigma_u), H, shocks, perm)
    if cumulative:
        point = np.cumsum(point, axis=0)
    axes = [("horizon", range(H + 1)), ("response", model.names), ("shock", model.names)]
    if kind == "asymptotic":
        if bias_correction:
            msg = "`bias_correction` applies to kind='bootstrap' only; drop it for asymptotic bands"
            raise InvalidInputError(msg)
        return _labelled(
            _asymptotic_irf_bands(model, point, H, shocks, perm, cumulative, level), axes, model
        )
    gen = as_rng(rng)
    coefs, sigma = bootstrap_models(model, B, gen, bias_correction=bias_correction)
    samples = response_kernel(coefs, sigma, H, shocks, perm)
    if cumulative:
        samples = np.cumsum(samples, axis=1)
    return _labelled(_percentile_bands(point, samples, level, bias_correction), axes, model)


def fevd_bands(
    fit: VARFit,
    horizon: int,
    *,
    method: str = "cholesky",
    order: Sequence[int | str] | None = None,
    coverage: float = 0.9,
    draws: int = 500,
    rng: np.random.Generator | int | None = None,
    bias_correction: bool = False,
) -> Bands:
    """Bootstrap bands for `variance_decomposition(fit, horizon, method=...)`, arrays (H, n, n).

    Shares live in [0, 1], so percentile intervals (not ± s.e.) keep the bands inside it.
    Parameters as in `irf_bands`.
    """
    model, H, level, B = _common(fit, horizon, coverage, draws)
    check_option(method, "method", METHODS)
    perm = resolve_order(order, model.names)
    if perm is not None and method != "cholesky":
        msg = f"`order` only applies to method='cholesky', not method={method!r}; drop `order`"
        raise InvalidInputError(msg)
    point = fevd_kernel(np.asarray(model.coefs), np.asarray(model.sigma_u), H, method, perm)
    coefs, sigma = bootstrap_models(model, B, as_rng(rng), bias_correction=bias_correction)
    samples = fevd_kernel(coefs, sigma, H, method, perm)
    names = model.names
    return _labelled(
        _percentile_bands(point, samples, level, bias_correction),
        [("step", range(1, H + 1)), ("variable", names), ("shock", names)], model,
    )  # fmt: skip


def connectedness_bands(
    fit: VARFit,
    horizon: int,
    *,
    method: str = "generalized",
    coverage: float = 0.9,
    draws: int = 500,
    rng: np.random.Generator | int | None = None,
    bias_correction: bool = False,
) -> ConnectednessBands:
    """Bootstrap bands for every measure of `connectedness(fit, horizon, method=...)` (percent).

    The same draws feed the table, total, directional and net measures, so they are mutually
    consistent. Parameters as in `irf_bands`.
    """
    model, H, level, B = _common(fit, horizon, coverage, draws)
    check_option(method, "method", METHODS)
    table = (
        100 * fevd_kernel(np.asarray(model.coefs), np.asarray(model.sigma_u), H, method, None)[-1]
    )
    point = {"table": table, **spillover_measures(table)}
    coefs, sigma = bootstrap_models(model, B, as_rng(rng), bias_correction=bias_correction)
    tables = 100 * fevd_kernel(coefs, sigma, H, method, None)[:, -1]
    drawn = {"table": tables, **spillover_measures(tables)}
    parts = {
        name: _percentile_bands(point[name], drawn[name], level, bias_correction)
        for name in ("table", "total", "to_others", "from_others", "net")
    }
    names = model.names
    axes: dict[str, list[tuple[str, Sequence[Any]]]] = {
        "table": [("variable", names), ("shock", names)], "total": [],
        "to_others": [("series", names)], "from_others": [("series", names)],
        "net": [("series", names)],
    }  # fmt: skip
    labelled = {name: _labelled(part, axes[name], model) for name, part in parts.items()}
    return ConnectednessBands(horizon=H, names=names, date=model.date, **labelled)


def _labelled(bands: Bands, axes: Sequence[tuple[str, Sequence[Any]]], model: VARFit) -> Bands:
    """`bands` with the statistic's axis labels, the series names and the fit's last date."""
    return dataclasses.replace(
        bands, names=model.names, date=model.date,
        labels=tuple((a, tuple(lab)) for a, lab in axes),
    )  # fmt: skip


# ---------------------------------------------------------------------------------------------
# delta method (Lütkepohl 2005, Sec. 3.7)
# ---------------------------------------------------------------------------------------------


def _elimination(n: int) -> np.ndarray:
    """L_n: vech(X) = L_n vec(X) (column-major vec; lower triangle by columns)."""
    rows = [(j * n + i) for j in range(n) for i in range(j, n)]
    out = np.zeros((len(rows), n * n))
    out[np.arange(len(rows)), rows] = 1.0
    return out


def _duplication(n: int) -> np.ndarray:
    """D_n: vec(X) = D_n vech(X) for symmetric X."""
    out = np.zeros((n * n, n * (n + 1) // 2))
    col = 0
    for j in range(n):
        for i in range(j, n):
            out[j * n + i, col] = 1.0
            out[i * n + j, col] = 1.0
            col += 1
    return out


def _commutation(n: int) -> np.ndarray:
    """K_nn: vec(X') = K_nn vec(X)."""
    out = np.zeros((n * n, n * n))
    for i in range(n):
        for j in range(n):
            out[i * n + j, j * n + i] = 1.0
    return out


def response_covariances(
    fit: VARFit, horizon: int, *, shocks: str = "cholesky", order: Sequence[int] | None = None,
    cumulative: bool = False,
) -> np.ndarray:  # fmt: skip
    """(H+1, n², n²) asymptotic covariances of vec Θ̂_i (column-major vec; eqs. 3.7.5 and 3.7.8).

    Divided by nothing further: these are the finite-sample approximations
    C_i Σ̂_α C_i' + C̄_i Σ̂_σ C̄_i' / T_eff with Σ̂_α taken from (Z'Z)^{-1} ⊗ Σ̂_u.
    """
    n, p = fit.n, fit.lags
    d = len(TREND_TERMS[fit.trend])
    sigma = np.asarray(fit.sigma_u)
    lag_block = np.asarray(fit.gram_inv)[d:, d:]
    cov_alpha = np.kron(lag_block, sigma)  # Var(vec[A_1..A_p])
    phi = ma_kernel(np.asarray(fit.coefs), horizon)
    comp = np.asarray(fit.companion)
    # J (B')^m for m = 0..H−1: first n rows of (B')^m
    powers = [np.eye(n * p)]
    for _ in range(horizon):
        powers.append(powers[-1] @ comp.T)
    G = [np.zeros((n * n, n * n * p))]
    for i in range(1, horizon + 1):
        G.append(np.sum([np.kron(powers[i - 1 - m][:n], phi[m]) for m in range(i)], axis=0))
    if shocks == "unit":
        C = G
        Cbar = None
    else:
        In = np.eye(n)
        P = cholesky_impact(sigma, order)
        H = _cholesky_derivative(sigma, order)
        Dplus = np.linalg.pinv(_duplication(n))
        cov_sigma = 2 * Dplus @ np.kron(sigma, sigma) @ Dplus.T
        C = [np.kron(P.T, In) @ g for g in G]
        Cbar = [np.kron(In, phi[i]) @ H for i in range(horizon + 1)]
    if cumulative:
        C = list(np.cumsum(np.stack(C), axis=0))
        Cbar = None if Cbar is None else list(np.cumsum(np.stack(Cbar), axis=0))
    out = np.empty((horizon + 1, n * n, n * n))
    for i in range(horizon + 1):
        out[i] = C[i] @ cov_alpha @ C[i].T
        if Cbar is not None:
            out[i] += Cbar[i] @ cov_sigma @ Cbar[i].T / fit.nobs
    return out


def _cholesky_derivative(sigma: np.ndarray, order: Sequence[int] | None) -> np.ndarray:
    """H = ∂vec(P)/∂vech(Σ)' (n², n(n+1)/2), P the Cholesky impact matrix (eq. 3.7.8's H).

    Without `order`: H = L_n' {L_n [(I_n ⊗ P) K_nn + (P ⊗ I_n)] L_n'}^{-1}. With an order π,
    P = Π' P_π Π where P_π = chol(Π Σ Π') and Π x = x[π], so by the chain rule
    H = (Π' ⊗ Π') H_π L_n (Π ⊗ Π) D_n.
    """
    n = sigma.shape[0]
    Ln, Knn, In = _elimination(n), _commutation(n), np.eye(n)
    perm = np.arange(n) if order is None else np.asarray(order)
    Pi = In[perm]
    P_pi = np.linalg.cholesky(sigma[np.ix_(perm, perm)])
    H_pi = Ln.T @ np.linalg.inv(Ln @ (np.kron(In, P_pi) @ Knn + np.kron(P_pi, In)) @ Ln.T)
    if order is None:
        return H_pi
    return np.kron(Pi.T, Pi.T) @ H_pi @ Ln @ np.kron(Pi, Pi) @ _duplication(n)


def _asymptotic_irf_bands(
    fit: VARFit,
    point: np.ndarray,
    horizon: int,
    shocks: str,
    order: Sequence[int] | None,
    cumulative: bool,
    coverage: float,
) -> Bands:
    if shocks not in ("cholesky", "unit"):
        msg = (
            f"asymptotic bands cover shocks 'cholesky' and 'unit' (Lütkepohl 2005, Sec. 3.7), "
            f"not {shocks!r}; use kind='bootstrap'"
        )
        raise InvalidInputError(msg)
    covs = response_covariances(fit, horizon, shocks=shocks, order=order, cumulative=cumulative)
    n = fit.n
    var = np.clip(np.diagonal(covs, axis1=1, axis2=2), 0.0, None)
    se = np.sqrt(var).reshape(horizon + 1, n, n).transpose(0, 2, 1)  # un-vec (column-major)
    z = stats.norm.ppf(0.5 + coverage / 2)
    point = np.array(point)
    lower, upper, median = point - z * se, point + z * se, point.copy()
    readonly(point, lower, upper, median, se)
    return Bands(
        point=point, lower=lower, upper=upper, median=median, std=se, coverage=coverage,
        kind="asymptotic", draws=0, bias_corrected=False,
    )  # fmt: skip
