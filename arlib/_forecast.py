"""Point forecasts and Gaussian forecast intervals.

    ŷ_{T+h} = c + d·(T + h) + A_1 ŷ_{T+h−1} + ... + A_p ŷ_{T+h−p}      (ŷ_s = y_s for s <= T)
    Σ_y(h)  = Σ_{i=0}^{h−1} Φ_i Σ_u Φ_i'                                 (Lütkepohl 2005, eq. 3.5.8)
    Σ_ŷ(h)  = Σ_y(h) + Ω(h) / T_eff                                       (eq. 3.5.13)
    Ω(h)    = Σ_{i,j=0}^{h−1} tr[(B')^{h−1−i} Γ^{-1} B^{h−1−j} Γ] Φ_i Σ_u Φ_j'    (eq. 3.5.12)

with Γ = Z'Z / T_eff and B the (k, k) transition of the regressor vector z_t
(B = [[1, 0], [c, A_1 .. A_p], [0, I_{n(p−1)}, 0]] with an intercept; the companion matrix without).
Interval: ŷ ± z_{(1+coverage)/2} · sqrt(diag Σ(h)).

References
----------
Lütkepohl, H. (2005). New Introduction to Multiple Time Series Analysis. Springer. Sec. 3.5.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import stats

from ._estimate import TREND_TERMS, VARFit, deterministic_terms
from ._frames import Columns, FrameMixin, last_date, long_columns
from ._labels import is_frame
from ._responses import ma_kernel
from ._validate import (
    InvalidInputError,
    VARLike,
    as_dated_data,
    check_fraction,
    check_int,
    check_model,
    readonly,
)


@dataclass(frozen=True, eq=False, repr=False)
class Forecast(FrameMixin):
    """Forecasts for steps 1..h ahead (arrays read-only).

    Attributes
    ----------
    mean, lower, upper : (steps, n) point forecast and interval bounds, row s−1 is s steps ahead.
    mse : (steps, n, n) forecast-error covariance Σ(s) used for the interval.
    coverage : nominal interval coverage.   estimation_uncertainty : whether Ω(h)/T was added.
    names : series names.
    origin : the date of the last row of history the forecasts start from (datetime64), or
        None without dates. Step s is s rows after it; arlib does not guess calendar dates for
        future rows (business days, holidays and missing months belong to the data's owner).

    ``to_frame()`` / ``to_polars()``: one row per step and series — ``origin`` (when known),
    ``step`` (1..steps), ``series``, ``mean``, ``lower``, ``upper``.
    """

    mean: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    mse: np.ndarray
    coverage: float
    estimation_uncertainty: bool
    names: tuple[str, ...]
    origin: np.datetime64 | None = None

    def _columns(self) -> Columns:
        steps = np.arange(1, self.mean.shape[0] + 1)
        axes = [("step", steps), ("series", np.array(self.names, dtype=object))]
        lead = {} if self.origin is None else {"origin": self.origin}
        out = long_columns(self.mean, axes, value="mean", lead=lead)
        out["lower"] = self.lower.reshape(-1)
        out["upper"] = self.upper.reshape(-1)
        return out

    def __repr__(self) -> str:
        return (
            f"Forecast(steps={self.mean.shape[0]}, coverage={self.coverage}, "
            f"names={list(self.names)!r})"
        )


def forecast(
    fit: VARLike,
    y: Any = None,
    steps: int = 1,
    *,
    coverage: float = 0.95,
    estimation_uncertainty: bool = False,
) -> Forecast:
    """Forecast 1..`steps` ahead from the last p rows of `y`.

    Parameters
    ----------
    fit : `VARFit` or `VARProcess`.
    y : (T, n) history, oldest first; only its last p rows are used. None = the fit's own data.
        A DataFrame is accepted as in `fit_var`: its columns must be the model's series (by
        name, in any order), and its last date becomes the forecast's `origin`.
        With trend "ct" the forecasts continue the fitted sample: step s gets the trend value
        T_fit + s, where T_fit is the number of rows the model was fitted on.
    steps : h >= 1.
    coverage : interval coverage in (0, 1).
    estimation_uncertainty : add Ω(h)/T_eff for estimated parameters (Lütkepohl 2005, eq. 3.5.13);
        needs a `VARFit` with trend "n" or "c".

    Returns
    -------
    Forecast with mean/lower/upper (steps, n) and mse (steps, n, n).
    """
    model = check_model(fit)
    h = check_int(steps, "steps", minimum=1)
    level = check_fraction(coverage, "coverage")
    if y is None:
        if not isinstance(model, VARFit):
            msg = "`y` is required when forecasting a VARProcess; pass at least its last p rows"
            raise InvalidInputError(msg)
        hist = np.asarray(model.y)
        origin = last_date(getattr(model, "dates", None))
    else:
        hist, given, dates = as_dated_data(y)
        hist = _in_model_order(hist, given, model.names, y)
        origin = last_date(dates)
    n, p = model.n, model.lags
    if hist.shape[1] != n or hist.shape[0] < p:
        msg = (
            f"`y` must have at least p={p} rows and n={n} columns to forecast, got shape "
            f"{hist.shape}; pass the most recent rows of the same series"
        )
        raise InvalidInputError(msg)
    coefs = np.asarray(model.coefs)
    sigma = np.asarray(model.sigma_u)
    trend = model.trend if isinstance(model, VARFit) else ("n" if model.intercept is None else "c")
    det_coef = _deterministic_coefficients(model, trend)  # (d, n)
    if isinstance(model, VARFit):
        future_rows = np.arange(model.y.shape[0], model.y.shape[0] + h)
    else:
        future_rows = np.arange(h)
    det = deterministic_terms(future_rows, trend) @ det_coef  # (h, n)
    path = np.vstack([hist[-p:], np.zeros((h, n))])
    for s in range(h):  # ŷ_{T+s+1} = det + Σ_i A_i ŷ_{T+s+1−i}
        path[p + s] = det[s] + sum(coefs[i] @ path[p + s - 1 - i] for i in range(p))
    mean = path[p:]
    phi = ma_kernel(coefs, h - 1)
    mse = np.cumsum(phi @ sigma @ np.swapaxes(phi, -1, -2), axis=0)  # Σ_y(s) = Σ_{i<s} Φ_i Σ Φ_i'
    if estimation_uncertainty:
        mse = mse + _omega(model, phi, trend)
    z = stats.norm.ppf(0.5 + level / 2)
    sd = np.sqrt(np.diagonal(mse, axis1=1, axis2=2))
    lower, upper = mean - z * sd, mean + z * sd
    readonly(mean, lower, upper, mse)
    return Forecast(
        mean=mean, lower=lower, upper=upper, mse=mse, coverage=level,
        estimation_uncertainty=bool(estimation_uncertainty), names=model.names, origin=origin,
    )  # fmt: skip


def _in_model_order(
    hist: np.ndarray, given: tuple[str, ...], names: tuple[str, ...], y: Any
) -> np.ndarray:
    """The columns of a history DataFrame put in the model's series order (arrays pass as
    they are: their columns are taken to be in the model's order)."""
    if not is_frame(y):
        return hist
    missing = [name for name in names if name not in given]
    if missing or len(given) != len(names):
        msg = (
            f"`y` has series {list(given)!r}, but the model was fitted on {list(names)!r}; pass "
            f"the history of the same series (missing: {missing!r})"
        )
        raise InvalidInputError(msg)
    return hist[:, [given.index(name) for name in names]]


