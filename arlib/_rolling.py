"""Rolling- and expanding-window VARs, computed exactly and in batches.

`rolling_var` refits a VAR on every window of a long sample and returns, per window, what the
single-fit functions give for the same rows: coefficients, Σ_u, spectral radius, information
criteria, Diebold–Yilmaz connectedness, all pairwise Granger F tests, and optionally impulse
responses, decompositions and a residual portmanteau test. Windows are processed in chunks;
within a chunk every quantity is computed for all windows at once (see `_rolling_kernels`).

Windows
-------
Window w ends at row e_w (its last observation). A rolling window holds rows
e_w − window + 1 .. e_w; an expanding window holds rows 0 .. e_w. By default the ends run over the
grid window − 1, window − 1 + step, ..., up to T − 1.

Gaps: rows of `y` may hold NaN. Observation t (the equation for row t) is usable only if rows
t, t−1, ..., t−p are all finite; each window is fitted on its usable observations, as `fit_var`
would fit the same observations stacked together (the trend still counts rows from the window's
first row). A window is skipped — its numbers NaN and `skip_reason` saying why — when it has fewer
than k + n usable observations (k regressors per equation; the margin n keeps the n×n residual
covariance nonsingular, the rule `fit_var` applies), or when its regressors are collinear or its
residual covariance singular (the checks `fit_var` makes).

Accuracy
--------
Cross-products are formed in shifted coordinates (each series less a shift close to its values
in the window, see Reproducibility; no shift for trend "n", where a shift would change the model)
and summed without differencing running totals over the history
(`_rolling_kernels.anchored_window_sums`); each window is solved by a Cholesky factorisation of
its augmented cross-product matrix (blocked: the regressor block, then the residual Schur
complement), which also yields the residual cross-products. Every
condition measure below is scale-free (the same in any units). The loss of accuracy is about
κ·1e-16 relative, where κ is `condition_number` = k'·Σ_i VIF_i over the k' non-constant
regressors (centred when the model has an intercept): trace(R)·trace(R^{-1}) of their
correlation matrix R, an upper bound on its 2-norm condition number (at most k'² times it), and
a property of the window's rows alone. A window is refitted directly from its rows — by the
computation `fit_var` performs, whose coefficients, intercepts, Σ_u and residuals it then takes
as they are — when κ > `FAST_COND_LIMIT` (1e6), when its cross-products as factorised are
conditioned worse than `WORK_COND_LIMIT` (1e7), when its residual correlations come near
singular (`SSE_COND_LIMIT`), when a residual sum of squares comes out of the factorisation by
cancelling more than six digits (`FIT_COND_LIMIT`: a near-exact fit, or series far from zero
under trend "n") or when the factorisation fails; it is skipped with `fit_var`'s own reason when
`fit_var` would refuse its rows (collinear regressors, a constant series, a series fitted
exactly, linearly dependent residuals); its κ then comes from the QR factor.

So no reported number rests on an ill-conditioned cross-product solve. Windows solved from
cross-products agree with `fit_var` to about 1e-10 relative or better (tested to 1e-8, in units
of each series' residual standard deviation, on unit-scale data, on series at levels up to 1e6
with nine digits between level and move, and on series whose units differ by up to 1e8).
Refitted windows carry `fit_var`'s coefficients and Σ_u bit for bit and Granger statistics by
`granger_test`'s own arithmetic; what else is derived from them (connectedness, responses,
spectral radius, information criteria) agrees up to the sensitivity of that quantity at the
window's conditioning — in the near-collinear windows of the
tests (κ ≈ 1e10) connectedness and Granger F to 1e-8 relative, responses to 1e-7 of their
largest entry, the spectral radius to 1e-6 relative and the criteria (through log det of a
near-singular Σ̃_u) to 1e-5 absolute. Under trend "n", series far from zero make the least-squares
problem itself ill-conditioned (every regressor nearly proportional to the others): those
windows are refitted, and their numbers are as accurate as `fit_var`'s — which, for the Granger
Wald form built from (Z'Z)^{-1}, can be a few digits short there (1.7e-4 relative against exact
rational arithmetic for a series at 1e6 with two lags).

Reproducibility
---------------
Every number of a window is a function of that window's rows (and of their row numbers, which
fix a grid): the same bit for bit in a full run, an `after=` run, `ends=` blocks joined with
`RollingVAR.concat`, a run on a shorter or longer history, and whatever the internal chunking.
Rolling windows are grouped by the block of L = window − p rows (blocks at multiples of L from
row 0) that holds their first observation; all windows of a block contain its last row and the
p rows before it, whose mean is the group's shift, and each window's sum runs outwards from that
row in a fixed order. Expanding windows all contain the first window's rows (their shift) and
sum over blocks at fixed multiples of `EXPANDING_BLOCK` rows. The batched steps that follow treat
each window independently of the others in its batch. Refit decisions and skip reasons follow
from these numbers, so they are reproducible too.

Cost
----
Per window: O(m²) for its cross-products plus a fixed amount of batched small-matrix
arithmetic; no per-window linear algebra is driven from Python except for the rare windows
refitted directly. With `after=` or `ends=` only the requested windows and the rows of their
anchor blocks are touched (at most about two windows' worth of rows per block; expanding
windows: the running sums from row 0 are O(T·m²)). `workers=` spreads chunks over threads.

References
----------
Lütkepohl, H. (2005). New Introduction to Multiple Time Series Analysis. Springer.
Diebold, F. X. and Yilmaz, K. (2012). International Journal of Forecasting 28, 57–66.
Pesaran, M. H. and Shin, Y. (1998). Economics Letters 58, 17–29.
"""

from __future__ import annotations

import dataclasses
import threading
import time
import warnings
from collections.abc import Callable, Iterator, Sequence
from concurrent.futures import Future, ThreadPoolExecutor
from contextlib import contextmanager
from dataclasses import dataclass, field, fields
from functools import partial
from itertools import pairwise
from typing import Any

import numpy as np
from scipy import linalg, stats

from . import _frames
from . import _rolling_kernels as K
from ._causality import wald_statistic
from ._estimate import (
    TREND_TERMS,
    _check_sigma,
    _fit_least_squares,
    _regressor_names,
    select_lags,
)
from ._frequency import (
    DEFAULT_TRUNCATION,
    band_kernel,
    band_weights,
    check_bands,
    default_grid,
    frequency_measures,
)
from ._joint import band_joint_kernel, joint_kernel
from ._labels import date_rows
from ._sizes import minimum_window
from ._validate import (
    InvalidInputError,
    as_dated_data,
    check_int,
    check_option,
    readonly,
)

#: Response identifications that can be stored per window (names as in `impulse_responses`).
RESPONSE_KINDS = ("cholesky", "generalized", "unit")
#: Decomposition methods that can be stored per window (as in `variance_decomposition`).
DECOMPOSITION_KINDS = ("cholesky", "generalized")
#: Lag-order criteria (as in `select_lags`).
CRITERIA = ("aic", "bic", "hq", "fpe")
#: Above this condition number (`condition_number`) a window is refitted directly by QR.
FAST_COND_LIMIT = 1e6
#: ... or above this bound for the cross-products as factorised (working coordinates: the
#: window's shift and trend scaling included), what the factorisation's rounding depends on.
WORK_COND_LIMIT = 1e7
#: ... or above this bound trace(R) trace(R^{-1}) for the residual correlation matrix R: every
#: window `fit_var` would refuse for linearly dependent residuals (eigenvalue ratio of R below
#: 1e-12) exceeds 1e12 here, so it is refitted and refused as `fit_var` refuses it.
SSE_COND_LIMIT = 1e10
#: ... or above this bound max_i Σ_t y_ti² / Û'Û_ii (working coordinates): residual
#: cross-products computed by cancelling more than six digits (a near-exact fit, or a series
#: far from its working shift, as with trend "n", which is never shifted). Every window
#: `fit_var` would refuse as fitting a series exactly (ratio above 1e12 about the mean) exceeds it.
FIT_COND_LIMIT = 1e6
#: Working-memory budget per chunk of windows (bytes); bounds peak memory beyond the outputs.
CHUNK_BYTES = 32 * 2**20
#: Budget (bytes) for the cross-product sums of one unit of windows summed together.
GRAM_BYTES = 64 * 2**20


# ---------------------------------------------------------------------------------------------
# result
# ---------------------------------------------------------------------------------------------


def _axes(*axes: str) -> dict[str, tuple[str, ...]]:
    """Field metadata of a `RollingVAR` array: its axes after the window axis, the columns of
    ``to_frame(field)`` (labels from `_frames`). Declared here, beside the field."""
    return {"axes": axes}


