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
from typing import TYPE_CHECKING, Any

import numpy as np
import polars as pl

from pipeline._reasons import name_series
from pipeline.errors import FitError

if TYPE_CHECKING:
    from pipeline.config import UniverseConfig
    from pipeline.prepare import Prepared

__all__ = [
    "StoredState",
    "WindowPlan",
    "code_version",
    "data_fingerprint",
    "fit_block",
    "latest_window_bands",
    "plan_windows",
    "result_tables",
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
    ends = np.arange(universe.window - 1, T, universe.step, dtype=np.int64)
    starts = np.zeros_like(ends) if universe.expanding else ends - universe.window + 1
    return ends, starts


@dataclass(frozen=True)
class StoredState:
    """What the warehouse holds for a universe from its previous successful runs."""

    config_hash: str | None
    windows: pl.DataFrame  # window_end: Date, window_start: Date
    prepared: pl.DataFrame  # date: Date, series: str, value: f64 (null for gap rows)


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

    new = prepared.frame
    changed, removed = _changed_dates(new, stored.prepared)
    dates = np.asarray(prepared.dates, dtype="datetime64[D]")
    changed_mask = np.isin(dates, np.asarray(sorted(changed), dtype="datetime64[D]")) if changed else np.zeros(T, bool)
    cs = np.concatenate([[0], np.cumsum(changed_mask)])
    # removed date r lies between rows pos-1 and pos; a window [s, e] spans it iff s < pos <= e
    boundary = np.zeros(T + 1, dtype=np.int64)
    for r in removed:
        pos = int(np.searchsorted(dates, np.datetime64(r, "D")))
        boundary[pos] += 1
    cb = np.cumsum(boundary)

    stored_map: dict[date, date] = dict(zip(stored.windows["window_end"].to_list(), stored.windows["window_start"].to_list(), strict=True))
    refit = np.zeros(ends.size, dtype=bool)
    for w, (e, s) in enumerate(zip(ends.tolist(), starts.tolist(), strict=True)):
        end_d, start_d = prepared.dates[e], prepared.dates[s]
        old_start = stored_map.get(end_d)
        if old_start is None or old_start != start_d:
            refit[w] = True
        elif cs[e + 1] - cs[s] > 0 or cb[e] - cb[s] > 0:
            refit[w] = True
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
    try:
        return arlib.rolling_var(
            prepared.y,
            universe.window,
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


def _flat(a: np.ndarray) -> pl.Series:
    """(W, ...) array → List(Float64) column, each row flattened in C order."""
    W = a.shape[0]
    flat = np.ascontiguousarray(a, dtype=np.float64).reshape(W, -1)
    if W == 0:
        return pl.Series([], dtype=pl.List(pl.Float64))
    return pl.Series(flat).cast(pl.List(pl.Float64))


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
    if getattr(rolling, "band_tables", None) is not None:
        periods = rolling.band_periods
        d = len(periods)
        kb = np.repeat(k, d)
        band = np.tile(np.arange(d), K)
        tables["band_connectedness"] = pl.DataFrame(
            {
                **head(k, d),
                "band": pl.Series(band, dtype=pl.Int32),
                "period_lo": np.tile([p[0] for p in periods], K).astype(np.float64),
                "period_hi": np.tile([p[1] for p in periods], K).astype(np.float64),
                "truncation": pl.Series([rolling.band_truncation] * (K * d), dtype=pl.Int32),
                "total": np.asarray(rolling.band_total)[kb, band],
                "within_total": _none_if_nan(np.asarray(rolling.band_within)[kb, band]),
                "band_share": np.asarray(rolling.band_share)[kb, band],
                "to_others": _flat(np.asarray(rolling.band_to_others)[kb, band]),
                "from_others": _flat(np.asarray(rolling.band_from_others)[kb, band]),
                "shares": _flat(np.asarray(rolling.band_tables)[kb, band]),
            }
        )
    if getattr(rolling, "joint_total", None) is not None:
        tables["joint_connectedness"] = pl.DataFrame(
            {
                **head(k),
                "total": np.asarray(rolling.joint_total)[k],
                "generalized_total": np.asarray(rolling.total_connectedness)[k],
                "from_others": _flat(np.asarray(rolling.joint_from_others)[k]),
            }
        )
    lags = np.asarray(rolling.lags, dtype=np.int64)
    coefs = np.asarray(rolling.coefs)
    coef_lists = [coefs[w, : lags[w]].reshape(-1).tolist() for w in k]
    intercept = (
        _flat(np.asarray(rolling.intercept)[k]) if rolling.intercept is not None else pl.Series([None] * K, dtype=pl.List(pl.Float64))
    )
    trend_coef = getattr(rolling, "trend_coef", None)
    trend_series = (
        _flat(np.asarray(trend_coef)[k]) if trend_coef is not None else pl.Series([None] * K, dtype=pl.List(pl.Float64))
    )
    tables["window_params"] = pl.DataFrame(
        {
            **head(k),
            "lags": pl.Series(lags[k], dtype=pl.Int32),
            "coefs": pl.Series(coef_lists, dtype=pl.List(pl.Float64)),
            "intercept": intercept,
            "trend_coef": trend_series,
            "sigma_u": _flat(np.asarray(rolling.sigma_u)[k]),
        }
    )
    # arrays for windows on the sub-grid (grid index divisible by arrays_every) and the newest one
    grid_index = (ends - (universe.window - 1)) // universe.step
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
                "response": _flat(resp),
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
                "share": _flat(np.asarray(rolling.decomposition)[ka]),
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
