"""Fit stage: which windows to (re)fit, the rolling engine call, and the result tables.

Window grid (rows of the prepared matrix y, 0-based): window ends are
``window − 1, window − 1 + step, window − 1 + 2·step, …`` up to the last row; a rolling window ending
at row e spans rows ``e − window + 1 … e`` (presample lags included), an expanding one rows ``0 … e``.
The grid is anchored at the first row, so appending rows never moves an existing window end; with
step > 1 a new window appears every `step`-th new row.

Incremental rule (:func:`plan_windows`). A stored window is reused when the universe's config hash
is unchanged, and the window's (start date, end date) and every prepared value inside that span are
unchanged. Everything else is (re)fitted: new window ends, windows whose span holds a changed, added
or removed date (a revision, a late observation, a changed fill), and every window after a config
change or with ``full=True``. Stored windows whose end is no longer on the grid are deleted.

Tables (:func:`result_tables`) follow docs/warehouse.md; arrays are flattened in C order.
"""

from __future__ import annotations

import hashlib
import logging
import subprocess
from dataclasses import dataclass, field
from datetime import date
from functools import cache
from pathlib import Path
from types import SimpleNamespace
from typing import TYPE_CHECKING, Any

import numpy as np
import polars as pl

from pipeline._fill import declared_tables, list_column
from pipeline._reasons import name_series
from pipeline.errors import FitError

if TYPE_CHECKING:
    from pipeline.config import UniverseConfig
    from pipeline.prepare import Prepared

__all__ = [
    "StoredFilter",
    "StoredState",
    "TVPBlock",
    "WindowPlan",
    "code_version",
    "data_fingerprint",
    "fit_block",
    "latest_window_bands",
    "plan_tvp",
    "plan_windows",
    "quantile_fit",
    "quantile_tables",
    "result_tables",
    "tvp_filter",
    "tvp_tables",
    "tvp_training",
    "window_grid",
]

log = logging.getLogger("shockflow.fit")


@cache
def code_version() -> str:
    """Package version plus the git commit when run from a checkout, e.g. '0.1.0+g1a2b3c4'."""
    try:
        from importlib.metadata import version

        v = version("shockflow")
    except Exception:
        v = "0.1.0"
    root = Path(__file__).resolve().parents[1]
    if (root / ".git").exists():
        try:
            out = subprocess.run(
                ["git", "-C", str(root), "rev-parse", "--short", "HEAD"],
                capture_output=True, text=True, timeout=5, check=False,
            )
            if out.returncode == 0 and out.stdout.strip():
                v += "+g" + out.stdout.strip()
        except (OSError, subprocess.SubprocessError):
            pass
    return v


def data_fingerprint(prepared: Prepared) -> str:
    """sha256 (16 hex digits) of the prepared dates and values (NaN gaps included)."""
    h = hashlib.sha256()
    h.update(",".join(prepared.names).encode())
    h.update(np.asarray([d.toordinal() for d in prepared.dates], dtype=np.int64).tobytes())
    h.update(np.ascontiguousarray(prepared.y, dtype=np.float64).tobytes())
    return h.hexdigest()[:16]


def window_grid(T: int, universe: UniverseConfig) -> tuple[np.ndarray, np.ndarray]:
    """Window (ends, starts) as row indexes, shape (W,) each, for T prepared rows."""
    window = universe.window_rows
    ends = np.arange(window - 1, T, universe.step, dtype=np.int64)
    starts = np.zeros_like(ends) if universe.expanding else ends - window + 1
    return ends, starts


@dataclass(frozen=True)
class StoredFilter:
    """A tvp universe's stored filter: the arlib TVPState after its last date, and its dates."""

    state: Any  # arlib.TVPState
    last: date  # the date of the state's last row (the newest stored result)
    first: date  # the first filtered date (every stored date's window_start)


@dataclass(frozen=True)
class StoredState:
    """What the warehouse holds for a universe from its previous successful runs."""

    config_hash: str | None
    windows: pl.DataFrame  # window_end: Date, window_start: Date
    prepared: pl.DataFrame  # date: Date, series: str, value: f64 (null for gap rows)
    tvp: StoredFilter | None = None  # the filter state of a tvp universe


@dataclass(frozen=True)
class WindowPlan:
    """Which windows to fit and which stored windows to delete.

    ends: (W,) row indexes of the windows to fit, ascending. delete_ends: stored window ends to
    delete before inserting (refits and stale ends), or None to delete every window of the
    universe (full refit). prepared_changed: whether the stored prepared data must be updated;
    prepared_dates: the dates whose prepared rows changed, appeared or disappeared (None = replace
    the universe's prepared rows whole).
    """

    ends: np.ndarray
    delete_ends: list[date] | None
    prepared_changed: bool
    reason: str
    candidates: int = 0
    reused: int = 0
    notes: list[str] = field(default_factory=list)
    prepared_dates: list[date] | None = None

    @property
    def is_noop(self) -> bool:
        return self.ends.size == 0 and not self.prepared_changed and self.delete_ends == []


