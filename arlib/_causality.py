"""Granger-causality tests on a fitted VAR.

H0: the lags of the `causing` series have zero coefficients in the equations of the `caused`
series, C β = 0 with J = p · |causing| · |caused| restrictions.

    λ_W = (C β̂)' [C ((Z'Z)^{-1} ⊗ Σ̂_u) C']^{-1} (C β̂)   ~ χ²(J)        (Wald)
    λ_F = λ_W / J                                      ≈ F(J, n·(T_eff − k))

with Σ̂_u the degrees-of-freedom-corrected covariance (divided by T_eff − k).

References
----------
Lütkepohl, H. (2005). New Introduction to Multiple Time Series Analysis. Springer.
    Sec. 3.6.1, eqs. 3.6.5 (Wald statistic) and 3.6.7 (F approximation, F(J, KT − K²p − K)).
Granger, C. W. J. (1969). Investigating causal relations by econometric models and
    cross-spectral methods. Econometrica 37, 424–438.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import stats

from ._estimate import TREND_TERMS, VARFit
from ._frames import Columns, FrameMixin, date_lead
from ._validate import InvalidInputError, series_indices


@dataclass(frozen=True)
class GrangerResult(FrameMixin):
    """A Granger-causality test (read-only).

    Attributes
    ----------
    f_stat, df, p_value : λ_F, its (numerator, denominator) degrees of freedom, upper-tail p.
    wald_stat, wald_df, wald_p_value : λ_W, J, upper-tail χ²(J) p-value.
    caused, causing : series names.   null_hypothesis : H0 in words.
    date : the last date of the fit (datetime64), or None when it had no dates.

    ``to_frame()`` / ``to_polars()``: one row — ``date`` (when known), ``caused`` and
    ``causing`` (lists of series names), ``f_stat``, ``df_num``, ``df_den``, ``p_value``,
    ``wald_stat``, ``wald_df``, ``wald_p_value``, ``null_hypothesis``.
    """

    f_stat: float
    df: tuple[int, int]
    p_value: float
    wald_stat: float
    wald_df: int
    wald_p_value: float
    caused: tuple[str, ...]
    causing: tuple[str, ...]
    null_hypothesis: str
    date: np.datetime64 | None = None

    def _columns(self) -> Columns:
        lists = np.empty(2, dtype=object)
        lists[0], lists[1] = list(self.caused), list(self.causing)
        row: dict[str, Any] = {
            **date_lead(self.date), "caused": lists[:1], "causing": lists[1:],
            "f_stat": self.f_stat, "df_num": self.df[0], "df_den": self.df[1],
            "p_value": self.p_value, "wald_stat": self.wald_stat, "wald_df": self.wald_df,
            "wald_p_value": self.wald_p_value, "null_hypothesis": self.null_hypothesis,
        }  # fmt: skip
        return {k: v if isinstance(v, np.ndarray) else np.array([v]) for k, v in row.items()}

    def rejects(self, level: float = 0.05) -> bool:
        """True when the F test rejects H0 at `level`."""
        return self.p_value < level


def _join(names: Sequence[str]) -> str:
    quoted = [f"'{x}'" for x in names]
    return quoted[0] if len(quoted) == 1 else ", ".join(quoted[:-1]) + " and " + quoted[-1]


def wald_statistic(
    params: np.ndarray, gram_inv: np.ndarray, sigma_u: np.ndarray, n: int, p: int, d: int,
    eqs: Sequence[int], src: Sequence[int],
) -> tuple[float, int]:  # fmt: skip
    """λ_W and J for "the lags of `src` do not enter the equations `eqs`" (eq. 3.6.5).

    params (k, n) B, gram_inv (k, k) (Z'Z)^{-1}, sigma_u (n, n) Σ̂_u; d deterministic terms.
    """
    # restricted entries of B (k, n): row d + (lag−1)·n + c (lag of series c), column e (equation)
    rows = np.array([d + (lag - 1) * n + c for lag in range(1, p + 1) for c in src for _ in eqs])
    cols = np.array([e for _ in range(1, p + 1) for _ in src for e in eqs])
    beta = params[rows, cols]
    # Cov(B_re, B_sf) = (Z'Z)^{-1}_rs Σ̂_uef  — the entries of (Z'Z)^{-1} ⊗ Σ̂_u picked by C
    cov = gram_inv[np.ix_(rows, rows)] * sigma_u[np.ix_(cols, cols)]
    return float(beta @ np.linalg.solve(cov, beta)), int(beta.size)


def granger_test(
    fit: VARFit, caused: int | str | Sequence[int | str], causing: int | str | Sequence[int | str]
) -> GrangerResult:
    """Test whether `causing` Granger-causes `caused` in a fitted VAR (F and Wald forms).

    Parameters
    ----------
    fit : a `VARFit` (the test needs the estimated coefficient covariance).
    caused, causing : series as column indices or names, one or a list; the sets must not overlap.

    Returns
    -------
    GrangerResult with df = (J, n·(T_eff − k)) as in Lütkepohl (2005, Sec. 3.6.1), where
    J = p · |caused| · |causing|.
    """
    if not isinstance(fit, VARFit):
        msg = (
            f"`fit` must be an estimated VARFit (from `fit_var`), got {type(fit).__name__}; a "
            "Granger test needs the estimated coefficient covariance"
        )
        raise InvalidInputError(msg)
    eqs = series_indices(caused, fit.names, "caused")
    src = series_indices(causing, fit.names, "causing")
    both = sorted(set(eqs) & set(src))
    if both:
        msg = (
            f"`caused` and `causing` overlap in {[fit.names[i] for i in both]!r}; a series' own "
            "lags are not tested — list each series in only one of them"
        )
        raise InvalidInputError(msg)
    n, p = fit.n, fit.lags
    d = len(TREND_TERMS[fit.trend])
    wald, J = wald_statistic(fit.params, fit.gram_inv, fit.sigma_u, n, p, d, eqs, src)
    df_den = n * fit.df_resid
    f_stat = wald / J
    verb = "does" if len(src) == 1 else "do"
    null = f"{_join([fit.names[i] for i in src])} {verb} not Granger-cause " + _join(
        [fit.names[i] for i in eqs]
    )
    return GrangerResult(
        f_stat=f_stat, df=(J, df_den), p_value=float(stats.f.sf(f_stat, J, df_den)),
        wald_stat=wald, wald_df=J, wald_p_value=float(stats.chi2.sf(wald, J)),
        caused=tuple(fit.names[i] for i in eqs), causing=tuple(fit.names[i] for i in src),
        null_hypothesis=null, date=fit.date,
    )  # fmt: skip