def _deterministic_coefficients(model: VARLike, trend: str) -> np.ndarray:
    d = len(TREND_TERMS[trend])
    if isinstance(model, VARFit):
        return np.asarray(model.params[:d])
    return np.zeros((0, model.n)) if model.intercept is None else np.asarray(model.intercept)[None]


def _omega(model: VARLike, phi: np.ndarray, trend: str) -> np.ndarray:
    """Ω(1..h)/T_eff (h, n, n), eq. 3.5.12 (Ω(1) = k Σ_u since tr(Γ^{-1}Γ) = k)."""
    if not isinstance(model, VARFit):
        msg = (
            "`estimation_uncertainty=True` needs an estimated VARFit (it uses Z'Z); a VARProcess "
            "has known parameters — pass estimation_uncertainty=False"
        )
        raise InvalidInputError(msg)
    if trend == "ct":
        msg = (
            "`estimation_uncertainty=True` is available for trend 'n' or 'c' only: with a linear "
            "trend Z'Z/T has no limit and eq. 3.5.12 does not apply; refit with trend='c' or "
            "pass estimation_uncertainty=False"
        )
        raise InvalidInputError(msg)
    n, p, k = model.n, model.lags, model.k_regressors
    d = k - n * p
    B = np.zeros((k, k))
    B[:d, :d] = np.eye(d)
    B[d : d + n] = model.params.T  # row block of y_t: [c, A_1, ..., A_p]
    B[d + n :, d : d + n * (p - 1)] = np.eye(n * (p - 1))
    gamma = np.linalg.inv(model.gram_inv) / model.nobs  # Γ = Z'Z / T_eff
    gamma_inv = model.gram_inv * model.nobs
    h = phi.shape[0]
    powers = [np.eye(k)]
    for _ in range(h):
        powers.append(powers[-1] @ B)
    sigma = model.sigma_u
    out = np.zeros((h, n, n))
    for s in range(1, h + 1):
        for i in range(s):
            left = powers[s - 1 - i].T @ gamma_inv
            for j in range(s):
                weight = np.trace(left @ powers[s - 1 - j] @ gamma)
                out[s - 1] += weight * phi[i] @ sigma @ phi[j].T
    return out / model.nobs