def _grid(frame: pl.DataFrame, names: tuple[str, ...]) -> tuple[np.ndarray, np.ndarray] | None:
    """Long rows (date, series, value) sorted by (date, series) as (dates (D,) datetime64[D],
    values (D, n) in `names` order, NaN for null), or None unless every date holds exactly one
    row of each of `names`."""
    n = len(names)
    if n == 0 or frame.height % n:
        return None
    order = sorted(names)
    try:  # series as positions in `order` (a name outside it raises)
        codes = frame["series"].cast(pl.Enum(order)).to_physical().to_numpy()
    except pl.exceptions.PolarsError:
        return None
    if not np.array_equal(codes, np.tile(np.arange(n, dtype=codes.dtype), frame.height // n)):
        return None
    dates = frame["date"].to_numpy().astype("datetime64[D]").reshape(-1, n)
    if not (dates == dates[:, :1]).all() or (dates.shape[0] > 1 and not (np.diff(dates[:, 0]) > np.timedelta64(0, "D")).all()):
        return None
    values = frame["value"].cast(pl.Float64).to_numpy().reshape(-1, n)
    return dates[:, 0], values[:, [order.index(name) for name in names]]


def _changed_dates_of(prepared: Prepared, old: pl.DataFrame) -> tuple[set[date], set[date]]:
    """`_changed_dates(prepared.frame, old)` without the long frame and the join: both sides as
    (dates × series) matrices compared element by element (null = NaN on both sides; the stored
    rows never hold NaN, as `Prepared.frame` turns it into null). Falls back to the join when
    the stored rows are not such a grid."""
    grid = _grid(old, prepared.names)
    if grid is None:
        return _changed_dates(prepared.frame, old)
    old_dates, old_y = grid
    new_dates = prepared.days
    y = np.asarray(prepared.y, dtype=np.float64)
    pos = np.searchsorted(old_dates, new_dates)
    pos_ok = np.minimum(pos, max(old_dates.size - 1, 0))
    found = (pos < old_dates.size) & (old_dates[pos_ok] == new_dates) if old_dates.size else np.zeros(new_dates.size, bool)
    same = np.zeros(new_dates.size, dtype=bool)
    if found.any():
        a, b = y[found], old_y[pos_ok[found]]
        same[found] = ((a == b) | (np.isnan(a) & np.isnan(b))).all(axis=1)
    changed = {d for d, keep in zip(prepared.dates, same.tolist(), strict=True) if not keep}
    removed_mask = ~np.isin(old_dates, new_dates)
    removed = {d.item() for d in old_dates[removed_mask]}
    return changed, removed


def _changed_dates(new: pl.DataFrame, old: pl.DataFrame) -> tuple[set[date], set[date]]:
    """(dates of `new` with a row that differs from `old` or is new there, dates only in `old`)."""
    joined = new.with_columns(pl.lit(True).alias("_new")).join(
        old.with_columns(pl.lit(True).alias("_old")),
        on=["date", "series"],
        how="full",
        suffix="_old",
        coalesce=True,
    )
    differs = joined.filter(
        pl.col("_new").is_null()
        | pl.col("_old").is_null()
        | ~pl.col("value").eq_missing(pl.col("value_old"))
    )
    new_dates = set(new["date"].unique().to_list())
    changed = {d for d in differs["date"].unique().to_list() if d in new_dates}
    removed = set(old["date"].unique().to_list()) - new_dates
    return changed, removed


def plan_windows(
    prepared: Prepared, universe: UniverseConfig, *, stored: StoredState | None, full: bool = False
) -> WindowPlan:
    """Decide which window ends to fit (see the module docstring for the rule)."""
    T = len(prepared.dates)
    ends, starts = window_grid(T, universe)
    notes: list[str] = []
    if ends.size == 0:
        notes.append(
            f"only {T} prepared rows, fewer than window = {universe.window}: no window to fit yet"
        )
    if full or stored is None or stored.config_hash is None or stored.config_hash != universe.config_hash:
        if full:
            reason = "full refit requested"
        elif stored is None or stored.config_hash is None:
            reason = "first run"
        else:
            reason = "config changed: refitting every window"
        return WindowPlan(ends=ends, delete_ends=None, prepared_changed=True, reason=reason, candidates=int(ends.size), notes=notes)

    changed, removed = _changed_dates_of(prepared, stored.prepared)
    dates = prepared.days
    changed_mask = np.isin(dates, np.asarray(sorted(changed), dtype="datetime64[D]")) if changed else np.zeros(T, bool)
    cs = np.concatenate([[0], np.cumsum(changed_mask)])
    # removed date r lies between rows pos-1 and pos; a window [s, e] spans it iff s < pos <= e
    boundary = np.zeros(T + 1, dtype=np.int64)
    for r in removed:
        pos = int(np.searchsorted(dates, np.datetime64(r, "D")))
        boundary[pos] += 1
    cb = np.cumsum(boundary)

    stored_ends = stored.windows["window_end"].to_numpy().astype("datetime64[D]")
    stored_starts = stored.windows["window_start"].to_numpy().astype("datetime64[D]")
    by_end = np.argsort(stored_ends, kind="stable")
    stored_ends, stored_starts = stored_ends[by_end], stored_starts[by_end]
    # a window is reused when its end is stored with the same start and no changed or removed date
    # lies in its span; every other window on the grid is (re)fitted
    end_d, start_d = dates[ends], dates[starts]
    at = np.searchsorted(stored_ends, end_d)
    at_ok = np.minimum(at, max(stored_ends.size - 1, 0))
    known = (at < stored_ends.size) & (stored_ends[at_ok] == end_d) if stored_ends.size else np.zeros(ends.size, bool)
    same_start = known & (stored_starts[at_ok] == start_d) if stored_ends.size else known
    touched = (cs[ends + 1] - cs[starts] > 0) | (cb[ends] - cb[starts] > 0)
    refit = ~same_start | touched
    stored_map: dict[date, date] = dict(zip(stored.windows["window_end"].to_list(), stored.windows["window_start"].to_list(), strict=True))
    grid_ends = {prepared.dates[e] for e in ends.tolist()}
    stale = sorted(d for d in stored_map if d not in grid_ends)
    fit_ends = ends[refit]
    fit_dates = [prepared.dates[e] for e in fit_ends.tolist()]
    delete = sorted(set(stale) | {d for d in fit_dates if d in stored_map})
    prepared_changed = bool(changed or removed)
    new_count = sum(1 for d in fit_dates if d not in stored_map)
    refit_count = len(fit_dates) - new_count
    parts = []
    if new_count:
        parts.append(f"{new_count} new window(s)")
    if refit_count:
        parts.append(f"{refit_count} window(s) refitted after data changes")
    if stale:
        parts.append(f"{len(stale)} stale window(s) deleted")
    reason = ", ".join(parts) if parts else "nothing changed"
    return WindowPlan(
        ends=fit_ends,
        delete_ends=delete,
        prepared_changed=prepared_changed,
        prepared_dates=sorted(changed | removed),
        reason=reason,
        candidates=int(ends.size),
        reused=int(ends.size - fit_ends.size),
        notes=notes,
    )


def fit_block(prepared: Prepared, universe: UniverseConfig, ends: np.ndarray) -> Any:
    """Run arlib's rolling engine on the window ends `ends` (row indexes) of `prepared`.

    Returns the engine's RollingVAR. Windows the engine cannot fit (singular, too few usable rows)
    come back marked with a skip reason; anything else raised is a FitError for the universe.
    """
    import arlib

    sel = universe.lag_selection
    if universe.estimator == "shrinkage":
        try:
            return arlib.rolling_shrinkage(
                prepared.y,
                universe.window_rows,
                universe.max_lag,
                universe.horizon,
                step=universe.step,
                ends=np.asarray(ends, dtype=np.int64),
                tightness=universe.shrinkage.tightness,
                prior_mean=list(universe.prior_means),
                lag_decay=universe.shrinkage.lag_decay,
                trend=universe.trend,
                responses=universe.identification,
                decomposition=universe.identification,
                names=list(prepared.names),
                frequency_bands=universe.band_periods,
                band_truncation=universe.band_truncation,
                joint=universe.joint,
            )
        except (ValueError, np.linalg.LinAlgError) as exc:
            msg = f"universe {universe.name!r}: the shrinkage engine refused the data: {' '.join(str(exc).split())}"
            raise FitError(msg) from exc
    try:
        return arlib.rolling_var(
            prepared.y,
            universe.window_rows,
            None if sel is not None else universe.lags,
            universe.horizon,
            step=universe.step,
            trend=universe.trend,
            expanding=universe.expanding,
            ends=np.asarray(ends, dtype=np.int64),
            criterion=sel.criterion if sel is not None else None,
            max_lags=sel.max_lags if sel is not None else None,
            granger=True,
            responses=universe.identification,
            decomposition=universe.identification,
            portmanteau_lags=universe.residual_test_lags,
            names=list(prepared.names),
            frequency_bands=universe.band_periods,
            band_truncation=universe.band_truncation,
            joint=universe.joint,
        )
    except (ValueError, np.linalg.LinAlgError) as exc:
        msg = f"universe {universe.name!r}: the rolling engine refused the data: {' '.join(str(exc).split())}"
        raise FitError(msg) from exc


# ------------------------------------------------------------------------------------------
# estimator = "quantile": quantile regression per equation at each τ (arlib.rolling_quantile_var)
# ------------------------------------------------------------------------------------------
# The same window grid, plan and incremental rule as least squares. Each window is fitted at every
# τ of [universes.quantile]; the τ nearest 0.5 (`UniverseConfig.central_quantile`) fills the
# one-fit-per-window tables (window_fits, connectedness, directional, pairwise, window_params), so
# every tab shows that fit, and `quantile_connectedness` holds every τ. No Granger tests (they are
# least-squares F tests), no stored responses or decompositions (derived from window_params), no
# response bands.


def quantile_fit(prepared: Prepared, universe: UniverseConfig, ends: np.ndarray) -> Any:
    """arlib.rolling_quantile_var on the window ends `ends`; a refusal is a FitError."""
    import arlib

    assert universe.lags is not None  # the loader requires fixed lags for quantile universes
    try:
        return arlib.rolling_quantile_var(
            prepared.y, universe.window_rows, universe.lags, universe.horizon,
            quantiles=universe.quantile.quantiles, step=universe.step, trend=universe.trend,
            ends=np.asarray(ends, dtype=np.int64), names=list(prepared.names),
        )  # fmt: skip
    except (ValueError, np.linalg.LinAlgError) as exc:
        msg = f"universe {universe.name!r}: the quantile engine refused the data: {' '.join(str(exc).split())}"
        raise FitError(msg) from exc


def quantile_tables(result: Any, prepared: Prepared, universe: UniverseConfig, *, run_id: str) -> dict[str, pl.DataFrame]:
    """The quantile fits as the warehouse's tables: the central τ in the per-window tables a
    least-squares universe writes (no Granger tests, criteria or arrays), every τ in
    `quantile_connectedness`."""
    from types import SimpleNamespace

    taus = [float(t) for t in result.quantiles]
    c = taus.index(universe.central_quantile)
    W = len(result)
    nan = np.full(W, np.nan)
    view = SimpleNamespace(
        ends=result.ends, starts=result.starts, ok=result.ok, spectral_radius=result.spectral_radius[c],
        skip_reason=result.skip_reason, portmanteau_p=None, nobs=result.nobs, lags=np.full(W, result.lags),
        aic=nan, bic=nan, hq=nan, fpe=nan, condition_number=nan,
        total_connectedness=result.total_connectedness[c], to_others=result.to_others[c],
        from_others=result.from_others[c], net=result.net[c], pairwise=result.pairwise[c], granger_f=None,
        coefs=result.coefs[c], intercept=None if result.intercept is None else result.intercept[c],
        trend_coef=None, sigma_u=result.sigma_u[c], responses=None, decomposition=None,
    )  # fmt: skip
    tables = result_tables(view, prepared, universe, run_id=run_id)
    k = np.flatnonzero(np.asarray(result.ok, dtype=bool))
    K, Q = k.size, len(taus)
    dates = np.asarray(prepared.dates, dtype="datetime64[D]")
    ends = np.repeat(dates[np.asarray(result.ends)[k]], Q)
    wq = (np.repeat(k, Q), np.tile(np.arange(Q), K))  # rows: window-major, then τ

    def pick(a: np.ndarray) -> np.ndarray:
        return np.asarray(a).swapaxes(0, 1)[wq]

    intercept = (
        list_column(pick(result.intercept)) if result.intercept is not None else pl.Series([None] * (K * Q), dtype=pl.List(pl.Float64))
    )
    tables["quantile_connectedness"] = pl.DataFrame(
        {
            "run_id": [run_id] * (K * Q), "universe": [universe.name] * (K * Q),
            "window_end": pl.Series("window_end", ends).cast(pl.Date),
            "quantile": np.tile(np.asarray(taus), K), "total": pick(result.total_connectedness),
            "to_others": list_column(pick(result.to_others)), "from_others": list_column(pick(result.from_others)),
            "net": list_column(pick(result.net)), "shares": list_column(pick(result.pairwise)),
            "spectral_radius": _none_if_nan(pick(result.spectral_radius)),
            "lags": pl.Series([int(result.lags)] * (K * Q), dtype=pl.Int32),
            "coefs": list_column(pick(result.coefs)), "intercept": intercept, "sigma_u": list_column(pick(result.sigma_u)),
        }
    )  # fmt: skip
    return tables


def _none_if_nan(a: np.ndarray) -> pl.Series:
    return pl.Series(np.asarray(a, dtype=np.float64)).fill_nan(None)


def result_tables(
    rolling: Any,
    prepared: Prepared,
    universe: UniverseConfig,
    *,
    run_id: str,
    bands: tuple[np.ndarray, np.ndarray, float] | None = None,
    last_block: bool = True,
) -> dict[str, pl.DataFrame]:
    """The engine's result as the warehouse's per-window tables (docs/warehouse.md).

    bands: optional (lower, upper, coverage) with lower/upper (H+1, n, n) for the LAST fitted window.
    last_block: this block holds the universe's newest window (which always gets its arrays).
    """
    names = list(prepared.names)
    n = len(names)
    dates = np.asarray(prepared.dates, dtype="datetime64[D]")
    ends = np.asarray(rolling.ends, dtype=np.int64)
    starts = np.asarray(rolling.starts, dtype=np.int64)
    W = ends.size
    ok = np.asarray(rolling.ok, dtype=bool)
    end_dates = pl.Series("window_end", dates[ends]).cast(pl.Date)

    def head(idx: np.ndarray, repeat: int = 1) -> dict[str, Any]:
        e = end_dates.gather(np.repeat(idx, repeat)) if idx.size else pl.Series("window_end", [], dtype=pl.Date)
        m = idx.size * repeat
        return {"run_id": [run_id] * m, "universe": [universe.name] * m, "window_end": e}

    radius = np.asarray(rolling.spectral_radius, dtype=np.float64)
    # arlib names columns by position ('y1', 'series 1'): store the universe's series names instead
    reasons = [name_series(r, names) if r else None for r in np.asarray(rolling.skip_reason, dtype=object).tolist()]
    portmanteau = rolling.portmanteau_p if rolling.portmanteau_p is not None else np.full(W, np.nan)
    window_fits = pl.DataFrame(
        {
            **head(np.arange(W)),
            "window_start": pl.Series(dates[starts]).cast(pl.Date),
            "nobs": pl.Series(np.asarray(rolling.nobs), dtype=pl.Int32),
            "lags": pl.Series(np.asarray(rolling.lags), dtype=pl.Int32),
            "spectral_radius": _none_if_nan(radius),
            "stable": pl.Series([bool(r < 1.0) if o else None for r, o in zip(radius, ok, strict=True)], dtype=pl.Boolean),
            "aic": _none_if_nan(rolling.aic),
            "bic": _none_if_nan(rolling.bic),
            "hq": _none_if_nan(rolling.hq),
            "fpe": _none_if_nan(rolling.fpe),
            "condition_number": _none_if_nan(rolling.condition_number),
            "portmanteau_p": _none_if_nan(portmanteau),
            "skip_reason": pl.Series(reasons, dtype=pl.String),
        }
    )
    k = np.flatnonzero(ok)
    K = k.size
    tables: dict[str, pl.DataFrame] = {"window_fits": window_fits}
    tables["connectedness"] = pl.DataFrame({**head(k), "total": np.asarray(rolling.total_connectedness)[k]})
    tables["directional"] = pl.DataFrame(
        {
            **head(k, n),
            "series": names * K,
            "to_others": np.asarray(rolling.to_others)[k].reshape(-1),
            "from_others": np.asarray(rolling.from_others)[k].reshape(-1),
            "net": np.asarray(rolling.net)[k].reshape(-1),
        }
    )
    # pairwise[w, i, j] = % of i's FEV due to j: target = i, source = j (C order: i slow, j fast)
    tables["pairwise"] = pl.DataFrame(
        {
            **head(k, n * n),
            "source": names * (n * K),
            "target": [t for t in names for _ in range(n)] * K,
            "share": np.asarray(rolling.pairwise)[k].reshape(-1),
        }
    )
    # granger[w, i, j] tests "j does not Granger-cause i": caused = i, causing = j; i != j only
    if rolling.granger_f is not None:  # none from the TVP filter
        off = ~np.eye(n, dtype=bool)
        gi, gj = np.nonzero(off)
        tables["granger"] = pl.DataFrame(
            {
                **head(k, gi.size),
                "caused": [names[i] for i in gi] * K,
                "causing": [names[j] for j in gj] * K,
                "f_stat": _none_if_nan(np.asarray(rolling.granger_f)[k][:, gi, gj].reshape(-1)),
                "p_value": _none_if_nan(np.asarray(rolling.granger_p)[k][:, gi, gj].reshape(-1)),
            }
        )
    tables.update(declared_tables(rolling, k, head))  # band, joint, shrinkage … (serving/_schema.py)
    lags = np.asarray(rolling.lags, dtype=np.int64)
    coefs = np.asarray(rolling.coefs)
    coef_lists = [coefs[w, : lags[w]].reshape(-1).tolist() for w in k]
    intercept = (
        list_column(np.asarray(rolling.intercept)[k]) if rolling.intercept is not None else pl.Series([None] * K, dtype=pl.List(pl.Float64))
    )
    trend_coef = getattr(rolling, "trend_coef", None)
    trend_series = (
        list_column(np.asarray(trend_coef)[k]) if trend_coef is not None else pl.Series([None] * K, dtype=pl.List(pl.Float64))
    )
    tables["window_params"] = pl.DataFrame(
        {
            **head(k),
            "lags": pl.Series(lags[k], dtype=pl.Int32),
            "coefs": pl.Series(coef_lists, dtype=pl.List(pl.Float64)),
            "intercept": intercept,
            "trend_coef": trend_series,
            "sigma_u": list_column(np.asarray(rolling.sigma_u)[k]),
        }
    )
    if rolling.responses is None and rolling.decomposition is None:
        return tables
    # arrays for windows on the sub-grid (grid index divisible by arrays_every) and the newest one
    grid_index = (ends - (universe.window_rows - 1)) // universe.step
    keep = grid_index[k] % universe.arrays_every == 0
    if last_block and K:
        keep[-1] = True
    ka = k[keep]
    Ka = ka.size
    if rolling.responses is not None:
        resp = np.asarray(rolling.responses)[ka]
        lower_rows: list[list[float] | None] = [None] * Ka
        upper_rows: list[list[float] | None] = [None] * Ka
        coverage_rows: list[float | None] = [None] * Ka
        if bands is not None and Ka:
            lo, hi, cov = bands
            lower_rows[-1] = np.ravel(lo).tolist()
            upper_rows[-1] = np.ravel(hi).tolist()
            coverage_rows[-1] = cov
        lower = pl.Series(lower_rows, dtype=pl.List(pl.Float64))
        upper = pl.Series(upper_rows, dtype=pl.List(pl.Float64))
        coverage = pl.Series(coverage_rows, dtype=pl.Float64)
        tables["responses"] = pl.DataFrame(
            {
                **head(ka),
                "identification": [universe.identification] * Ka,
                "horizon": pl.Series([universe.horizon] * Ka, dtype=pl.Int32),
                "response": list_column(resp),
                "lower": lower,
                "upper": upper,
                "coverage": coverage,
            }
        )
    if rolling.decomposition is not None:
        tables["decompositions"] = pl.DataFrame(
            {
                **head(ka),
                "method": [universe.identification] * Ka,
                "horizon": pl.Series([universe.horizon] * Ka, dtype=pl.Int32),
                "share": list_column(np.asarray(rolling.decomposition)[ka]),
            }
        )
    return tables


def latest_window_bands(
    prepared: Prepared, universe: UniverseConfig, rolling: Any
) -> tuple[np.ndarray, np.ndarray, float] | None:
    """Response bands (lower, upper, coverage) for the last fitted window of `rolling`, or None.

    Bands cost a bootstrap per window, so only the newest window of each run gets them; the
    dashboard derives others on demand. A window holding gap rows gets none (logged).
    """
    b = universe.bands
    if b.method == "none":
        return None
    ok = np.flatnonzero(np.asarray(rolling.ok, dtype=bool))
    if ok.size == 0:
        return None
    w = int(ok[-1])
    e, s = int(rolling.ends[w]), int(rolling.starts[w])
    rows = prepared.y[s : e + 1]
    if np.isnan(rows).any():
        log.info("universe %s: newest window holds gap rows; no response bands stored", universe.name)
        return None
    import arlib

    fit = arlib.fit_var(rows, int(rolling.lags[w]), trend=universe.trend, names=list(prepared.names))
    res = arlib.irf_bands(
        fit,
        universe.horizon,
        shocks=universe.identification,
        coverage=b.coverage,
        kind=b.method,
        draws=b.draws,
        rng=b.seed,
    )
    return np.asarray(res.lower), np.asarray(res.upper), float(b.coverage)


# ------------------------------------------------------------------------------------------
# model = "tvp": the TVP-VAR filter (arlib.tvp_var), one result per date
# ------------------------------------------------------------------------------------------
#
# Dates: the filter runs over the prepared rows with a value in every series (gap rows get no
# result and the filter treats the rows around them as consecutive). The first `training` such
# rows give the prior (arlib.tvp_var); every later row is a date, stored like a window ending on
# that date, with window_start = the first filtered date. The filter state after the newest date
# is stored too (table `tvp_state`).
#
# Incremental rule (:func:`plan_tvp`): the stored state is continued with the new rows after its
# last date when the config hash is unchanged and no prepared value on or before that date
# changed, appeared or disappeared; anything else (a revision, a config change, ``full=True``,
# no stored state) re-filters every row from the training sample on. arlib continues a state with
# the same operations in the same order as one pass, so both give the same numbers
# (tests/pipeline/test_tvp_flow.py holds them to 1e-10).


@dataclass(frozen=True)
class TVPBlock:
    """The one fit block of a tvp universe: prepared rows to filter and the filter to continue.

    rows: prepared row indexes (complete rows only, ascending); state: the stored arlib TVPState
    the rows continue, or None for a new filter whose first `training` rows are the prior;
    first: the first filtered date of the continued filter (None for a new one).
    """

    rows: np.ndarray
    state: Any = None
    first: date | None = None

    @property
    def size(self) -> int:
        return int(self.rows.size)


def tvp_training(universe: UniverseConfig) -> int:
    """Rows of the training sample: `[universes.tvp] training`, or arlib's default max(p + k + n, 4·k)."""
    if universe.tvp.training is not None:
        return universe.tvp.training
    from arlib import minimum_window

    n, p = len(universe.series), universe.max_lag
    k = (1 if universe.trend == "c" else 0) + n * p
    return max(minimum_window(n, p, universe.trend), 4 * k)


def plan_tvp(
    prepared: Prepared, universe: UniverseConfig, *, stored: StoredState | None, full: bool = False
) -> tuple[WindowPlan, TVPBlock]:
    """Decide whether the stored filter continues or every row is re-filtered (module comment)."""
    y = np.asarray(prepared.y)
    rows = np.flatnonzero(~np.isnan(y).any(axis=1)) if y.size else np.zeros(0, np.int64)
    dates = np.asarray(prepared.dates, dtype="datetime64[D]")
    reason = None
    if full:
        reason = "full re-filter requested"
    elif stored is None or stored.config_hash is None:
        reason = "first run"
    elif stored.config_hash != universe.config_hash:
        reason = "config changed: re-filtering every date"
    elif stored.tvp is None:
        reason = "no stored filter state: re-filtering every date"
    changed: set[date] = set()
    removed: set[date] = set()
    if reason is None:
        assert stored is not None and stored.tvp is not None
        changed, removed = _changed_dates_of(prepared, stored.prepared)
        last = stored.tvp.last
        early = sorted(d for d in changed | removed if d <= last)
        if early:
            reason = f"data changed on or before the filter's last date {last} (first: {early[0]}): re-filtering every date"
    if reason is not None:
        train = tvp_training(universe)
        if rows.size <= train:
            msg = (
                f"universe {universe.name!r}: {rows.size} prepared row(s) with a value in every series, but the "
                f"TVP filter's training sample takes {train}, so no date can be filtered; lower "
                f"[universes.tvp] training (at least p + k + n) or add history to its sources"
            )
            if stored is not None and stored.windows.height:
                msg += "; its previous results stay served"
            raise FitError(msg)
        ends = rows[train:]
        plan = WindowPlan(ends=ends, delete_ends=None, prepared_changed=True, reason=reason, candidates=int(ends.size))
        return plan, TVPBlock(rows)
    assert stored is not None and stored.tvp is not None
    new = rows[dates[rows] > np.datetime64(stored.tvp.last, "D")]
    parts = [f"{new.size} new date(s) filtered from the stored state"] if new.size else []
    plan = WindowPlan(
        ends=new,
        delete_ends=[],
        prepared_changed=bool(changed or removed),
        prepared_dates=sorted(changed | removed),
        reason=", ".join(parts) if parts else "nothing changed",
        candidates=int(stored.windows.height + new.size),
        reused=int(stored.windows.height),
    )
    return plan, TVPBlock(new, stored.tvp.state, stored.tvp.first)


def tvp_filter(prepared: Prepared, universe: UniverseConfig, block: TVPBlock) -> Any:
    """Run (or continue) arlib's TVP filter over the block's rows; a refusal is a FitError."""
    import arlib

    y = np.asarray(prepared.y)[block.rows]
    common: dict[str, Any] = {
        "bands": universe.band_periods,
        "truncation": universe.band_truncation,
        "joint": universe.joint,
    }
    try:
        if block.state is not None:
            return arlib.tvp_var(y, horizon=universe.horizon, state=block.state, **common)
        t = universe.tvp
        return arlib.tvp_var(
            y, universe.lags, universe.horizon, kappa1=t.kappa1, kappa2=t.kappa2, training=tvp_training(universe),
            trend=universe.trend, covariance=t.covariance, names=list(prepared.names), **common,
        )  # fmt: skip
    except (ValueError, np.linalg.LinAlgError) as exc:
        msg = f"universe {universe.name!r}: the TVP filter refused the data: {' '.join(str(exc).split())}"
        raise FitError(msg) from exc


class _ResultView(SimpleNamespace):
    """An arlib result under the rolling result's attribute names where they differ; every other
    attribute is the result's own (so a declared table's `source` reaches a TVP result unchanged)."""

    def __init__(self, result: Any, **names: Any) -> None:
        super().__init__(**names)
        self._result = result

    def __getattr__(self, name: str) -> Any:  # called only for names not set above
        return getattr(self.__dict__["_result"], name)


def tvp_tables(
    result: Any, prepared: Prepared, universe: UniverseConfig, block: TVPBlock, *, run_id: str
) -> dict[str, pl.DataFrame]:
    """The filter's dates as the warehouse's per-window tables, plus the `tvp_state` row.

    A date is stored like a window ending on it (window_start = the first filtered date): the
    tables a rolling universe writes where they have a meaning — window_fits (nobs = rows the
    filter has consumed, spectral radius of the date's VAR, no criteria or tests), connectedness,
    directional, pairwise, window_params (B_t and Σ_t), band and joint connectedness — and no
    Granger tests, stored responses or decompositions (the screen and the report derive those from
    window_params).
    """
    D = len(result)
    base = 0 if block.state is None else int(block.state.row)
    idx = block.rows[np.asarray(result.ends, dtype=np.int64) - base]
    first_row = int(idx[0]) if block.first is None and D else None
    first = block.first if block.first is not None else (prepared.dates[first_row] if first_row is not None else None)
    start = int(np.searchsorted(np.asarray(prepared.dates, dtype="datetime64[D]"), np.datetime64(first, "D"))) if first else 0
    nan = np.full(D, np.nan)
    radius = result.spectral_radius if result.spectral_radius is not None else nan
    view = _ResultView(
        result, ends=idx, starts=np.full(D, start, dtype=np.int64), ok=np.ones(D, dtype=bool), spectral_radius=radius,
        skip_reason=[None] * D, portmanteau_p=None, nobs=np.asarray(result.ends) + 1, lags=np.full(D, result.lags),
        aic=nan, bic=nan, hq=nan, fpe=nan, condition_number=nan,
        total_connectedness=result.total_connectedness, to_others=result.to_others,
        from_others=result.from_others, net=result.net, pairwise=result.pairwise, granger_f=None,
        band_tables=result.band_pairwise, band_periods=result.bands, band_truncation=result.truncation,
        band_total=result.band_total, band_within=result.band_within_total, band_share=result.band_share,
        band_to_others=result.band_to_others, band_from_others=result.band_from_others,
        joint_total=result.joint_total, joint_from_others=result.joint_from_others,
        coefs=result.coefs, intercept=result.intercept, trend_coef=None, sigma_u=result.sigma_u,
        responses=None, decomposition=None,
    )  # fmt: skip
    tables = result_tables(view, prepared, universe, run_id=run_id)
    st = result.state
    last = prepared.dates[int(idx[-1])] if D else None
    if last is not None and first is not None:
        tables["tvp_state"] = pl.DataFrame(
            {
                "run_id": [run_id], "universe": [universe.name],
                "window_end": pl.Series([last], dtype=pl.Date), "window_start": pl.Series([first], dtype=pl.Date),
                "row": pl.Series([int(st.row)], dtype=pl.Int64), "lags": pl.Series([int(st.lags)], dtype=pl.Int32),
                "trend": [st.trend], "kappa1": [float(st.kappa1)], "kappa2": [float(st.kappa2)],
                "covariance": [st.covariance], "names": pl.Series([list(st.names)], dtype=pl.List(pl.String)),
                "params": list_column(np.asarray(st.params)[None]), "cov": list_column(np.asarray(st.cov)[None]),
                "sigma": list_column(np.asarray(st.sigma)[None]), "tail": list_column(np.asarray(st.tail)[None]),
                "centre": list_column(np.asarray(st.centre)[None]) if st.centre is not None
                else pl.Series([None], dtype=pl.List(pl.Float64)),
            }
        )  # fmt: skip
    return tables


def stored_filter(row: dict[str, Any]) -> StoredFilter:
    """A `tvp_state` row (column → value, arrays as lists) back to the arlib TVPState it stored."""
    import arlib

    names = tuple(row["names"])
    n, p = len(names), int(row["lags"])
    k = (1 if row["trend"] == "c" else 0) + n * p
    size = k if row["covariance"] == "kronecker" else n * k
    state = arlib.TVPState(
        params=np.asarray(row["params"], dtype=np.float64).reshape(k, n),
        cov=np.asarray(row["cov"], dtype=np.float64).reshape(size, size),
        sigma=np.asarray(row["sigma"], dtype=np.float64).reshape(n, n),
        tail=np.asarray(row["tail"], dtype=np.float64).reshape(p, n),
        row=int(row["row"]), lags=p, trend=str(row["trend"]), kappa1=float(row["kappa1"]),
        kappa2=float(row["kappa2"]), covariance=str(row["covariance"]), names=names,
        centre=None if row.get("centre") is None else np.asarray(row["centre"], dtype=np.float64).reshape(k),
    )  # fmt: skip
    return StoredFilter(state=state, last=row["window_end"], first=row["window_start"])
