"""Least-squares VAR estimation, processes given by their parameters, lag-order selection.

Model (T observations, n series, p lags, rows oldest first)::

    y_t = c + d·t + A_1 y_{t-1} + ... + A_p y_{t-p} + u_t,   u_t ~ N(0, Σ_u)

estimated equation by equation by least squares on the T_eff = T − p usable rows. The regressor
vector of row t is z_t = [deterministic terms, y_{t-1}', ..., y_{t-p}'] (k = d + n·p entries), so
the stacked system is Y = Z B + U with Y (T_eff, n), Z (T_eff, k) and B (k, n).

The linear trend takes the value t + 1 at row t (0-based) of `y`, i.e. it counts rows from 1 at
the first row of the data (the first usable row has trend p + 1).

References
----------
Lütkepohl, H. (2005). New Introduction to Multiple Time Series Analysis. Springer.
    Sec. 3.2 (multivariate LS, eq. 3.2.10), Sec. 3.3 (Σ_u estimators), Sec. 4.3 (FPE, AIC, HQ, SC).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import linalg

from ._frames import Columns, FrameMixin, coded, date_lead, last_date
from ._validate import (
    InvalidInputError,
    as_data,
    as_dated_data,
    as_names,
    as_real_array,
    check_int,
    check_option,
    readonly,
    warn_unstable,
)

#: Deterministic terms per option: the one place to add a trend kind.
TREND_TERMS: dict[str, tuple[str, ...]] = {"n": (), "c": ("const",), "ct": ("const", "trend")}

#: Smallest reciprocal condition number of the column-scaled design accepted as full rank.
RCOND_LIMIT = 1e-10

#: Residual singularity threshold of `_check_sigma` (scale-free: R² and residual correlations).
SINGULAR_LIMIT = 1e-12


# ---------------------------------------------------------------------------------------------
# kernels (trust their inputs; several accept leading batch axes)
# ---------------------------------------------------------------------------------------------


def deterministic_terms(rows: np.ndarray, trend: str) -> np.ndarray:
    """(len(rows), d) deterministic regressors for 0-based row positions `rows`.

    const = 1, trend = row + 1 (see module docstring).
    """
    cols = []
    for term in TREND_TERMS[trend]:
        cols.append(np.ones(len(rows)) if term == "const" else rows.astype(np.float64) + 1.0)
    if not cols:
        return np.empty((len(rows), 0))
    return np.column_stack(cols)


def design_matrix(y: np.ndarray, lags: int, trend: str, *, start: int | None = None) -> np.ndarray:
    """Regressor matrix Z (T − start, k) for rows start..T−1 (default start = lags).

    Row t is [deterministic(t), y_{t-1}', ..., y_{t-p}'] (Lütkepohl 2005, eq. 3.2.1 layout).
    """
    T = y.shape[0]
    start = lags if start is None else start
    rows = np.arange(start, T)
    blocks = [deterministic_terms(rows, trend)]
    blocks += [y[start - i : T - i] for i in range(1, lags + 1)]  # y_{t-i} for t = start..T-1
    return np.concatenate(blocks, axis=1) if blocks else np.empty((T - start, 0))


def companion_matrix(coefs: np.ndarray) -> np.ndarray:
    """Companion matrix (..., n·p, n·p) of coefficients (..., p, n, n).

    Block form (Lütkepohl 2005, eq. 2.1.8)::

        [[A_1, A_2, ..., A_p],
         [I_n, 0,   ..., 0  ],
         ...
         [0,   ..., I_n, 0  ]]

    Accepts leading batch axes, e.g. one set of coefficients per rolling window.

    Raises
    ------
    InvalidInputError : `coefs` is not a finite real array of shape (..., p, n, n), p, n >= 1.
    """
    coefs = _as_array(coefs, "coefs")
    if coefs.ndim < 3 or coefs.shape[-1] != coefs.shape[-2] or 0 in coefs.shape[-3:]:
        msg = (
            f"`coefs` must have shape (..., p, n, n) with p, n >= 1 (coefs[..., i, :, :] = "
            f"A_(i+1)), got shape {coefs.shape}; for one lag pass coefs[None]"
        )
        raise InvalidInputError(msg)
    *batch, p, n, _ = coefs.shape
    out = np.zeros((*batch, n * p, n * p))
    out[..., :n, :] = np.concatenate(list(np.moveaxis(coefs, -3, 0)), axis=-1)
    if p > 1:
        out[..., n:, : n * (p - 1)] = np.eye(n * (p - 1))
    return out


def spectral_radius(coefs: np.ndarray) -> np.ndarray | float:
    """Largest eigenvalue modulus of the companion matrix; < 1 means stable (eq. 2.1.9)."""
    eig = np.linalg.eigvals(companion_matrix(coefs))
    out = np.abs(eig).max(axis=-1)
    return float(out) if np.ndim(out) == 0 else out


def information_criteria(
    logdet_ml: float, nobs: int, n: int, k: int, lags: int
) -> dict[str, float]:
    """AIC, BIC (Schwarz), HQ and FPE from log det Σ̃_u (ML) and the counts.

    Penalty convention: every estimated mean-equation coefficient counts, n·k = p·n² + n·d
    (the intercepts and trend slopes too). Lütkepohl (2005, eqs. 4.3.2, 4.3.8, 4.3.9) counts only
    the p·n² lag coefficients; the two differ by the constant 2·n·d/T (AIC), which does not change
    any lag choice. FPE = ((T + k)/(T − k))^n det Σ̃_u (eq. 4.3.1, k = n·p + d regressors).
    """
    m = n * k  # free coefficients
    aic = logdet_ml + 2.0 * m / nobs
    bic = logdet_ml + np.log(nobs) * m / nobs
    hq = logdet_ml + 2.0 * np.log(np.log(nobs)) * m / nobs
    fpe = ((nobs + k) / (nobs - k)) ** n * np.exp(logdet_ml)
    return {"aic": float(aic), "bic": float(bic), "hq": float(hq), "fpe": float(fpe)}


# ---------------------------------------------------------------------------------------------
# least squares with rank and conditioning checks
# ---------------------------------------------------------------------------------------------


def _regressor_names(names: Sequence[str], lags: int, trend: str) -> tuple[str, ...]:
    return tuple(TREND_TERMS[trend]) + tuple(
        f"{name}.L{i}" for i in range(1, lags + 1) for name in names
    )


def _least_squares(
    Z: np.ndarray, Y: np.ndarray, regressors: Sequence[str], arg: str
) -> tuple[np.ndarray, np.ndarray]:
    """B (k, n) = argmin ||Y − Z B|| and (Z'Z)^{-1} (k, k), via QR of the column-scaled Z.

    Raises InvalidInputError naming the collinear regressors when the scaled design's
    reciprocal condition number is below RCOND_LIMIT.
    """
    k = Z.shape[1]
    if k == 0:
        return np.empty((0, Y.shape[1])), np.empty((0, 0))
    scale = np.sqrt((Z * Z).sum(axis=0))
    scale[scale == 0.0] = 1.0
    Q, R = np.linalg.qr(Z / scale)
    _, s, vt = np.linalg.svd(R)
    rcond = s[-1] / s[0] if s[0] > 0 else 0.0
    if rcond < RCOND_LIMIT:
        loading = np.abs(vt[-1])
        involved = [regressors[int(i)] for i in np.flatnonzero(loading > 0.05 * loading.max())]
        msg = (
            f"`{arg}` gives (nearly) perfectly collinear regressors {involved!r} "
            f"(reciprocal condition number {rcond:.2e} < {RCOND_LIMIT:.0e} after scaling columns); "
            "a series is a linear combination of others, or of the constant/trend — drop one of "
            "the series involved or use fewer lags"
        )
        raise InvalidInputError(msg)
    B_scaled = linalg.solve_triangular(R, Q.T @ Y)  # R B = Q'Y   (Z = Q R)
    R_inv = linalg.solve_triangular(R, np.eye(k))
    W = R_inv / scale[:, None]
    return B_scaled / scale[:, None], W @ W.T  # (Z'Z)^{-1} = D^{-1} R^{-1} R^{-T} D^{-1}


def _fit_least_squares(
    Z: np.ndarray, Y: np.ndarray, regressors: Sequence[str], arg: str, *, const: bool
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """B (k, n), (Z'Z)^{-1} (k, k) and residuals Û (rows, n) of Y on Z, column 0 of Z being the
    constant when `const`.

    With a constant the regression is solved in centred coordinates: every other column and Y
    less its (rounded) mean z̄, ȳ, the constant kept, so Z = Z̃ M with Z̃ = [1, Z_r − 1z̄'] and
    M = [[1, z̄'], [0, I]]. In exact arithmetic this is the same fit (B = M^{-1} B̃ with the
    intercept of Y − 1ȳ' shifted back by ȳ, (Z'Z)^{-1} = M^{-1} (Z̃'Z̃)^{-1} M^{-T}); in floating
    point it keeps the digits of series far from zero, which would otherwise be nearly collinear
    with the constant column (a series at 1e6 moving by 1 would lose about six digits in its
    coefficients and residuals). The collinearity check then applies to Z̃, column-scaled.
    """
    if not const:
        B, gram_inv = _least_squares(Z, Y, regressors, arg)
        return B, gram_inv, Y - Z @ B
    zbar = Z[:, 1:].mean(axis=0)
    ybar = Y.mean(axis=0)
    Zc = Z.copy()
    Zc[:, 1:] -= zbar
    Yc = Y - ybar
    Bc, gram_c = _least_squares(Zc, Yc, regressors, arg)
    resid = Yc - Zc @ Bc
    m_inv = np.eye(Z.shape[1])
    m_inv[0, 1:] = -zbar  # M^{-1} = [[1, −z̄'], [0, I]]
    B = m_inv @ Bc
    B[0] += ybar
    return B, m_inv @ gram_c @ m_inv.T, resid


def _check_constant(y: np.ndarray, names: Sequence[str], arg: str) -> None:
    span = np.ptp(y, axis=0)
    size = np.abs(y).max(axis=0)
    flat = np.flatnonzero(span <= 1e-12 * size)
    if flat.size:
        j = int(flat[0])
        msg = (
            f"`{arg}` series {names[j]!r} is constant (every row equals {float(y[0, j])!r}); a VAR needs "
            "series that vary — drop it (or model it as a deterministic term)"
        )
        raise InvalidInputError(msg)


def _check_rows(T: int, n: int, lags: int, d: int, arg: str, what: str = "lags") -> None:
    """Need T_eff − k >= n: the residual matrix has rank <= T_eff − k, and Σ̂_u (n, n) must be
    nonsingular for responses, decompositions and tests."""
    k = d + n * lags
    if T - lags - k < n:
        msg = (
            f"`{arg}` has {T} rows; with {what}={lags} that leaves {T - lags} observations for "
            f"{k} coefficients per equation ({n} series × {lags} lags + {d} deterministic), "
            f"fewer than the {k + n} needed for a nonsingular {n}×{n} residual covariance; "
            f"use at least {lags + k + n} rows or fewer lags/series"
        )
        raise InvalidInputError(msg)


def _check_sigma(sse: np.ndarray, y: np.ndarray, names: Sequence[str], arg: str) -> None:
    """Refuse a singular residual covariance, judged without regard to units.

    `sse` (n, n) is Û'Û, `y` (T_eff, n) the rows fitted. Both tests are scale-free (unchanged
    when a series is multiplied by any factor, so units never decide):

    1. a series fitted exactly: Û'Û_ii <= `SINGULAR_LIMIT` (1e-12) times its own centred sum of
       squares Σ_t (y_ti − ȳ_i)² (R² = 1 to twelve digits): it is an exact function of the
       regressors (its own and the other series' lags, the constant, the trend);
    2. residuals exactly linearly dependent: the residual correlation matrix
       R = D^{-1/2} Û'Û D^{-1/2} (D = diag Û'Û) has smallest/largest eigenvalue
       <= `SINGULAR_LIMIT`: a series is an exact linear combination of the others' current
       values (and lags).
    """
    resid_ss = np.diag(sse).copy()
    own = ((y - y.mean(axis=0)) ** 2).sum(axis=0)
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.where(own > 0, resid_ss / np.where(own > 0, own, 1.0), 0.0)
    exact = np.flatnonzero((ratio <= SINGULAR_LIMIT) | (resid_ss <= 0))
    if exact.size:
        j = int(exact[np.argmin(ratio[exact])])
        msg = (
            f"`{arg}` has series {names[j]!r} fitted exactly (residual variance {ratio[j]:.3g} "
            "times its own variance), so the residual covariance is singular: it is an exact "
            "function of the lagged series (and constant/trend) — drop it or use fewer lags"
        )
        raise InvalidInputError(msg)
    sd = np.sqrt(resid_ss)
    corr = sse / np.outer(sd, sd)
    eig, vec = np.linalg.eigh(0.5 * (corr + corr.T))
    if eig[0] <= SINGULAR_LIMIT * eig[-1]:
        loading = np.abs(vec[:, 0])
        involved = [names[int(i)] for i in np.flatnonzero(loading > 0.05 * loading.max())]
        msg = (
            f"`{arg}` gives residuals of {involved!r} that are exactly linearly dependent "
            f"(residual correlation matrix eigenvalues {eig[0]:.3g}..{eig[-1]:.3g}), so the "
            "residual covariance is singular: one of these series is an exact linear "
            "combination of the others' current values (and lags) — drop one of them"
        )
        raise InvalidInputError(msg)


# ---------------------------------------------------------------------------------------------
# results
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False, repr=False)
class VARProcess:
    """A VAR given by its parameters; accepted everywhere a `VARFit` is.

    Attributes
    ----------
    coefs : (p, n, n) float array, ``coefs[i]`` is A_{i+1}.
    sigma_u : (n, n) innovation covariance Σ_u (symmetric positive definite).
    intercept : (n,) array or None (zero).
    names : n series names.
    companion : (n·p, n·p) companion matrix.
    spectral_radius : largest companion eigenvalue modulus; `is_stable` means < 1.
    """

    coefs: np.ndarray
    sigma_u: np.ndarray
    intercept: np.ndarray | None
    names: tuple[str, ...]
    companion: np.ndarray
    spectral_radius: float
    is_stable: bool

    @property
    def n(self) -> int:
        """Number of series."""
        return int(self.coefs.shape[1])

    @property
    def lags(self) -> int:
        """Lag order p."""
        return int(self.coefs.shape[0])

    @property
    def mean(self) -> np.ndarray:
        """(n,) stationary mean μ = (I − A_1 − ... − A_p)^{-1} c (Lütkepohl 2005, eq. 2.1.10).

        Raises InvalidInputError when I − A_1 − ... − A_p is singular (a unit root: no mean).
        """
        c = np.zeros(self.n) if self.intercept is None else self.intercept
        try:
            return np.linalg.solve(np.eye(self.n) - self.coefs.sum(axis=0), c)
        except np.linalg.LinAlgError:
            msg = (
                "`coefs` describe a process with no stationary mean: I − A_1 − ... − A_p is "
                f"singular (a unit root; companion spectral radius {self.spectral_radius:.6g}); "
                "use stable coefficients, or difference the series they describe"
            )
            raise InvalidInputError(msg) from None

    def __repr__(self) -> str:
        return (
            f"VARProcess(n={self.n}, lags={self.lags}, names={list(self.names)!r}, "
            f"spectral_radius={self.spectral_radius:.4f})"
        )


@dataclass(frozen=True, eq=False, repr=False)
class VARFit(FrameMixin):
    """A least-squares VAR fit. All arrays are read-only.

    Attributes
    ----------
    y : (T, n) the data fitted (rows oldest first), kept for forecasts and the bootstrap.
    names : n series names.   trend : "n" | "c" | "ct".   lags : p.
    nobs : T_eff = T − p usable rows.   k_regressors : k = d + n·p regressors per equation.
    params : (k, n) B; column i holds equation i's coefficients in `regressor_names` order.
    stderr : (k, n) standard errors of `params`, sqrt of diag((Z'Z)^{-1}) σ_ii.
    coefs : (p, n, n), ``coefs[i][r, c]`` = effect of series c at lag i+1 on series r.
    intercept : (n,) or None.   trend_coef : (n,) slope on the trend for "ct", else None.
    sigma_u : (n, n) Û'Û / (T_eff − k).   sigma_u_ml : (n, n) Û'Û / T_eff.
    resid : (T_eff, n) residuals, row j belongs to row p + j of `y`.
    gram_inv : (k, k) (Z'Z)^{-1}.
    llf : Gaussian log-likelihood at Σ̃_u (ML).   aic, bic, hq, fpe : see `information_criteria`.
    companion, spectral_radius, is_stable : as in `VARProcess`.
    dates : (T,) datetime64 dates of the rows of `y`, or None (data without dates).

    ``to_frame()`` / ``to_polars()``: the coefficient table in long form, one row per
    coefficient — ``date`` (the last date fitted, when known), ``equation`` (series name),
    ``regressor`` ("const", "trend", "<series>.L<lag>"), ``estimate``, ``stderr``.
    """

    y: np.ndarray
    names: tuple[str, ...]
    trend: str
    lags: int
    nobs: int
    k_regressors: int
    params: np.ndarray
    stderr: np.ndarray
    coefs: np.ndarray
    intercept: np.ndarray | None
    trend_coef: np.ndarray | None
    sigma_u: np.ndarray
    sigma_u_ml: np.ndarray
    resid: np.ndarray
    gram_inv: np.ndarray
    llf: float
    aic: float
    bic: float
    hq: float
    fpe: float
    companion: np.ndarray
    spectral_radius: float
    is_stable: bool
    dates: np.ndarray | None = None

    @property
    def n(self) -> int:
        """Number of series."""
        return int(self.y.shape[1])

    @property
    def date(self) -> np.datetime64 | None:
        """The date of the last row fitted (what names the fit), or None without dates."""
        return last_date(self.dates)

    @property
    def resid_dates(self) -> np.ndarray | None:
        """(T_eff,) dates of the rows of `resid` and `fitted` (rows p..T−1), or None."""
        return None if self.dates is None else self.dates[self.lags :]

    def _columns(self) -> Columns:
        k, n = self.params.shape
        return {
            **{key: np.repeat(value, k * n) for key, value in date_lead(self.date).items()},
            "equation": coded(self.names, np.tile(np.arange(n), k)),
            "regressor": coded(self.regressor_names, np.repeat(np.arange(k), n)),
            "estimate": self.params.reshape(-1),
            "stderr": self.stderr.reshape(-1),
        }

    @property
    def df_resid(self) -> int:
        """Residual degrees of freedom per equation, T_eff − k."""
        return self.nobs - self.k_regressors

    @property
    def regressor_names(self) -> tuple[str, ...]:
        """k labels of the rows of `params`: "const", "trend", then "<name>.L<lag>"."""
        return _regressor_names(self.names, self.lags, self.trend)

    @property
    def coefs_stderr(self) -> np.ndarray:
        """(p, n, n) standard errors laid out like `coefs`."""
        d = len(TREND_TERMS[self.trend])
        return self.stderr[d:].reshape(self.lags, self.n, self.n).transpose(0, 2, 1)

    @property
    def intercept_stderr(self) -> np.ndarray | None:
        """(n,) standard errors of the intercepts, or None."""
        return self.stderr[0] if "const" in TREND_TERMS[self.trend] else None

    @property
    def fitted(self) -> np.ndarray:
        """(T_eff, n) fitted values for rows p..T−1."""
        return self.y[self.lags :] - self.resid

    def __repr__(self) -> str:
        return (
            f"VARFit(n={self.n}, lags={self.lags}, trend={self.trend!r}, nobs={self.nobs}, "
            f"names={list(self.names)!r}, spectral_radius={self.spectral_radius:.4f})"
        )


# ---------------------------------------------------------------------------------------------
# public entry points
# ---------------------------------------------------------------------------------------------


def fit_var(
    y: Any,
    lags: int,
    *,
    trend: str = "c",
    names: Sequence[str] | None = None,
    dates: Any = None,
) -> VARFit:
    """Fit a VAR(p) by least squares.

    Parameters
    ----------
    y : (T, n) array, rows are dates (oldest first), columns are series; 1-D means one series
        (a univariate AR(p)). Or a pandas/polars DataFrame: its numeric columns are the series
        (named by their columns), its date column or DatetimeIndex dates the rows and is never
        fitted; any other column is refused by name.
    lags : p >= 1.
    trend : "n" (none), "c" (intercept), "ct" (intercept and linear trend t + 1 at row t).
    names : optional n series names, used in messages and results (default y0, y1, ...); not
        with a DataFrame (its columns name the series).
    dates : optional (T,) dates of the rows of an array `y` (datetime64, dates or ISO strings,
        strictly increasing); results derived from the fit carry its last date.

    Returns
    -------
    VARFit with B̂ = (Z'Z)^{-1} Z'Y (Lütkepohl 2005, eq. 3.2.10), Σ̂_u = Û'Û/(T_eff − k)
    (eq. 3.3.3 generalised to k regressors), Σ̃_u = Û'Û/T_eff, and
    llf = −(T_eff n / 2) log 2π − (T_eff / 2)(log det Σ̃_u + n).

    With a constant ("c", "ct") the least squares are solved in centred coordinates (same
    estimates, without losing the digits of series far from zero; see `_fit_least_squares`).

    Raises
    ------
    InvalidInputError : NaN/inf or complex values, a constant series, too few rows for the
        coefficients, collinear regressors, a singular residual covariance — a series fitted
        exactly by the regressors, or residuals exactly linearly dependent; both judged
        without regard to units (`_check_sigma`) — bad `lags`/`trend`/`names`.

    Warns
    -----
    UnstableProcessWarning : the companion matrix has spectral radius >= 1.
    """
    data, labels, when = as_dated_data(y, names, dates)
    p = check_int(lags, "lags", minimum=1, hint="a VAR needs at least one lag")
    check_option(trend, "trend", TREND_TERMS)
    return _fit(data, labels, p, trend, arg="y", dates=when)


def _fit(
    data: np.ndarray,
    labels: tuple[str, ...],
    p: int,
    trend: str,
    *,
    arg: str,
    dates: np.ndarray | None = None,
) -> VARFit:
    """fit_var after validation of the simple arguments (also used by the bootstrap)."""
    T, n = data.shape
    d = len(TREND_TERMS[trend])
    _check_rows(T, n, p, d, arg)
    _check_constant(data, labels, arg)
    Z = design_matrix(data, p, trend)
    Y = data[p:]
    reg_names = _regressor_names(labels, p, trend)
    B, gram_inv, resid = _fit_least_squares(
        Z, Y, reg_names, arg, const="const" in TREND_TERMS[trend]
    )
    T_eff, k = Z.shape
    sse = resid.T @ resid
    sigma_u = sse / (T_eff - k)
    sigma_ml = sse / T_eff
    _check_sigma(sse, Y, labels, arg)
    stderr = np.sqrt(np.outer(np.diag(gram_inv), np.diag(sigma_u)))  # Var(B_ri) = G_rr σ_ii
    coefs = B[d:].reshape(p, n, n).transpose(0, 2, 1).copy()
    _, logdet = np.linalg.slogdet(sigma_ml)
    llf = -0.5 * T_eff * n * np.log(2 * np.pi) - 0.5 * T_eff * (logdet + n)
    ic = information_criteria(logdet, T_eff, n, k, p)
    comp = companion_matrix(coefs)
    radius = float(np.abs(np.linalg.eigvals(comp)).max())
    intercept = B[0].copy() if "const" in TREND_TERMS[trend] else None
    trend_coef = (
        B[TREND_TERMS[trend].index("trend")].copy() if "trend" in TREND_TERMS[trend] else None
    )
    fit = VARFit(
        y=data, names=labels, trend=trend, lags=p, nobs=T_eff, k_regressors=k, params=B,
        stderr=stderr, coefs=coefs, intercept=intercept, trend_coef=trend_coef, sigma_u=sigma_u,
        sigma_u_ml=sigma_ml, resid=resid, gram_inv=gram_inv, llf=float(llf), aic=ic["aic"],
        bic=ic["bic"], hq=ic["hq"], fpe=ic["fpe"], companion=comp, spectral_radius=radius,
        is_stable=radius < 1.0, dates=dates,
    )  # fmt: skip
    readonly(
        data, B, stderr, coefs, intercept, trend_coef, sigma_u, sigma_ml, resid, gram_inv, comp
    )
    if radius >= 1.0:
        warn_unstable(radius)
    return fit


def var_process(
    coefs: Any,
    sigma_u: Any,
    intercept: Any = None,
    *,
    names: Sequence[str] | None = None,
) -> VARProcess:
    """A VAR given by its parameters (for scenarios, simulation, closed-form checks).

    Parameters
    ----------
    coefs : (p, n, n) with ``coefs[i]`` = A_{i+1}; an (n, n) array means p = 1; a 1-D array
        [φ_1, ..., φ_p] means a univariate AR(p).
    sigma_u : (n, n) symmetric positive-definite innovation covariance (a scalar when n = 1).
    intercept : (n,) or None.
    names : optional n series names.

    Warns
    -----
    UnstableProcessWarning : spectral radius of the companion matrix >= 1.
    """
    A = _as_array(coefs, "coefs")
    if A.ndim == 1:
        A = A[:, None, None]
    elif A.ndim == 2:
        A = A[None]
    if A.ndim != 3 or A.shape[1] != A.shape[2] or A.shape[0] == 0:
        msg = (
            f"`coefs` must have shape (p, n, n) with p >= 1 (or (n, n) for one lag, or 1-D AR "
            f"coefficients), got shape {np.shape(coefs)}"
        )
        raise InvalidInputError(msg)
    n = A.shape[1]
    S = (
        _as_array(sigma_u, "sigma_u").reshape(1, 1)
        if np.ndim(sigma_u) == 0
        else _as_array(sigma_u, "sigma_u")
    )
    if S.shape != (n, n):
        msg = f"`sigma_u` must have shape ({n}, {n}) to match `coefs` {A.shape}, got {S.shape}"
        raise InvalidInputError(msg)
    if not np.allclose(S, S.T, rtol=1e-10, atol=0.0):
        msg = f"`sigma_u` must be symmetric; largest asymmetry {np.abs(S - S.T).max():.3g}"
        raise InvalidInputError(msg)
    S = 0.5 * (S + S.T)
    eig = np.linalg.eigvalsh(S)
    if eig[0] <= 0:
        msg = (
            f"`sigma_u` must be positive definite; its smallest eigenvalue is {eig[0]:.3g}; "
            "pass a valid covariance matrix"
        )
        raise InvalidInputError(msg)
    c = None
    if intercept is not None:
        c = _as_array(intercept, "intercept").reshape(-1)
        if c.shape != (n,):
            msg = f"`intercept` must have shape ({n},), got {np.shape(intercept)}"
            raise InvalidInputError(msg)
    labels = as_names(names, n)
    comp = companion_matrix(A)
    radius = float(np.abs(np.linalg.eigvals(comp)).max())
    readonly(A, S, c, comp)
    proc = VARProcess(
        coefs=A, sigma_u=S, intercept=c, names=labels, companion=comp,
        spectral_radius=radius, is_stable=radius < 1.0,
    )  # fmt: skip
    if radius >= 1.0:
        warn_unstable(radius, what="given VAR process")
    return proc


def _as_array(value: Any, arg: str) -> np.ndarray:
    arr = as_real_array(value, arg, "a real numeric array")
    if not np.isfinite(arr).all():
        msg = f"`{arg}` contains NaN or inf; pass finite numbers"
        raise InvalidInputError(msg)
    return arr


@dataclass(frozen=True, eq=False, repr=False)
class LagSelection:
    """Information criteria for p = 0..max_lags on one common sample.

    Attributes
    ----------
    lags : (P+1,) ints 0..max_lags.
    aic, bic, hq, fpe : (P+1,) criteria (see `information_criteria` for the penalty convention).
    nobs : common sample size T − max_lags.   trend : deterministic terms used.
    best : {"aic", "bic", "hq", "fpe"} → lag order minimising each criterion (ties: smallest p).
    """

    lags: np.ndarray
    aic: np.ndarray
    bic: np.ndarray
    hq: np.ndarray
    fpe: np.ndarray
    nobs: int
    trend: str

    @property
    def best(self) -> dict[str, int]:
        """Chosen lag order per criterion."""
        return {
            name: int(self.lags[np.argmin(getattr(self, name))])
            for name in ("aic", "bic", "hq", "fpe")
        }

    def __repr__(self) -> str:
        return f"LagSelection(max_lags={int(self.lags[-1])}, nobs={self.nobs}, best={self.best})"


def select_lags(
    y: Any, max_lags: int, *, trend: str = "c", names: Sequence[str] | None = None
) -> LagSelection:
    """AIC, BIC (Schwarz), HQ and FPE for p = 0..max_lags, all on the last T − max_lags rows.

    Each criterion uses Σ̃_u(p) = Û'Û / (T − max_lags) from the fit with p lags on the common
    sample (Lütkepohl 2005, Sec. 4.3: every order is fitted to the same T so the criteria compare).

    Parameters
    ----------
    y : (T, n) or (T,) data.   max_lags : P >= 1.   trend : "n" | "c" | "ct".
    """
    data, labels = as_data(y, names)
    P = check_int(max_lags, "max_lags", minimum=1)
    check_option(trend, "trend", TREND_TERMS)
    T, n = data.shape
    d = len(TREND_TERMS[trend])
    _check_rows(T, n, P, d, "y", what="max_lags")
    _check_constant(data, labels, "y")
    Y = data[P:]
    T_eff = T - P
    rows = {name: np.empty(P + 1) for name in ("aic", "bic", "hq", "fpe")}
    for p in range(P + 1):
        Z = design_matrix(data, p, trend, start=P)
        _, _, U = _fit_least_squares(
            Z, Y, _regressor_names(labels, p, trend), "y", const="const" in TREND_TERMS[trend]
        )
        sigma_ml = U.T @ U / T_eff
        _check_sigma(U.T @ U, Y, labels, "y")
        _, logdet = np.linalg.slogdet(sigma_ml)
        for name, value in information_criteria(logdet, T_eff, n, Z.shape[1], p).items():
            rows[name][p] = value
    lag_grid = np.arange(P + 1)
    readonly(lag_grid, *rows.values())
    return LagSelection(lags=lag_grid, nobs=T_eff, trend=trend, **rows)
