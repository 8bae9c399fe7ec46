"""Residual checks for a fitted VAR: multivariate portmanteau and normality tests.

    Ĉ_i = T^{-1} Σ_{t=i+1}^{T} û_t û_{t−i}'                 residual autocovariances
    Q_h  = T Σ_{i=1}^{h} tr(Ĉ_i' Ĉ_0^{-1} Ĉ_i Ĉ_0^{-1})              (Lütkepohl 2005, eq. 4.4.23)
    Q̄_h  = T² Σ_{i=1}^{h} (T − i)^{-1} tr(Ĉ_i' Ĉ_0^{-1} Ĉ_i Ĉ_0^{-1})  (eq. 4.4.24, small sample)
    both ≈ χ²(n²(h − p)) under white-noise residuals.

    w_t = P̃^{-1}(û_t − ū),  P̃ P̃' = T^{-1} Σ (û_t − ū)(û_t − ū)'    standardized residuals
    b_1 = T^{-1} Σ w_t³,  b_2 = T^{-1} Σ w_t⁴  (elementwise)
    λ_s = T b_1'b_1 / 6 ≈ χ²(n),  λ_k = T (b_2 − 3)'(b_2 − 3) / 24 ≈ χ²(n),  λ_s + λ_k ≈ χ²(2n)
    (Lütkepohl 2005, Sec. 4.5, eqs. 4.5.3–4.5.5; Jarque & Bera 1987 multivariate form).

References
----------
Lütkepohl, H. (2005). New Introduction to Multiple Time Series Analysis. Springer. Secs. 4.4.3, 4.5.
Hosking, J. R. M. (1980). The multivariate portmanteau statistic. JASA 75, 602–608.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

from ._estimate import VARFit
from ._validate import InvalidInputError, check_int


def _require_fit(fit: object) -> VARFit:
    if not isinstance(fit, VARFit):
        msg = (
            f"`fit` must be an estimated VARFit (residual checks need residuals), got "
            f"{type(fit).__name__}"
        )
        raise InvalidInputError(msg)
    return fit


@dataclass(frozen=True)
class PortmanteauResult:
    """Multivariate portmanteau test of residual autocorrelation up to lag h.

    Attributes
    ----------
    statistic, p_value : Q_h and its χ²(df) upper-tail p-value.
    adjusted_statistic, adjusted_p_value : small-sample Q̄_h and its p-value.
    df : n²(h − p).   max_lag : h.   null_hypothesis : H0 in words.
    """

    statistic: float
    p_value: float
    adjusted_statistic: float
    adjusted_p_value: float
    df: int
    max_lag: int
    null_hypothesis: str


def portmanteau_test(fit: VARFit, max_lag: int) -> PortmanteauResult:
    """Portmanteau test that residual autocorrelations at lags 1..h are all zero.

    Parameters
    ----------
    fit : `VARFit`.   max_lag : h > p (the approximation χ²(n²(h − p)) needs h > p, and works
        best for h large relative to p; Lütkepohl 2005, Sec. 4.4.3).
    """
    model = _require_fit(fit)
    h = check_int(max_lag, "max_lag", minimum=model.lags + 1,
                  hint=f"the χ² degrees of freedom n²(h − p) need h > p = {model.lags}")  # fmt: skip
    u = np.asarray(model.resid)
    T = u.shape[0]
    if h >= T:
        msg = f"`max_lag` = {h} must be below the {T} residual rows; use a smaller max_lag"
        raise InvalidInputError(msg)
    c0_inv = np.linalg.inv(u.T @ u / T)
    terms = np.empty(h)
    for i in range(1, h + 1):
        ci = u[i:].T @ u[:-i] / T  # Ĉ_i = T^{-1} Σ_t û_t û_{t−i}'
        terms[i - 1] = np.trace(ci.T @ c0_inv @ ci @ c0_inv)
    q = T * terms.sum()
    q_adj = T**2 * (terms / (T - np.arange(1, h + 1))).sum()
    df = model.n**2 * (h - model.lags)
    return PortmanteauResult(
        statistic=float(q), p_value=float(stats.chi2.sf(q, df)),
        adjusted_statistic=float(q_adj), adjusted_p_value=float(stats.chi2.sf(q_adj, df)),
        df=df, max_lag=h,
        null_hypothesis=f"residual autocorrelations at lags 1..{h} are all zero",
    )  # fmt: skip


@dataclass(frozen=True)
class NormalityResult:
    """Jarque–Bera-type multivariate normality test on standardized residuals.

    Attributes
    ----------
    statistic, df, p_value : λ_s + λ_k, 2n, χ² p-value (joint).
    skewness_stat, skewness_p_value : λ_s ≈ χ²(n).
    kurtosis_stat, kurtosis_p_value : λ_k ≈ χ²(n).
    null_hypothesis : H0 in words.
    """

    statistic: float
    df: int
    p_value: float
    skewness_stat: float
    skewness_p_value: float
    kurtosis_stat: float
    kurtosis_p_value: float
    null_hypothesis: str


def normality_test(fit: VARFit) -> NormalityResult:
    """Multivariate normality test of the residuals (Lütkepohl 2005, Sec. 4.5).

    Residuals are centred and standardized with the Cholesky factor of their ML covariance, so
    the result depends on the column order (as in the reference); skewness and excess kurtosis
    of each standardized component are combined into χ² statistics.
    """
    model = _require_fit(fit)
    u = np.asarray(model.resid)
    T, n = u.shape
    uc = u - u.mean(axis=0)
    P = np.linalg.cholesky(uc.T @ uc / T)
    w = np.linalg.solve(P, uc.T)  # (n, T) w_t = P̃^{-1}(û_t − ū)
    b1 = (w**3).mean(axis=1)
    b2 = (w**4).mean(axis=1) - 3.0
    lam_s = T * float(b1 @ b1) / 6
    lam_k = T * float(b2 @ b2) / 24
    joint = lam_s + lam_k
    return NormalityResult(
        statistic=joint, df=2 * n, p_value=float(stats.chi2.sf(joint, 2 * n)),
        skewness_stat=lam_s, skewness_p_value=float(stats.chi2.sf(lam_s, n)),
        kurtosis_stat=lam_k, kurtosis_p_value=float(stats.chi2.sf(lam_k, n)),
        null_hypothesis="the residuals are Gaussian (zero skewness, kurtosis 3)",
    )  # fmt: skip