@dataclass(frozen=True, eq=False, repr=False)
class RollingVAR:
    """Per-window VAR results. W windows, n series, P = largest lag order, H = horizon.

    All arrays are read-only; a skipped window (``ok[w]`` False) has NaN in every float array
    and its reason in ``skip_reason[w]``.

    Attributes
    ----------
    ends : (W,) int, row of each window's last observation (windows ordered by end).
    starts : (W,) int, row of each window's first row (0 for expanding windows).
    nobs : (W,) int, usable observations (equations) in the window; ``window − p`` without gaps.
    lags : (W,) int, lag order p of each window (the selected one under a criterion; 0 where
        the selection itself could not be made).
    coefs : (W, P, n, n); ``coefs[w, l]`` is A_{l+1}; zero for l >= lags[w].
    intercept : (W, n) or None (trend "n").   trend_coef : (W, n) slope for trend "ct", else None.
    sigma_u : (W, n, n) Σ̂_u = Û'Û / (nobs − k).
    spectral_radius : (W,) largest eigenvalue modulus of the companion matrix.
    aic, bic, hq, fpe : (W,) information criteria, the convention of `fit_var`.
    condition_number : (W,) κ = k'·Σ_i VIF_i over the window's k' non-constant regressors
        (centred when there is an intercept): trace(R)·trace(R^{-1}) of their correlation matrix
        R, between its 2-norm condition number and k'² times it; a function of the window's rows
        alone and of no units. Windows above `FAST_COND_LIMIT` (1e6) were refitted directly by
        `fit_var`'s computation (κ from the QR factor), as were windows failing the other guards
        of the module docstring's Accuracy section.
    total_connectedness : (W,) percent, Σ_{i≠j} pairwise[i, j] / n.
    to_others, from_others, net : (W, n) percent; sums of off-diagonal pairwise entries over
        rows (to, column j) and columns (from, row i); net = to − from.
    pairwise : (W, n, n) percent; [w, i, j] = share of series i's H-step forecast-error variance
        due to shocks in j (generalized, row-normalised; Diebold & Yilmaz 2012); rows sum to 100.
    granger_f, granger_p : (W, n, n) or None; [w, i, j] tests "series j does not Granger-cause
        series i" (F form, Lütkepohl 2005 Sec. 3.6.1); diagonal NaN.
    granger_df : (W, 2) int or None, (p, n·(nobs − k)) per window ((0, 0) when skipped).
    responses : (W, H+1, n, n) [window, horizon, response, shock] or None.
    response_kind : identification of `responses` ("cholesky" | "generalized" | "unit") or None.
    decomposition : (W, H, n, n) [window, step, variable, shock], rows sum to one, or None.
    decomposition_kind : "cholesky" | "generalized" or None.
    portmanteau_p : (W,) p-value of the small-sample adjusted portmanteau test Q̄_h
        (Lütkepohl 2005, eq. 4.4.24; `_diagnostics.portmanteau_test`), or None; NaN for windows
        with gaps (residual autocorrelations are not defined across a gap).
    portmanteau_lags : h, or None.
    skip_reason : (W,) object, "" for fitted windows.   ok : (W,) bool.
    names : n series names.   window, step, trend, horizon, expanding : as passed.
    criterion : lag criterion or None.
    band_periods : d frequency bands ((shortest, longest] cycle lengths in rows) or None;
        band_truncation : the MA terms behind them. With bands, each window's
        `frequency_connectedness` (Baruník & Křehlík 2018): band_tables (W, d, n, n) percent
        [window, band, variable, shock]; band_total, band_within, band_share (W, d);
        band_to_others, band_from_others (W, d, n) — None without bands.
    joint_from_others : (W, n) percent, each window's `joint_connectedness` (Lastrapes & Wiesen
        2021) at `horizon`, and joint_total (W,) their mean — None unless ``joint=True``.
    joint_band_from_others : (W, d, n) percent, each window's `joint_frequency_connectedness`
        `from_others` (band d's part of i's joint share at `band_truncation` steps; summed over
        bands, the joint share at that horizon); joint_band_total (W, d) their mean over series;
        joint_band_variance (W, d, n) Γ_i(d), the share of i's variance in band d — None unless
        both bands and ``joint=True``.
    dates : (W,) datetime64, the date of each window's last row (a window is named by it), or
        None when the data had no dates (a DataFrame's date column or `dates=`).

    ``to_frame()`` / ``to_polars()`` give one row per window (see `to_frame`);
    ``to_frame("pairwise")`` and the like give one array attribute in long form.
    """

    ends: np.ndarray
    starts: np.ndarray
    nobs: np.ndarray
    lags: np.ndarray
    coefs: np.ndarray = field(metadata=_axes("lag", "equation", "series"))
    intercept: np.ndarray | None = field(metadata=_axes("series"))
    trend_coef: np.ndarray | None = field(metadata=_axes("series"))
    sigma_u: np.ndarray = field(metadata=_axes("variable", "other"))
    spectral_radius: np.ndarray
    aic: np.ndarray
    bic: np.ndarray
    hq: np.ndarray
    fpe: np.ndarray
    condition_number: np.ndarray
    total_connectedness: np.ndarray
    to_others: np.ndarray = field(metadata=_axes("series"))
    from_others: np.ndarray = field(metadata=_axes("series"))
    net: np.ndarray = field(metadata=_axes("series"))
    pairwise: np.ndarray = field(metadata=_axes("variable", "shock"))
    granger_f: np.ndarray | None = field(metadata=_axes("caused", "causing"))
    granger_p: np.ndarray | None = field(metadata=_axes("caused", "causing"))
    granger_df: np.ndarray | None
    responses: np.ndarray | None = field(metadata=_axes("horizon", "response", "shock"))
    response_kind: str | None
    decomposition: np.ndarray | None = field(metadata=_axes("step", "variable", "shock"))
    decomposition_kind: str | None
    portmanteau_p: np.ndarray | None
    portmanteau_lags: int | None
    skip_reason: np.ndarray
    ok: np.ndarray
    names: tuple[str, ...]
    window: int
    step: int
    trend: str
    horizon: int
    expanding: bool
    criterion: str | None
    band_periods: tuple[tuple[float, float], ...] | None = None
    band_truncation: int | None = None
    band_tables: np.ndarray | None = field(default=None, metadata=_axes("band", "variable", "shock"))
    band_total: np.ndarray | None = field(default=None, metadata=_axes("band"))
    band_within: np.ndarray | None = field(default=None, metadata=_axes("band"))
    band_share: np.ndarray | None = field(default=None, metadata=_axes("band"))
    band_to_others: np.ndarray | None = field(default=None, metadata=_axes("band", "series"))
    band_from_others: np.ndarray | None = field(default=None, metadata=_axes("band", "series"))
    joint_from_others: np.ndarray | None = field(default=None, metadata=_axes("series"))
    joint_total: np.ndarray | None = None
    joint_band_from_others: np.ndarray | None = field(default=None, metadata=_axes("band", "series"))
    joint_band_total: np.ndarray | None = field(default=None, metadata=_axes("band"))
    joint_band_variance: np.ndarray | None = field(default=None, metadata=_axes("band", "series"))
    dates: np.ndarray | None = None

    def to_frame(self, field: str | None = None) -> Any:
        """Long pandas DataFrame. Without `field`: one row per window with ``date`` (when
        known), ``end``, ``start`` (rows), ``nobs``, ``lags``, ``ok``, ``skip_reason`` and every
        per-window number (``spectral_radius``, ``aic`` .. ``fpe``, ``condition_number``,
        ``total_connectedness``, and ``portmanteau_p`` / ``joint_total`` when stored). With
        `field` (e.g. "pairwise", "responses", "granger_p"): ``date`` (when known), ``end``, one
        column per further axis of that array (as each field declares them, `_axes`), then ``value``.
        """
        return _frames.to_pandas(_frames.rolling_columns(self, field), "RollingVAR")

    def to_polars(self, field: str | None = None) -> Any:
        """Long polars DataFrame, the layout of `to_frame`."""
        return _frames.to_polars(_frames.rolling_columns(self, field), "RollingVAR")

    def __len__(self) -> int:
        return int(self.ends.shape[0])

    @property
    def n(self) -> int:
        """Number of series."""
        return len(self.names)

    @property
    def max_lags(self) -> int:
        """P, the lag axis length of `coefs`."""
        return int(self.coefs.shape[1])

    def __repr__(self) -> str:
        kind = "expanding" if self.expanding else "rolling"
        return (
            f"RollingVAR({len(self)} {kind} windows of {self.window} rows, n={self.n}, "
            f"lags={self._lag_text()}, horizon={self.horizon}, skipped={int((~self.ok).sum())})"
        )

    def _lag_text(self) -> str:
        if self.criterion is None:
            return str(self.max_lags)
        return f"{self.criterion}<= {self.max_lags}"

    @classmethod
    def concat(cls, parts: Sequence[RollingVAR]) -> RollingVAR:
        """Join results for disjoint blocks of window ends (e.g. from several workers, or a
        stored history plus the newest windows) into one, ordered by end.

        The parts must share data names and every setting; P becomes the largest lag axis.
        """
        if isinstance(parts, RollingVAR) or not isinstance(parts, Sequence):
            msg = f"`parts` must be a list of RollingVAR results, got {type(parts).__name__}"
            raise InvalidInputError(msg)
        if not parts:
            msg = "`parts` is empty; pass at least one RollingVAR"
            raise InvalidInputError(msg)
        wrong = [type(part).__name__ for part in parts if not isinstance(part, RollingVAR)]
        if wrong:
            msg = (
                f"`parts` must hold RollingVAR results (from `rolling_var`), got {wrong[0]}; "
                "pass the results to join"
            )
            raise InvalidInputError(msg)
        first = parts[0]
        same = ("names", "window", "step", "trend", "horizon", "expanding", "criterion",
                "response_kind", "decomposition_kind", "portmanteau_lags")  # fmt: skip
        for other in parts[1:]:
            for attr in same:
                if getattr(other, attr) != getattr(first, attr):
                    msg = (
                        f"cannot join RollingVAR results with different `{attr}`: "
                        f"{getattr(first, attr)!r} vs {getattr(other, attr)!r}"
                    )
                    raise InvalidInputError(msg)
            for attr in ("granger_f", "portmanteau_p", "dates"):
                if (getattr(other, attr) is None) != (getattr(first, attr) is None):
                    msg = f"cannot join RollingVAR results where only some have `{attr}`"
                    raise InvalidInputError(msg)
        ends = np.concatenate([part.ends for part in parts])
        order = np.argsort(ends, kind="stable")
        if np.any(np.diff(ends[order]) == 0):
            msg = "cannot join RollingVAR results whose window ends overlap; pass disjoint blocks"
            raise InvalidInputError(msg)
        P = max(part.max_lags for part in parts)
        values: dict[str, Any] = {}
        for f in fields(cls):
            vals = [getattr(part, f.name) for part in parts]
            if not isinstance(vals[0], np.ndarray):
                values[f.name] = vals[0]
                continue
            if f.name == "coefs":
                vals = [
                    np.concatenate(
                        [v, np.zeros((v.shape[0], P - v.shape[1], *v.shape[2:]))], axis=1
                    )
                    for v in vals
                ]
            joined = np.concatenate(vals)[order]
            joined.flags.writeable = False
            values[f.name] = joined
        return cls(**values)


