"""How many rows a VAR needs: the one minimum-window rule shared by the fits and their callers.

A VAR(p) on n series with d deterministic terms has k = d + n·p regressors per equation. A window
of w rows gives w − p equations (observations); least squares needs k of them for the coefficients
and n more so the n×n residual covariance Σ̂_u = Û'Û / (w − p − k) is nonsingular (Û has rank at
most w − p − k). Hence w >= p + k + n — the rule `rolling_var` applies to its window and the
pipeline's config check applies before any data is read.
"""

from __future__ import annotations

from ._estimate import TREND_TERMS
from ._validate import check_int, check_option

__all__ = ["minimum_window"]


def minimum_window(n: int, lags: int, trend: str = "c") -> int:
    """Fewest rows a window needs to fit a VAR(`lags`) on `n` series with `trend`: p + k + n.

    Parameters
    ----------
    n : number of series (>= 1).   lags : p (>= 1).   trend : "n" | "c" | "ct".

    Returns
    -------
    int : p + k + n with k = d + n·p regressors per equation (d = 0, 1, 2 for "n", "c", "ct").
    """
    n = check_int(n, "n", minimum=1)
    p = check_int(lags, "lags", minimum=1, hint="a VAR needs at least one lag")
    check_option(trend, "trend", TREND_TERMS)
    k = len(TREND_TERMS[trend]) + n * p  # regressors per equation
    return p + k + n