# ---------------------------------------------------------------------------------------------
# stage timing (the benchmark reads it; costs nothing when unused)
# ---------------------------------------------------------------------------------------------


class StageTimer:
    """Accumulates wall time per named stage: ``with timer("gram"): ...`` (with workers > 1,
    the sum over threads)."""

    def __init__(self) -> None:
        self.seconds: dict[str, float] = {}
        self._lock = threading.Lock()

    @contextmanager
    def __call__(self, name: str) -> Iterator[None]:
        t0 = time.perf_counter()
        try:
            yield
        finally:
            elapsed = time.perf_counter() - t0
            with self._lock:
                self.seconds[name] = self.seconds.get(name, 0.0) + elapsed


class _NoTimer:
    @contextmanager
    def __call__(self, name: str) -> Iterator[None]:
        yield


# ---------------------------------------------------------------------------------------------
# public entry
# ---------------------------------------------------------------------------------------------


def rolling_var(
    y: Any,
    window: int,
    lags: int | None,
    horizon: int,
    *,
    step: int = 1,
    trend: str = "c",
    expanding: bool = False,
    ends: Any = None,
    after: int | None = None,
    criterion: str | None = None,
    max_lags: int | None = None,
    granger: bool = True,
    responses: str | None = None,
    decomposition: str | None = None,
    portmanteau_lags: int | None = None,
    names: Sequence[str] | None = None,
    dates: Any = None,
    workers: int = 1,
    frequency_bands: Sequence[tuple[float, float]] | None = None,
    band_truncation: int = DEFAULT_TRUNCATION,
    joint: bool = False,
    _timer: StageTimer | None = None,
) -> RollingVAR:
    """Fit a VAR on every rolling (or expanding) window and derive per-window results.

    Each window's numbers equal those of `fit_var`, `connectedness`, `granger_test`,
    `impulse_responses`, `variance_decomposition` and `portmanteau_test` applied to the same rows
    (to about 1e-10 relative, tested to 1e-8, whatever the units and levels of the series;
    windows refitted for ill-conditioning agree to the sensitivity of each quantity, see the
    module docstring's Accuracy section).

    Parameters
    ----------
    y : (T, n) float array, rows oldest first (a 1-D array is one series); NaN marks missing rows
        (see the module docstring for how gaps are handled); inf is refused. Or a pandas/polars
        DataFrame: numeric columns are the series (named by their columns), a date column or
        DatetimeIndex dates the rows (never fitted), nulls are gaps.
    window : rows per window (rolling), or rows of the first window (expanding).
    lags : p >= 1, or None to choose p per window with `criterion` up to `max_lags`.
    horizon : H >= 1; connectedness uses the H-step decomposition (responses 0..H−1).
    step : spacing of the default window ends window−1, window−1+step, ...
    trend : "n", "c" or "ct" deterministic terms (the trend counts rows from 1 at each
        window's first row, as `fit_var` on the window's rows).
    expanding : windows grow from row 0 instead of rolling.
    ends : explicit window ends (row indices, strictly increasing), e.g. one block of a
        universe for one worker; overrides the grid. When the rows have dates, the ends may be
        given as dates instead (each must be a date of the data).
    after : keep only ends > after (the nightly update: cost is proportional to the new
        windows, not to the history — except expanding windows, whose sums run from row 0);
        a row index, or a date when the rows have dates (ends dated after it are kept).
    criterion : "aic" | "bic" | "hq" | "fpe" when lags is None. Orders 1..max_lags are compared
        on each window's common sample (its rows after the first max_lags), as `select_lags`
        does; order 0 is not a candidate (a VAR needs a lag).
    max_lags : P when selecting lags.
    granger : compute all pairwise Granger F tests.
    responses : None | "generalized" | "cholesky" | "unit" — store responses (W, H+1, n, n).
    decomposition : None | "generalized" | "cholesky" — store decompositions (W, H, n, n).
    portmanteau_lags : h > p to store the adjusted portmanteau p-value per window.
    names : n series names (default y0, y1, ...); not with a DataFrame (its columns name them).
    dates : (T,) dates of the rows of an array `y` (not with a DataFrame that has its own);
        the result's `dates` are then the window ends' dates.
    frequency_bands : None, or a partition of cycle lengths ((P_lo, P_hi], ...) as in
        `frequency_connectedness` — also store each window's band connectedness, computed from
        the window's coefficients and Σ̂_u with `band_truncation` MA terms.
    joint : also store each window's joint connectedness at `horizon` (`joint_connectedness`);
        with `frequency_bands`, also split by band (`joint_frequency_connectedness`).
    workers : threads that process chunks of windows side by side (default 1). numpy, BLAS and
        LAPACK release the interpreter lock in their loops, so threads gain when cores are free
        (the Python-level bookkeeping between calls still runs one thread at a time); every
        number is identical for any value. Keep BLAS itself single-threaded
        (e.g. OPENBLAS_NUM_THREADS=1) when using more than one.

    Returns
    -------
    RollingVAR (see its docstring for every array's shape).

    Raises
    ------
    InvalidInputError : bad shapes or options, inf in `y`, a window too short for the model,
        ends outside the data. Individual windows that cannot be fitted are skipped, not raised.
    """
    timer: Any = _timer if _timer is not None else _NoTimer()
    data, labels, row_dates = _as_data_with_gaps(y, names, dates)
    T, n = data.shape
    check_option(trend, "trend", TREND_TERMS)
    d = len(TREND_TERMS[trend])
    H = check_int(horizon, "horizon", minimum=1)
    stp = check_int(step, "step", minimum=1)
    win = check_int(window, "window", minimum=2)
    nw = check_int(workers, "workers", minimum=1)
    if frequency_bands is not None:  # refuse bad bands before any fitting
        check_bands(frequency_bands, "frequency_bands")
        check_int(band_truncation, "band_truncation", minimum=1)
    if lags is None:
        if criterion is None or max_lags is None:
            msg = (
                "`lags` is None, so lags are chosen per window: pass `criterion` (one of "
                f"{list(CRITERIA)!r}) and `max_lags`, or give `lags` as an integer"
            )
            raise InvalidInputError(msg)
        check_option(criterion, "criterion", CRITERIA)
        P = check_int(max_lags, "max_lags", minimum=1)
        what = "max_lags"
    else:
        P = check_int(lags, "lags", minimum=1, hint="a VAR needs at least one lag")
        if criterion is not None:
            msg = f"`criterion`={criterion!r} applies only with lags=None; drop it or set lags=None"
            raise InvalidInputError(msg)
        what = "lags"
    k_max = d + n * P
    need = minimum_window(n, P, trend)
    if win < need:
        msg = (
            f"`window`={win} leaves {win - P} observations for {k_max} coefficients per equation "
            f"({n} series × {what}={P} + {d} deterministic), fewer than the {k_max + n} needed "
            f"for a nonsingular {n}×{n} residual covariance; use window >= {need} or fewer "
            f"lags/series"
        )
        raise InvalidInputError(msg)
    if win > T:
        msg = f"`window`={win} is longer than the {T} rows of `y`; use window <= {T}"
        raise InvalidInputError(msg)
    if responses is not None:
        check_option(responses, "responses", RESPONSE_KINDS)
    if decomposition is not None:
        check_option(decomposition, "decomposition", DECOMPOSITION_KINDS)
    h_port = None
    if portmanteau_lags is not None:
        h_port = check_int(
            portmanteau_lags, "portmanteau_lags", minimum=P + 1,
            hint=f"the χ² degrees of freedom n²(h − p) need h > p = {P}",
        )  # fmt: skip
        if h_port >= win - P:
            msg = (
                f"`portmanteau_lags`={h_port} must be below the {win - P} residuals of a window; "
                "use a smaller value"
            )
            raise InvalidInputError(msg)
    end_rows = _window_ends(T, win, stp, *_dated_rows(ends, after, row_dates))
    starts = np.zeros_like(end_rows) if expanding else end_rows - win + 1
    W = end_rows.shape[0]

    finite = np.isfinite(data).all(axis=1)
    out = _Outputs(W, n, P, H, trend, bool(granger), responses, decomposition, h_port)
    out.names = labels  # series names used in skip reasons
    out.ends[:] = end_rows
    out.starts[:] = starts
    if lags is None:
        with timer("lag selection"):
            orders = _select_orders(
                data, finite, P, trend, end_rows, starts, str(criterion), out, bool(expanding),
                win, nw,
            )  # fmt: skip
    else:
        orders = np.full(W, P)
    out.lags[:] = np.maximum(orders, 0)
    for p in np.unique(orders[orders > 0]):
        idx = np.flatnonzero(orders == p)
        _fit_group(data, finite, int(p), trend, idx, out, bool(expanding), win, nw, timer)
    result = out.finish(labels, win, stp, trend, H, bool(expanding), criterion)
    if frequency_bands is not None or joint:
        with timer("extras"):
            result = _with_extras(result, frequency_bands, band_truncation, bool(joint))
    if row_dates is not None:
        end_dates = row_dates[result.ends]
        end_dates.flags.writeable = False
        result = dataclasses.replace(result, dates=end_dates)
    return result


def _with_extras(
    result: RollingVAR,
    bands: Sequence[tuple[float, float]] | None,
    truncation: int,
    joint: bool,
) -> RollingVAR:
    """`result` with band and joint connectedness of every fitted window (NaN where skipped).

    The same kernels as `frequency_connectedness` and `joint_connectedness` on each window's
    coefficients and Σ̂_u (zero coefficients beyond a window's own lag order change nothing),
    in chunks of windows whose MA terms and band tables stay near 32 MiB (`band_kernel`, the
    Toeplitz-projection form of `frequency_kernel`: the same numbers to rounding; it splits a chunk
    further into `BAND_CHUNK_BYTES` pieces, and a window's bits never depend on the chunking).
    """
    ok = np.asarray(result.ok, dtype=bool)
    k = np.flatnonzero(ok)
    W, n = ok.size, result.n
    coefs, sigma = np.asarray(result.coefs), np.asarray(result.sigma_u)
    extra: dict[str, Any] = {}
    if bands is not None:
        parts = check_bands(bands, "frequency_bands")
        H = check_int(truncation, "band_truncation", minimum=1)
        N = default_grid(H)
        weights = band_weights(parts, N)
        d = len(parts)
        tables = np.full((W, d, n, n), np.nan)
        joint_parts = np.full((W, d, n), np.nan) if joint else None
        variance = np.full((W, d, n), np.nan) if joint else None
        # per window: its MA terms a_h (H n² floats) and working copies, and its d band tables
        per = max(1, (32 * 2**20) // (8 * n * n * (2 * H + 3 * (H + 1) + d)))
        for lo in range(0, k.size, per):
            sel = k[lo : lo + per]
            if joint_parts is not None and variance is not None:
                # with J_i(d) and Γ_i(d) (`joint_frequency_connectedness`) from the same MA terms
                tables[sel], joint_parts[sel], variance[sel] = band_joint_kernel(
                    coefs[sel], sigma[sel], H, N, weights
                )
            else:
                tables[sel] = band_kernel(coefs[sel], sigma[sel], H, N, weights)
            tables[sel] *= 100.0
        if joint_parts is not None:
            joint_parts *= 100.0
            extra.update(joint_band_from_others=joint_parts, joint_band_total=joint_parts.mean(axis=-1),
                         joint_band_variance=variance)
        m = frequency_measures(tables)
        extra.update(
            band_periods=parts, band_truncation=H, band_tables=tables, band_total=m["total"],
            band_within=m["within_total"], band_share=m["band_share"],
            band_to_others=m["to_others"], band_from_others=m["from_others"],
        )  # fmt: skip
    if joint:
        shares = np.full((W, n), np.nan)
        if k.size:
            shares[k] = 100.0 * joint_kernel(coefs[k], sigma[k], result.horizon)
        extra.update(joint_from_others=shares, joint_total=shares.mean(axis=-1))
    readonly(*(v for v in extra.values() if isinstance(v, np.ndarray)))
    return dataclasses.replace(result, **extra)


# ---------------------------------------------------------------------------------------------
# validation helpers
# ---------------------------------------------------------------------------------------------


def _as_data_with_gaps(
    y: Any, names: Sequence[str] | None, dates: Any = None
) -> tuple[np.ndarray, tuple[str, ...], np.ndarray | None]:
    """(T, n) float64 copy, names and dates (None if unknown); NaN allowed (gaps), inf refused
    with its row and series. DataFrames are unwrapped as in `fit_var`."""
    return as_dated_data(y, names, dates, gaps=True)


def _dated_rows(ends: Any, after: Any, dates: np.ndarray | None) -> tuple[Any, Any]:
    """`ends` and `after` as row positions: dates are looked up in the rows' dates (every end
    must be one of them; `after` becomes the last row dated on or before it)."""
    rows = None if ends is None else date_rows(ends, dates, "ends")
    if rows is not None:
        ends = rows
    if after is not None and not isinstance(after, int | np.integer):
        try:
            when = np.datetime64(after)
        except (TypeError, ValueError):
            return ends, after  # refused with its message by `_window_ends`
        if dates is None:
            msg = (
                f"`after`={after!r} is a date, but the data has none; pass a DataFrame with a "
                "date column (or DatetimeIndex), or `dates=`, or give a row index"
            )
            raise InvalidInputError(msg)
        after = int(np.searchsorted(dates, when.astype(dates.dtype), side="right")) - 1
    return ends, after


def _window_ends(T: int, window: int, step: int, ends: Any, after: Any) -> np.ndarray:
    if ends is None:
        rows = np.arange(window - 1, T, step, dtype=np.int64)
    else:
        raw = np.asarray(ends)
        if raw.ndim != 1 or not (np.issubdtype(raw.dtype, np.integer) or raw.size == 0):
            msg = (
                f"`ends` must be a 1-D array of integer row indices (or of dates, when the rows "
                f"have dates), got dtype {raw.dtype} and shape {raw.shape}"
            )
            raise InvalidInputError(msg)
        rows = raw.astype(np.int64)
        if rows.size and (rows.min() < window - 1 or rows.max() > T - 1):
            bad = rows[(rows < window - 1) | (rows > T - 1)][0]
            msg = (
                f"`ends` contains row {int(bad)}, outside {window - 1}..{T - 1} (a window of "
                f"{window} rows must end at row >= {window - 1}, and `y` has {T} rows)"
            )
            raise InvalidInputError(msg)
        if rows.size > 1 and np.any(np.diff(rows) <= 0):
            msg = "`ends` must be strictly increasing; pass np.unique(ends)"
            raise InvalidInputError(msg)
    if after is not None:
        if isinstance(after, bool) or not isinstance(after, int | np.integer):
            msg = (
                f"`after` must be an integer row index (or a date, when the rows have dates), "
                f"got {after!r}"
            )
            raise InvalidInputError(msg)
        rows = rows[rows > after]
    return rows


# ---------------------------------------------------------------------------------------------
# output buffers
# ---------------------------------------------------------------------------------------------


class _Outputs:
    """Preallocated result arrays.

    Arrays every fitted window writes in full are left uninitialised (`finish` sets the rows
    of skipped windows to NaN): filling them with NaN first would be a second pass over the
    largest arrays of the run. The portmanteau p-values, which some fitted windows leave
    undefined (gaps), start as NaN.
    """

    def __init__(
        self, W: int, n: int, P: int, H: int, trend: str, granger: bool,
        responses: str | None, decomposition: str | None, h_port: int | None,
    ) -> None:  # fmt: skip
        terms = TREND_TERMS[trend]
        nan = np.nan
        self.n, self.P, self.H = n, P, H
        self.ends = np.zeros(W, dtype=np.int64)
        self.starts = np.zeros(W, dtype=np.int64)
        self.nobs = np.zeros(W, dtype=np.int64)
        self.lags = np.zeros(W, dtype=np.int64)
        self.coefs = np.empty((W, P, n, n))
        self.intercept = np.empty((W, n)) if "const" in terms else None
        self.trend_coef = np.empty((W, n)) if "trend" in terms else None
        self.sigma_u = np.empty((W, n, n))
        self.spectral_radius = np.empty(W)
        self.ic = {name: np.empty(W) for name in CRITERIA}
        self.condition_number = np.empty(W)
        self.total = np.empty(W)
        self.to_others = np.empty((W, n))
        self.from_others = np.empty((W, n))
        self.net = np.empty((W, n))
        self.pairwise = np.empty((W, n, n))
        self.granger_f = np.empty((W, n, n)) if granger else None
        self.granger_p = np.empty((W, n, n)) if granger else None
        self.granger_df = np.zeros((W, 2), dtype=np.int64) if granger else None
        self.response_kind = responses
        self.responses = np.empty((W, H + 1, n, n)) if responses else None
        self.decomposition_kind = decomposition
        self.decomposition = np.empty((W, H, n, n)) if decomposition else None
        self.h_port = h_port
        self.portmanteau_p = np.full(W, nan) if h_port is not None else None
        self.skip_reason = np.full(W, "", dtype=object)
        self.names: tuple[str, ...] = tuple(f"y{i}" for i in range(n))

    def skip(self, w: np.ndarray | int, reason: str) -> None:
        self.skip_reason[w] = reason

    def finish(
        self, names: tuple[str, ...], window: int, step: int, trend: str, horizon: int,
        expanding: bool, criterion: str | None,
    ) -> RollingVAR:  # fmt: skip
        ok = self.skip_reason == ""
        bad = ~ok
        for arr in (self.coefs, self.intercept, self.trend_coef, self.sigma_u,
                    self.spectral_radius, *self.ic.values(), self.condition_number, self.total,
                    self.to_others, self.from_others, self.net, self.pairwise, self.granger_f,
                    self.granger_p, self.responses, self.decomposition, self.portmanteau_p):  # fmt: skip
            if arr is not None:
                arr[bad] = np.nan
        arrays = dict(
            ends=self.ends, starts=self.starts, nobs=self.nobs, lags=self.lags, coefs=self.coefs,
            intercept=self.intercept, trend_coef=self.trend_coef, sigma_u=self.sigma_u,
            spectral_radius=self.spectral_radius, aic=self.ic["aic"], bic=self.ic["bic"],
            hq=self.ic["hq"], fpe=self.ic["fpe"], condition_number=self.condition_number,
            total_connectedness=self.total, to_others=self.to_others,
            from_others=self.from_others, net=self.net, pairwise=self.pairwise,
            granger_f=self.granger_f, granger_p=self.granger_p, granger_df=self.granger_df,
            responses=self.responses, decomposition=self.decomposition,
            portmanteau_p=self.portmanteau_p, skip_reason=self.skip_reason, ok=ok,
        )  # fmt: skip
        readonly(*arrays.values())
        return RollingVAR(
            **arrays, response_kind=self.response_kind,
            decomposition_kind=self.decomposition_kind, portmanteau_lags=self.h_port,
            names=names, window=window, step=step, trend=trend, horizon=horizon,
            expanding=expanding, criterion=criterion,
        )  # fmt: skip


# ---------------------------------------------------------------------------------------------
# working coordinates and cross-product sums, reproducible window by window
# ---------------------------------------------------------------------------------------------

#: `warnings.catch_warnings` edits process-wide state: one thread at a time (workers > 1).
_WARNINGS_LOCK = threading.Lock()

#: Rows per block of the running sums of expanding windows (blocks start at multiples of it).
EXPANDING_BLOCK = 256


@dataclass
class _Frames:
    """Working coordinates per window: y' = y − μ per series, trend τ' = (t − τ0) / τs.

    mu (W, n), tau0 (W,), tau_scale (W,) with τs a power of two. Windows whose cross-products
    are summed together share a frame, taken from rows that every one of them contains (see
    `_gram_chunks`), so a window's frame is a function of its own rows.
    """

    mu: np.ndarray
    tau0: np.ndarray
    tau_scale: np.ndarray

    def take(self, sel: Any) -> _Frames:
        return _Frames(self.mu[sel], self.tau0[sel], self.tau_scale[sel])


def _shift(data: np.ndarray, lo: int, hi: int, trend: str) -> np.ndarray:
    """μ (n,): mean of each series' finite values in rows lo..hi−1 (0 where there is none).
    Zero for trend "n": without an intercept a shift would change the model."""
    n = data.shape[1]
    if trend == "n":
        return np.zeros(n)
    rows = data[lo:hi]
    fin = np.isfinite(rows)
    count = fin.sum(axis=0)
    total = np.where(fin, rows, 0.0).sum(axis=0)
    return np.where(count > 0, total / np.maximum(count, 1), 0.0)


def _pow2(x: float) -> float:
    """The power of two nearest to x (>= 1); dividing by it is exact."""
    return float(2.0 ** round(np.log2(max(x, 1.0))))


def _design(
    data: np.ndarray, usable: np.ndarray, lo: int, hi: int, p: int, trend: str, mu: np.ndarray,
    tau0: float, tau_scale: float,
) -> np.ndarray:  # fmt: skip
    """(hi − lo, m) augmented rows z_t = [det_t, y_{t−1} − μ, ..., y_{t−p} − μ, y_t − μ] for
    rows t = lo..hi−1, det_t = [1, (t − τ0)/τs] as the trend asks; zero where t is not usable."""
    n = data.shape[1]
    terms = TREND_TERMS[trend]
    d = len(terms)
    R = hi - lo
    base = max(lo - p, 0)
    ys = np.full((R + p, n), np.nan)  # ys[i] = y_{lo−p+i} − μ
    ys[base - (lo - p) :] = data[base:hi] - mu
    z = np.empty((R, d + n * (p + 1)))
    for c, term in enumerate(terms):
        z[:, c] = 1.0 if term == "const" else (np.arange(lo, hi) - tau0) / tau_scale
    for lag in range(1, p + 1):
        z[:, d + (lag - 1) * n : d + lag * n] = ys[p - lag : p - lag + R]
    z[:, d + p * n :] = ys[p:]
    z[~usable[lo:hi]] = 0.0
    return z


def _group_chunks(group: np.ndarray, size: int, cap: int) -> list[np.ndarray]:
    """Consecutive positions cut into units of whole runs of one group (a group's rows are
    multiplied out once), as many runs per unit as fit in `size` windows (at least one); a run
    longer than `cap` windows is cut into pieces of at most `cap` (bounding the memory of its
    sums at the cost of summing some of its rows twice)."""
    W = group.shape[0]
    edges = np.flatnonzero(np.diff(group)) + 1
    out: list[np.ndarray] = []
    lo = 0
    for s, t in zip(np.concatenate([[0], edges]), np.concatenate([edges, [W]]), strict=True):
        if t - lo > size and s > lo:
            out.append(np.arange(lo, s))
            lo = int(s)
        if t - lo > cap:
            pieces = -(-(t - lo) // cap)
            out.extend(np.array_split(np.arange(lo, t), pieces))
            lo = int(t)
    if lo < W:
        out.append(np.arange(lo, W))
    return out


def _gram_chunks(
    data: np.ndarray, usable: np.ndarray, p: int, trend: str, first: np.ndarray,
    ends: np.ndarray, win: int, expanding: bool, size: int, timer: Any,
) -> Iterator[tuple[np.ndarray, Callable[[], tuple[np.ndarray, _Frames]]]]:  # fmt: skip
    """Yield (positions, make) for consecutive chunks of the windows (positions index `ends`);
    make() returns (G, frames): G (Wc, m, m) holds (at least the lower triangles of)
    Σ z_t z_t' over each window's observation rows first..end, in the window's frame. The make
    of a rolling chunk may run in any thread and order; an expanding chunk's G is computed as
    the generator reaches it (its sums continue the previous chunk's).

    Reproducibility: a window's G and frame depend on its own rows and a fixed grid only —
    never on which other windows are computed with it (`after=`, `ends=`, chunking) nor on rows
    outside it. Rolling windows have L = window − p observation rows; they are grouped by the
    block of L rows (blocks start at multiples of L from row 0) holding their first observation.
    Every window of block b contains the anchor row cut − 1 = (b + 1)·L − 1 and the p rows
    before it, so the group's shift μ is the mean of those p + 1 rows and its trend is centred
    at the anchor; sums run outwards from the anchor (`anchored_window_sums`). Expanding windows
    all contain rows 0..window−1, which give the shift; their sums run over fixed blocks of
    `EXPANDING_BLOCK` rows (`running_block_sums`).
    """
    n = data.shape[1]
    m = len(TREND_TERMS[trend]) + n * (p + 1)
    W = ends.shape[0]
    if expanding:
        mu = _shift(data, 0, win, trend)
        tau_s = _pow2(win)
        row0, carry = 0, np.zeros(m * (m + 1) // 2)
        for s in range(0, W, size):
            pos = np.arange(s, min(s + size, W))
            e = ends[pos]
            with timer("gram"):
                z = _design(data, usable, row0, int(e[-1]) + 1, p, trend, mu, 0.0, tau_s)
                G, row0, carry = K.running_block_sums(z, row0, e, EXPANDING_BLOCK, carry)
            frames = _Frames(
                np.tile(mu, (pos.size, 1)), np.zeros(pos.size), np.full(pos.size, tau_s)
            )
            yield pos, partial(_ready, G, frames)
        return
    L = win - p
    tau_s = _pow2(L / 2)
    group = first // L

    def make(pos: np.ndarray) -> tuple[np.ndarray, _Frames]:
        with timer("gram"):
            G = np.empty((pos.size, m, m))
            mu = np.empty((pos.size, n))
            tau0 = np.empty(pos.size)
            g = group[pos]
            edges = np.concatenate([[0], np.flatnonzero(np.diff(g)) + 1, [pos.size]])
            for s, t in pairwise(edges):
                cut = int(g[s] + 1) * L
                mu_b = _shift(data, cut - 1 - p, cut, trend)
                a = first[pos[s:t]]
                lo, hi = int(a[0]), int(a[-1]) + L
                z = _design(data, usable, lo, hi, p, trend, mu_b, cut - 1.0, tau_s)
                K.anchored_window_sums(z, a - lo, cut - lo, L, out=G[s:t])
                mu[s:t] = mu_b
                tau0[s:t] = cut - 1.0
        return G, _Frames(mu, tau0, np.full(pos.size, tau_s))

    cap = max(size, GRAM_BYTES // (8 * m * m))
    for pos in _group_chunks(group, size, cap):
        yield pos, partial(make, pos)


def _ready(G: np.ndarray, frames: _Frames) -> tuple[np.ndarray, _Frames]:
    return G, frames


def _run_chunks(
    chunks: Iterator[tuple[np.ndarray, Callable[[], tuple[np.ndarray, _Frames]]]],
    job: Callable[[np.ndarray, np.ndarray, _Frames], None],
    workers: int,
) -> None:
    """job(positions, G, frames) for every chunk, on `workers` threads (numpy and LAPACK release
    the GIL in their loops). Each chunk writes its own windows only, and a window's arithmetic
    does not depend on the thread or order, so results are identical for any `workers`. At most
    2·workers chunks are in flight, which bounds the extra memory."""
    if workers == 1:
        for pos, make in chunks:
            job(pos, *make())
        return

    def task(pos: np.ndarray, make: Callable[[], tuple[np.ndarray, _Frames]]) -> None:
        job(pos, *make())

    with ThreadPoolExecutor(max_workers=workers) as pool:
        pending: list[Future[None]] = []
        for pos, make in chunks:
            pending.append(pool.submit(task, pos, make))
            if len(pending) >= 2 * workers:
                pending.pop(0).result()
        for fut in pending:
            fut.result()


def _chunk_size(n: int, p: int, d: int, H: int, extra: int) -> int:
    m = d + n * (p + 1)
    per_window = 8 * (6 * m * m + 4 * (n * p) ** 2 + (H + 2) * n * n * (2 + extra))
    return int(np.clip(CHUNK_BYTES // per_window, 16, 1024))


# ---------------------------------------------------------------------------------------------
# fitting one group of windows with a common lag order
# ---------------------------------------------------------------------------------------------


def _fit_group(
    data: np.ndarray, finite: np.ndarray, p: int, trend: str, idx: np.ndarray,
    out: _Outputs, expanding: bool, win: int, workers: int, timer: Any,
) -> None:  # fmt: skip
    n = data.shape[1]
    d = len(TREND_TERMS[trend])
    usable = K.usable_observations(finite, p)
    cum = np.concatenate([[0], np.cumsum(usable)])
    ends = out.ends[idx]
    first = out.starts[idx] + p  # first observation row of each window
    out.nobs[idx] = cum[ends + 1] - cum[first]
    extra = (out.responses is not None) + (out.decomposition is not None)
    size = _chunk_size(n, p, d, out.H, extra)

    def job(pos: np.ndarray, G: np.ndarray, frames: _Frames) -> None:
        for s in range(0, pos.size, size):  # memory-bounded sub-chunks of one unit of sums
            part = slice(s, s + size)
            _fit_chunk(data, usable, p, trend, frames.take(part), idx[pos[part]], G[part], out,
                       timer)  # fmt: skip

    chunks = _gram_chunks(data, usable, p, trend, first, ends, win, expanding, size, timer)
    _run_chunks(chunks, job, workers)


def _fit_chunk(
    data: np.ndarray, usable: np.ndarray, p: int, trend: str, frames: _Frames,
    widx: np.ndarray, G: np.ndarray, out: _Outputs, timer: Any,
) -> None:  # fmt: skip
    n = data.shape[1]
    terms = TREND_TERMS[trend]
    d = len(terms)
    k = d + n * p
    nobs = out.nobs[widx]
    short = nobs < k + n
    for w in widx[short]:
        out.skip(
            w,
            f"{out.nobs[w]} usable observations after gaps, fewer than the {k + n} needed for "
            f"{k} coefficients per equation and a nonsingular residual covariance",
        )
    with timer("solve"):
        sol = K.solve_grams(G, k, k + n, int("const" in terms), factor=False)
        coef_t, sse, inv = sol["coef_t"], sol["sse"], sol["inv"]
        logdet, cond = sol["logdet_sse"], sol["cond"]
        direct = ~short & (
            ~sol["ok"]
            | (cond > FAST_COND_LIMIT)
            | (sol["cond_work"] > WORK_COND_LIMIT)
            | (sol["sse_cond"] > SSE_COND_LIMIT)
            | (sol["fit_cond"] > FIT_COND_LIMIT)
        )
        override: dict[int, dict[str, Any]] = {}
        for j in np.flatnonzero(direct):
            w = int(widx[j])
            try:
                res = _direct_window(
                    data, usable, p, trend, frames.take(j), out.starts[w], out.ends[w], out.names
                )
            except _Skip as exc:
                out.skip(w, str(exc))
                continue
            coef_t[j], sse[j], inv[j], logdet[j], cond[j] = (
                res["coef_t"], res["sse"], res["inv"], res["logdet_sse"], res["cond"],
            )  # fmt: skip
            override[int(j)] = res
        live = out.skip_reason[widx] == ""
        if not live.any():
            return
        if not live.all():  # keep skipped windows out of the batched arithmetic
            pos = np.cumsum(live) - 1
            override = {int(pos[j]): res for j, res in override.items()}
            coef_t, sse, inv = coef_t[live], sse[live], inv[live]
            logdet, cond, widx, nobs = logdet[live], cond[live], widx[live], nobs[live]
            frames = frames.take(live)
        # bulk writes go through a slice when the windows are contiguous (the usual case)
        ws: Any = (
            slice(int(widx[0]), int(widx[-1]) + 1) if widx[-1] - widx[0] == widx.size - 1 else widx
        )
        dof = (nobs - k).astype(np.float64)
        sigma = sse / dof[:, None, None]  # Σ̂_u (a shift leaves it unchanged)
        acat = coef_t[:, :, d:]  # (W, n, n·p) = [A_1 ... A_p]
        coefs = acat.reshape(-1, n, p, n).transpose(0, 2, 1, 3)
        out.coefs[ws, :p] = coefs
        out.coefs[ws, p:] = 0.0
        out.sigma_u[ws] = sigma
        _deterministic(coef_t, coefs, trend, frames, out, widx, override)
        logdet_ml = logdet - n * np.log(nobs)
        for name, val in K.information_criteria_batch(logdet_ml, nobs, n, k).items():
            out.ic[name][ws] = val
        out.condition_number[ws] = cond
    with timer("spectral radius"):
        rho, _ = K.spectral_radius_batch(K.balanced(acat, sigma, p), n, p, timer=timer)
        out.spectral_radius[ws] = rho
    with timer("connectedness"):
        _responses_and_decompositions(acat, sigma, out, ws)
    if out.granger_f is not None and out.granger_p is not None and out.granger_df is not None:
        with timer("granger"):
            F = K.granger_f(coef_t, inv, np.diagonal(sigma, axis1=1, axis2=2), n, p, d)
            for jj, res in override.items():  # refitted windows: fit_var's numbers and formula
                F[jj] = _granger_direct(res, sigma[jj], n, p, d)
            df2 = n * (nobs - k)
            out.granger_f[ws] = F
            out.granger_p[ws] = K.f_survival(F, p, df2[:, None, None])
            out.granger_df[ws, 0] = p
            out.granger_df[ws, 1] = df2
    if out.portmanteau_p is not None:
        with timer("portmanteau"):
            _portmanteau(data, p, trend, frames, coef_t, nobs, out, widx)


class _Skip(Exception):
    """A window that cannot be fitted; the message is its skip reason."""


def _direct_window(
    data: np.ndarray, usable: np.ndarray, p: int, trend: str, frame: _Frames, start: int,
    end: int, names: tuple[str, ...],
) -> dict[str, Any]:  # fmt: skip
    """Refit one window from its rows by QR, as `fit_var` would, in the window's frame.

    Raises _Skip with `fit_var`'s own message when it would refuse the rows (a constant series,
    collinear regressors, a singular residual covariance). Also returns the condition measure κ
    of `_rolling_kernels.solve_grams` from the QR factor of the centred, column-scaled
    regressors (accurate where the cross-products are not).
    """
    n = data.shape[1]
    rows = np.arange(start + p, end + 1)
    rows = rows[usable[rows]]
    Y = data[rows]
    span = np.ptp(data[start : end + 1][np.isfinite(data[start : end + 1]).all(axis=1)], axis=0)
    size = np.abs(Y).max(axis=0)
    flat = np.flatnonzero(span <= 1e-12 * size)
    if flat.size:
        msg = (
            f"series {names[int(flat[0])]!r} is constant in this window; a VAR needs series "
            "that vary"
        )
        raise _Skip(msg)
    # fit_var's own design (trend counts rows from 1 at the window's first row) and checks
    det = np.column_stack(
        [np.ones(rows.size) if t == "const" else (rows - start + 1.0) for t in TREND_TERMS[trend]]
    ) if TREND_TERMS[trend] else np.empty((rows.size, 0))  # fmt: skip
    Z = np.concatenate([det] + [data[rows - lag] for lag in range(1, p + 1)], axis=1)
    try:
        with _WARNINGS_LOCK, warnings.catch_warnings():
            warnings.simplefilter("ignore")
            B, gram_inv, U = _fit_least_squares(
                Z, Y, _regressor_names(names, p, trend), "y", const="const" in TREND_TERMS[trend]
            )
            _check_sigma(U.T @ U, Y, names, "y")
    except InvalidInputError as exc:
        raise _Skip(f"not fitted: {exc}".replace("`y` ", "the window ")) from None
    # the same fit in working coordinates (so the batched steps downstream apply unchanged)
    z = _design(
        data, usable, start + p, end + 1, p, trend, frame.mu, float(frame.tau0),
        float(frame.tau_scale),
    )[usable[start + p : end + 1]]  # fmt: skip
    k = z.shape[1] - n
    Zs, Ys = z[:, :k], z[:, k:]
    col = np.sqrt((Zs * Zs).sum(axis=0))
    col[col == 0] = 1.0
    Q, R = np.linalg.qr(Zs / col)
    Rinv = np.linalg.solve(R, np.eye(k)) / col[:, None]  # (Z'Z)^{-1} = Rinv Rinv'
    Bs = Rinv @ (Q.T @ Ys)
    d = len(TREND_TERMS[trend])
    Bs[d:] = B[d:]  # lag coefficients and residuals as `fit_var` computes them (frame-free)
    sse = U.T @ U
    _, logdet = np.linalg.slogdet(sse)
    c = int("const" in TREND_TERMS[trend])
    X = Zs[:, c:] - Zs[:, c:].mean(axis=0) if c else Zs
    norm = np.sqrt((X * X).sum(axis=0))
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        Rc = np.linalg.qr(X / norm, mode="r")
        Rc_inv = linalg.solve_triangular(Rc, np.eye(k - c))
        cond = float((k - c) * (Rc_inv * Rc_inv).sum())  # trace(R) trace(R^{-1}), R = corr.
    if not np.isfinite(cond) or not np.all(norm > 0):
        cond = np.inf
    return {
        "coef_t": Bs.T, "sse": sse, "inv": Rinv.T, "logdet_sse": logdet, "params": B,
        "gram_inv": gram_inv,
        "cond": cond,
    }  # fmt: skip


def _granger_direct(res: dict[str, Any], sigma: np.ndarray, n: int, p: int, d: int) -> np.ndarray:
    """F statistics (n, n) of one refitted window by `granger_test`'s own arithmetic (from the
    window's `fit_var` estimates), so they agree with it however ill-conditioned the window."""
    F = np.full((n, n), np.nan)
    for i in range(n):
        for j in range(n):
            if i != j:
                wald, J = wald_statistic(res["params"], res["gram_inv"], sigma, n, p, d, [i], [j])
                F[i, j] = wald / J
    return F


def _deterministic(
    coef_t: np.ndarray, coefs: np.ndarray, trend: str, frames: _Frames, out: _Outputs,
    widx: np.ndarray, override: dict[int, dict[str, Any]],
) -> None:  # fmt: skip
    """Intercept and trend slope of each window in the original coordinates.

    Working model y_t − μ = a' + b'τ'_t + Σ A_l (y_{t−l} − μ), τ' = (t − τ0)/τs; with the
    window trend τ_t = t − start + 1 this is y_t = c + δ τ_t + Σ A_l y_{t−l} with δ = b'/τs and
    c = μ + a' − (Σ_l A_l) μ + δ (start − 1 − τ0).
    """
    terms = TREND_TERMS[trend]
    if not terms:
        return
    mu = frames.mu
    lags = coefs.shape[1]
    # (Σ_l A_l) μ = [A_1 ... A_p] [μ; ...; μ], one product per window
    c = (
        mu
        + coef_t[:, :, 0]
        - (coef_t[:, :, len(terms) :] @ np.tile(mu, (1, lags))[:, :, None])[:, :, 0]
    )
    if "trend" in terms and out.trend_coef is not None:
        delta = coef_t[:, :, 1] / frames.tau_scale[:, None]
        start = out.starts[widx].astype(np.float64)
        c = c + delta * (start - 1.0 - frames.tau0)[:, None]
        out.trend_coef[widx] = delta
    assert out.intercept is not None
    out.intercept[widx] = c
    for j, res in override.items():  # windows refitted directly: take fit_var's numbers as is
        out.intercept[widx[j]] = res["params"][0]
        if out.trend_coef is not None:
            out.trend_coef[widx[j]] = res["params"][1]


def _responses_and_decompositions(
    acat: np.ndarray, sigma: np.ndarray, out: _Outputs, widx: Any
) -> None:
    """Connectedness (always) and stored responses / decompositions, in one MA recursion.

    Ψ_h = Φ_h Σ (generalized, unnormalised) drives the connectedness table: the generalized
    share is σ_jj^{-1} Σ_{h<H} Ψ_h,ij², normalised by its row sum (the Pesaran–Shin denominator
    cancels in the row normalisation). Other identifications add columns to the same recursion.
    """
    n, H = out.n, out.H
    W = acat.shape[0]
    rk, dk = out.response_kind, out.decomposition_kind
    impacts = [sigma]  # generalized (unnormalised) always: connectedness
    if "cholesky" in (rk, dk):
        chol = np.linalg.cholesky(sigma)
        impacts.append(chol)
    if rk == "unit":
        impacts.append(np.broadcast_to(np.eye(n), (W, n, n)))
    steps = H if rk is not None else H - 1
    x0 = np.concatenate(impacts, axis=-1)
    X = K.propagate(acat, x0, steps)  # (W, steps+1, n, c·n)
    var = np.diagonal(sigma, axis1=1, axis2=2)  # σ_jj
    psi = X[:, :H, :, :n]  # Φ_h Σ for h < H; ψ_ij(h)² = (Φ_h Σ)_ij² / σ_jj
    share = np.einsum("whij,whij->wij", psi, psi)
    share /= var[:, None, :]  # Σ_{h<H} ψ_ij(h)²
    # table = 100 share / (row sums), written in place into the result when the windows are
    # one contiguous block (the usual case)
    table = out.pairwise[widx] if isinstance(widx, slice) else np.empty_like(share)
    np.divide(share, share.sum(axis=-1, keepdims=True), out=table)
    table *= 100.0
    diag = np.diagonal(table, axis1=1, axis2=2)
    from_others = table.sum(axis=-1) - diag
    to_others = table.sum(axis=-2) - diag
    if not isinstance(widx, slice):
        out.pairwise[widx] = table
    out.from_others[widx] = from_others
    out.to_others[widx] = to_others
    out.net[widx] = to_others - from_others
    out.total[widx] = from_others.sum(axis=-1) / n
    if dk == "generalized" and out.decomposition is not None:
        sq = np.cumsum(psi * psi, axis=1) / var[:, None, None, :]  # Σ_{h<s} ψ_ij(h)²
        out.decomposition[widx] = sq / sq.sum(axis=-1, keepdims=True)
    elif dk == "cholesky" and out.decomposition is not None:
        th = X[:, :H, :, n : 2 * n]
        acc = (th * th).cumsum(axis=1)
        out.decomposition[widx] = acc / acc.sum(axis=-1, keepdims=True)
    if rk is not None and out.responses is not None:
        col = {"generalized": 0, "cholesky": 1, "unit": len(impacts) - 1}[rk]
        resp = X[..., col * n : (col + 1) * n]
        if rk == "generalized":
            resp = resp / np.sqrt(var)[:, None, None, :]
        out.responses[widx] = resp


def _portmanteau(
    data: np.ndarray, p: int, trend: str, frames: _Frames, coef_t: np.ndarray,
    nobs: np.ndarray, out: _Outputs, widx: np.ndarray,
) -> None:  # fmt: skip
    """Adjusted portmanteau p-value per window from its residuals (Lütkepohl 2005, eq. 4.4.24).

    Q̄_h = T² Σ_{i=1}^{h} (T − i)^{-1} tr(Ĉ_i' Ĉ_0^{-1} Ĉ_i Ĉ_0^{-1}), Ĉ_i = T^{-1} Σ û_t û_{t−i}',
    ≈ χ²(n²(h − p)). Residuals are formed in each window's own frame.
    """
    n = data.shape[1]
    if out.h_port is None or out.portmanteau_p is None:  # the test was not asked for
        return
    h = int(out.h_port)
    terms = TREND_TERMS[trend]
    d = len(terms)
    span = out.ends[widx] - out.starts[widx] + 1 - p
    full = (nobs == span) & (out.skip_reason[widx] == "")
    df = n * n * (h - p)
    for T in np.unique(span[full]):  # one batch per residual length (one for rolling windows)
        sel = np.flatnonzero(full & (span == T))
        first = out.starts[widx[sel]] + p
        fr = frames.take(sel)
        rows = first[:, None] + np.arange(-p, T)[None, :]  # (Wg, T + p) window rows
        yw = data[rows] - fr.mu[:, None, :]
        zx = np.empty((sel.size, T, d + n * p))
        for c, term in enumerate(terms):
            zx[:, :, c] = 1.0 if term == "const" else (
                (rows[:, p:] - fr.tau0[:, None]) / fr.tau_scale[:, None]
            )  # fmt: skip
        for lag in range(1, p + 1):
            zx[:, :, d + (lag - 1) * n : d + lag * n] = yw[:, p - lag : p - lag + T]
        u = yw[:, p:] - zx @ np.swapaxes(coef_t[sel], 1, 2)  # residuals (Wg, T, n)
        c0 = np.swapaxes(u, 1, 2) @ u / T
        c0_inv = np.linalg.inv(c0)
        stat = np.zeros(sel.size)
        for i in range(1, h + 1):
            ci = np.swapaxes(u[:, i:], 1, 2) @ u[:, :-i] / T  # Ĉ_i = T^{-1} Σ_t û_t û_{t−i}'
            # tr(Ĉ_i' Ĉ_0^{-1} Ĉ_i Ĉ_0^{-1}) = Σ (Ĉ_0^{-1} Ĉ_i) ⊙ (Ĉ_i Ĉ_0^{-1})
            a, b = c0_inv @ ci, ci @ c0_inv
            stat += np.einsum("wij,wij->w", a, b) / (T - i)
        out.portmanteau_p[widx[sel]] = stats.chi2.sf(T * T * stat, df)


# ---------------------------------------------------------------------------------------------
# lag selection per window
# ---------------------------------------------------------------------------------------------


def _select_orders(
    data: np.ndarray, finite: np.ndarray, P: int, trend: str, ends: np.ndarray,
    starts: np.ndarray, criterion: str, out: _Outputs, expanding: bool, win: int, workers: int,
) -> np.ndarray:  # fmt: skip
    """Chosen p in 1..P per window (0 where skipped), comparing orders on the common sample.

    One Cholesky factor of the P-lag augmented cross-products gives every nested order's
    residual cross-products (`nested_sse`); criteria as `select_lags` (same sample, T − P).
    """
    n = data.shape[1]
    terms = TREND_TERMS[trend]
    d = len(terms)
    Kp = d + n * P
    usable = K.usable_observations(finite, P)
    cum = np.concatenate([[0], np.cumsum(usable)])
    first = starts + P
    nobs = cum[ends + 1] - cum[first]
    orders = np.zeros(ends.shape[0], dtype=np.int64)
    size = _chunk_size(n, P, d, 1, 0)

    def job(pos: np.ndarray, G: np.ndarray, frames: _Frames) -> None:
        for s in range(0, pos.size, size):  # memory-bounded sub-chunks of one unit of sums
            select(pos[s : s + size], G[s : s + size])

    def select(chunk: np.ndarray, G: np.ndarray) -> None:
        sol = K.solve_grams(G, Kp, Kp + n, int("const" in terms), factor=False)
        T_eff = nobs[chunk].astype(np.float64)
        sse = K.nested_sse(sol["L21"], sol["L22"], [d + n * q for q in range(1, P + 1)])
        crit = np.empty((len(chunk), P))
        for q in range(1, P + 1):
            with np.errstate(invalid="ignore", divide="ignore"):
                sign, ld = np.linalg.slogdet(sse[q - 1] / T_eff[:, None, None])
            ld[sign <= 0] = np.nan
            crit[:, q - 1] = K.information_criteria_batch(ld, T_eff, n, d + n * q)[criterion]
        fast = (
            sol["ok"]
            & np.isfinite(crit).all(axis=1)
            & (sol["cond"] <= FAST_COND_LIMIT)
            & (sol["cond_work"] <= WORK_COND_LIMIT)
            & (sol["sse_cond"] <= SSE_COND_LIMIT)
            & (sol["fit_cond"] <= FIT_COND_LIMIT)
        )
        for j in range(len(chunk)):
            w = chunk[j]
            if nobs[w] < Kp + n:
                out.skip(
                    w,
                    f"{nobs[w]} usable observations for lag selection, fewer than the {Kp + n} "
                    f"needed with max_lags={P}",
                )
                continue
            if fast[j]:
                orders[w] = int(np.argmin(crit[j])) + 1
                continue
            if nobs[w] != ends[w] - starts[w] + 1 - P:
                out.skip(
                    w, "lag selection failed: ill-conditioned regressors in a window with gaps"
                )
                continue
            try:
                with _WARNINGS_LOCK, warnings.catch_warnings():
                    warnings.simplefilter("ignore")
                    sel = select_lags(
                        data[starts[w] : ends[w] + 1], P, trend=trend, names=out.names
                    )
            except InvalidInputError as exc:
                out.skip(w, f"lag selection failed: {exc}".replace("`y` ", "the window "))
                continue
            orders[w] = int(np.argmin(getattr(sel, criterion)[1:])) + 1

    chunks = _gram_chunks(data, usable, P, trend, first, ends, win, expanding, size, _NoTimer())
    _run_chunks(chunks, job, workers)
    return orders
