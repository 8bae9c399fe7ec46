"""Read-only queries against the serving snapshot.

The snapshot is a DuckDB file the pipeline replaces atomically (``os.replace``) after every
successful run. `SnapshotReader` opens it read-only and notices a replacement by the file's identity
(device, inode, modification time, size) before every query; then it opens the new file and retires
the old handle once no query still uses it, so a query that started on the old file finishes on a
consistent view of it.

DuckDB keeps one database instance per path inside a process: ``duckdb.connect(path)`` while an
older connection to the same path is still open returns the *old* file's instance even after the
path was replaced. To always see the newest file, every handle is a fresh in-memory instance with
the snapshot ATTACHed ``READ_ONLY``; after the attach, external file access is switched off and the
configuration locked, so no statement could read or write any other file.

Every statement is a constant string with ``?`` placeholders; values from the browser travel only as
parameters. `Snapshot._select_window` is the one place that builds the "rows of this universe inside
this date window" filter.

Array columns are DuckDB ``DOUBLE[]`` lists flattened in C order from the arlib shapes named in
docs/warehouse.md; `_array` restores them. Series order is ``universe_series.position``.
"""

from __future__ import annotations

import contextlib
import dataclasses
import datetime as dt
import json
import os
import re
import threading
from collections.abc import Callable, Iterator, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from ._errors import SnapshotMissingError, WindowError

__all__ = [
    "DateWindow",
    "Fit",
    "Snapshot",
    "SnapshotReader",
    "Universe",
    "parse_date",
]

#: Columns of every table the dashboard reads (docs/warehouse.md); `_select_window` checks against it.
TABLE_COLUMNS: dict[str, tuple[str, ...]] = {
    "window_fits": (
        "run_id", "universe", "window_end", "window_start", "nobs", "lags", "spectral_radius",
        "stable", "aic", "bic", "hq", "fpe", "condition_number", "portmanteau_p", "skip_reason",
    ),
    "connectedness": ("run_id", "universe", "window_end", "total"),
    "directional": ("run_id", "universe", "window_end", "series", "to_others", "from_others", "net"),
    "pairwise": ("run_id", "universe", "window_end", "source", "target", "share"),
    "granger": ("run_id", "universe", "window_end", "caused", "causing", "f_stat", "p_value"),
    "window_params": ("run_id", "universe", "window_end", "lags", "coefs", "intercept", "sigma_u"),
    "responses": (
        "run_id", "universe", "window_end", "identification", "horizon", "response", "lower",
        "upper", "coverage",
    ),
    "decompositions": ("run_id", "universe", "window_end", "method", "horizon", "share"),
    "prepared": ("universe", "date", "series", "value"),
}

_MAX_DATE_TEXT = 32
#: Most values a `Snapshot` keeps per file (universes, bounds, derived per-window results).
_CACHE_ENTRIES = 512
#: A date, optionally followed by a time of day (which is ignored), as date inputs and plotly send.
_DATE_TEXT = re.compile(r"^\d{4}-\d{2}-\d{2}([ T]\d{2}:\d{2}(:\d{2}(\.\d{1,9})?)?)?$")


def parse_date(value: Any, *, name: str = "date") -> dt.date:
    """A calendar date from the browser: ``YYYY-MM-DD``, optionally followed by a time (ignored).

    Plotly's range events send ``"2021-03-04 12:00:00.123"``; date inputs send ``"2021-03-04"``.
    Anything else raises `WindowError` naming the input.
    """
    if isinstance(value, dt.datetime):
        return value.date()
    if isinstance(value, dt.date):
        return value
    if not isinstance(value, str) or not value or len(value) > _MAX_DATE_TEXT:
        msg = f"`{name}` must be a date like 2021-03-31, got {str(value)[:40]!r}"
        raise WindowError(msg)
    text = value.strip()
    try:
        if not _DATE_TEXT.match(text):
            raise ValueError(text)
        return dt.date.fromisoformat(text[:10])
    except ValueError:
        msg = f"`{name}` must be a date like 2021-03-31, got {value[:40]!r}"
        raise WindowError(msg) from None


@dataclasses.dataclass(frozen=True)
class DateWindow:
    """A universe and an inclusive range of window-end dates, as chosen in the browser."""

    universe: str
    start: dt.date
    end: dt.date

    def __post_init__(self) -> None:
        if self.start > self.end:
            start, end = self.end, self.start
            object.__setattr__(self, "start", start)
            object.__setattr__(self, "end", end)

    def as_store(self) -> dict[str, str]:
        """The JSON form kept in the browser (`dcc.Store`)."""
        return {"universe": self.universe, "start": self.start.isoformat(), "end": self.end.isoformat()}

    @property
    def label(self) -> str:
        return f"{self.start.isoformat()} to {self.end.isoformat()}"


@dataclasses.dataclass(frozen=True)
class Universe:
    """A universe's settings as the last run stored them."""

    name: str
    series: tuple[str, ...]
    horizon: int
    granger_level: float
    identification: str
    trend: str = "c"


@dataclasses.dataclass(frozen=True)
class Fit:
    """One fitted window's VAR: coefficients (p, n, n), intercept (n,), residual covariance (n, n)."""

    universe: str
    window_end: dt.date
    window_start: dt.date
    lags: int
    coefs: np.ndarray
    intercept: np.ndarray
    sigma_u: np.ndarray


def _trend(config_json: Any) -> str:
    """The deterministic terms the universe's fits used ("n", "c", "ct"), from its stored config."""
    try:
        trend = json.loads(config_json).get("trend", "c")
    except (TypeError, ValueError, AttributeError):
        return "c"
    return trend if trend in ("n", "c", "ct") else "c"


def _array(values: Sequence[float] | None, shape: tuple[int, ...]) -> np.ndarray | None:
    """A flattened C-order ``DOUBLE[]`` back to its arlib shape (read-only); NULL stays None."""
    if values is None:
        return None
    arr = np.asarray(values, dtype=np.float64)
    expected = int(np.prod(shape))
    if arr.size != expected:
        msg = f"stored array has {arr.size} values, expected {expected} for shape {shape}"
        raise SnapshotMissingError(msg)
    arr = arr.reshape(shape)
    arr.flags.writeable = False
    return arr


class _Handle:
    """One opened snapshot file, shared by queries, closed when retired and no longer in use."""

    def __init__(self, path: Path, identity: tuple[int, ...], generation: int) -> None:
        import duckdb

        self.identity = identity
        self.generation = generation
        self._lock = threading.Lock()
        self._users = 0
        self._retired = False
        con = duckdb.connect(":memory:")
        try:
            literal = str(path).replace("'", "''")
            con.execute(f"ATTACH '{literal}' AS snap (READ_ONLY)")
            con.execute("SET enable_external_access = false")
            con.execute("SET lock_configuration = true")
        except duckdb.Error as exc:
            con.close()
            msg = f"cannot open the serving snapshot {path}: {str(exc).splitlines()[0]}"
            raise SnapshotMissingError(msg) from None
        self.con = con

    def acquire(self) -> None:
        with self._lock:
            self._users += 1

    def release(self) -> None:
        with self._lock:
            self._users -= 1
            close = self._retired and self._users == 0
        if close:
            self.con.close()

    def retire(self) -> None:
        with self._lock:
            self._retired = True
            close = self._users == 0
        if close:
            self.con.close()


class SnapshotReader:
    """Opens the serving snapshot read-only and reopens it when the file is replaced.

    Thread-safe: each query runs on its own DuckDB cursor of the current handle. Inside
    :meth:`pinned` every query of the calling thread reads the same file — the one current at the
    block's first query — so one request never mixes two published snapshots (the app pins each
    HTTP request).
    """

    def __init__(self, path: str | os.PathLike[str]) -> None:
        self.path = Path(path)
        self._lock = threading.Lock()
        self._handle: _Handle | None = None
        self._generation = 0
        self._pin = threading.local()  # .active: bool, .handle: _Handle | None (per thread)

    def begin_pin(self) -> bool:
        """Start pinning this thread's queries to one file; False if already pinned (nested)."""
        if getattr(self._pin, "active", False):
            return False
        self._pin.active, self._pin.handle = True, None
        return True

    def end_pin(self) -> None:
        """Stop pinning; the pinned file is released (closed if it was replaced meanwhile)."""
        handle = getattr(self._pin, "handle", None)
        self._pin.active, self._pin.handle = False, None
        if handle is not None:
            handle.release()

    @contextlib.contextmanager
    def pinned(self) -> Iterator[None]:
        """Every query of this thread inside the block reads the same snapshot file."""
        started = self.begin_pin()
        try:
            yield
        finally:
            if started:
                self.end_pin()

    def _identity(self) -> tuple[int, ...]:
        try:
            st = os.stat(self.path)
        except FileNotFoundError:
            msg = (
                f"no serving snapshot at {self.path} yet; run the pipeline "
                "(`shockflow run --config FILE`) to publish one"
            )
            raise SnapshotMissingError(msg) from None
        return (st.st_dev, st.st_ino, st.st_mtime_ns, st.st_size)

    def _current(self) -> _Handle:
        pinned = getattr(self._pin, "handle", None)
        if pinned is not None:
            pinned.acquire()
            return pinned
        identity = self._identity()
        with self._lock:
            handle = self._handle
            if handle is None or handle.identity != identity:
                self._generation += 1
                fresh = _Handle(self.path, identity, self._generation)
                self._handle = fresh
                if handle is not None:
                    handle.retire()
                handle = fresh
            handle.acquire()
            if getattr(self._pin, "active", False):
                handle.acquire()  # the pin's own reference, released by end_pin
                self._pin.handle = handle
            return handle

    @property
    def generation(self) -> int:
        """Counts the files opened so far; changes when a replaced snapshot is first read."""
        return self._generation

    def current_generation(self) -> int:
        """The generation of the file on disk now (opening it if it was replaced)."""
        handle = self._current()
        handle.release()
        return handle.generation

    @contextlib.contextmanager
    def cursor(self) -> Iterator[Any]:
        handle = self._current()
        try:
            cur = handle.con.cursor()
            try:
                cur.execute("USE snap")
                yield cur
            finally:
                cur.close()
        finally:
            handle.release()

    def rows(self, sql: str, params: Sequence[Any] = ()) -> list[tuple[Any, ...]]:
        """All rows of one parameterised statement."""
        with self.cursor() as cur:
            return cur.execute(sql, list(params)).fetchall()

    def arrays(self, sql: str, params: Sequence[Any] = ()) -> dict[str, np.ndarray]:
        """One parameterised statement's columns as numpy arrays (for large results)."""
        with self.cursor() as cur:
            return dict(cur.execute(sql, list(params)).fetchnumpy())

    def close(self) -> None:
        with self._lock:
            handle, self._handle = self._handle, None
        if handle is not None:
            handle.retire()


class Snapshot:
    """The dashboard's questions to the snapshot, each one parameterised statement."""

    def __init__(self, reader: SnapshotReader | str | os.PathLike[str]) -> None:
        self.reader = reader if isinstance(reader, SnapshotReader) else SnapshotReader(reader)
        # small per-file caches, keyed by the reader's generation (a replaced file clears them)
        self._cache_lock = threading.Lock()
        self._cache_generation = -1
        self._cache: dict[Any, Any] = {}

    def cached(self, key: Any, compute: Callable[[], Any]) -> Any:
        """`compute()` once per snapshot file and `key` (a replaced file starts afresh)."""
        return self._cached(key, compute)

    def _cached(self, key: Any, compute: Callable[[], Any]) -> Any:
        generation = self.reader.current_generation()
        if generation < self._cache_generation:  # a request pinned to a replaced file: no caching
            return compute()
        with self._cache_lock:
            if generation != self._cache_generation:
                self._cache = {}
                self._cache_generation = generation
            if key in self._cache:
                return self._cache[key]
        value = compute()
        with self._cache_lock:
            if generation == self._cache_generation:
                if len(self._cache) >= _CACHE_ENTRIES:  # bounded: start afresh rather than grow
                    self._cache = {}
                self._cache[key] = value
        return value

    # -- the one date-window helper -------------------------------------------------------------
    def _select_window(
        self,
        table: str,
        columns: Sequence[str],
        window: DateWindow,
        *,
        date_column: str = "window_end",
        where: str = "",
        params: Sequence[Any] = (),
        select_params: Sequence[Any] = (),
        group_by: Sequence[str] = (),
        order_by: Sequence[str] = ("window_end",),
        as_arrays: bool = False,
    ) -> Any:
        """Rows of `table` for ``window.universe`` with `date_column` inside the window (inclusive).

        `table`, `columns`, `date_column`, `where`, `group_by` and `order_by` are constants of this
        module (plain column names are checked against `TABLE_COLUMNS`); `where` may hold ``?``
        placeholders whose values come in `params` (`select_params` for placeholders inside
        `columns`) — values from the browser never enter the SQL text. Every select-by-date-window
        in the dashboard goes through here.
        """
        known = TABLE_COLUMNS[table]
        plain = [c for c in (*columns, date_column, *group_by, *order_by) if c.isidentifier()]
        bad = [c for c in plain if c not in known]
        if bad:  # a programming error, never user input
            msg = f"unknown column(s) {bad} for table {table}"
            raise AssertionError(msg)
        sql = (
            f"SELECT {', '.join(columns)} FROM {table} "
            f"WHERE universe = ? AND {date_column} BETWEEN ? AND ?"
            + (f" AND ({where})" if where else "")
            + (f" GROUP BY {', '.join(group_by)}" if group_by else "")
            + (f" ORDER BY {', '.join(order_by)}" if order_by else "")
        )
        values = [*select_params, window.universe, window.start, window.end, *params]
        if as_arrays:
            return self.reader.arrays(sql, values)
        return self.reader.rows(sql, values)

    # -- universes ----------------------------------------------------------------------------
    def universes(self) -> dict[str, Universe]:
        """Every universe in the snapshot, with its series in stored column order."""
        return self._cached("universes", self._universes)  # type: ignore[no-any-return]

    def _universes(self) -> dict[str, Universe]:
        rows = self.reader.rows(
            "SELECT u.universe, u.horizon, u.granger_level, u.identification, u.config_json, "
            "s.series FROM universes u JOIN universe_series s USING (universe) "
            "ORDER BY u.universe, s.position"
        )
        out: dict[str, list[Any]] = {}
        for name, horizon, level, ident, config_json, series in rows:
            entry = out.setdefault(name, [int(horizon), float(level), str(ident), _trend(config_json), []])
            entry[4].append(series)
        return {
            name: Universe(name, tuple(series), horizon, level, ident, trend)
            for name, (horizon, level, ident, trend, series) in out.items()
        }

    def universe(self, name: Any) -> Universe:
        """The named universe, or `WindowError` (the name came from the browser)."""
        universes = self.universes()
        if not isinstance(name, str) or name not in universes:
            shown = str(name)[:40]
            msg = f"unknown universe {shown!r}; pick one of {sorted(universes)}"
            raise WindowError(msg)
        return universes[name]

    def date_bounds(self, universe: str) -> tuple[dt.date, dt.date]:
        """First and last window end stored for `universe`."""
        ((lo, hi),) = self._cached(("bounds", universe), lambda: self.reader.rows(
            "SELECT min(window_end), max(window_end) FROM window_fits WHERE universe = ?", [universe]
        ))
        if lo is None:
            msg = f"universe {universe!r} has no windows in the snapshot yet"
            raise WindowError(msg)
        return lo, hi

    def window(self, state: Any) -> DateWindow:
        """Validate the browser's window state ``{"universe", "start", "end"}`` into a `DateWindow`.

        Unknown universes and malformed dates raise `WindowError`; dates outside the stored range are
        clamped to it.
        """
        if not isinstance(state, dict):
            msg = "no date window chosen yet; pick a universe and a date range"
            raise WindowError(msg)
        universe = self.universe(state.get("universe")).name
        lo, hi = self.date_bounds(universe)
        start = parse_date(state.get("start") or lo, name="start")
        end = parse_date(state.get("end") or hi, name="end")
        start, end = min(start, end), max(start, end)
        start = min(max(start, lo), hi)
        end = min(max(end, lo), hi)
        return DateWindow(universe, start, end)

    # -- time series over the window --------------------------------------------------------------
    def index_history(self, universe: str) -> list[tuple[dt.date, float]]:
        """The whole connectedness index history of `universe` (the overview chart)."""
        return self.reader.rows(
            "SELECT window_end, total FROM connectedness WHERE universe = ? ORDER BY window_end",
            [universe],
        )

    def index_in(self, window: DateWindow) -> list[tuple[dt.date, float]]:
        return self._select_window("connectedness", ["window_end", "total"], window)

    def fitted_end(self, window: DateWindow) -> dt.date:
        """The last window end inside `window` with a fitted model (the views' reference window)."""
        rows = self._select_window(
            "window_fits", ["max(window_end)"], window, where="skip_reason IS NULL", order_by=()
        )
        (end,) = rows[0]
        if end is None:
            msg = f"no fitted window of {window.universe!r} ends between {window.label}; widen the range"
            raise WindowError(msg)
        return end

    def health(self, window: DateWindow) -> list[tuple[Any, ...]]:
        """Per window: end, start, nobs, lags, spectral radius, stable, portmanteau p, skip reason."""
        return self._select_window(
            "window_fits",
            ["window_end", "window_start", "nobs", "lags", "spectral_radius", "stable",
             "portmanteau_p", "aic", "condition_number", "skip_reason"],
            window,
        )

    def directional(self, window: DateWindow) -> list[tuple[Any, ...]]:
        """Per window and series: to others, from others, net (percent)."""
        return self._select_window(
            "directional", ["window_end", "series", "to_others", "from_others", "net"], window,
            order_by=("window_end", "series"),
        )

    # -- tables at one window end or averaged over the window -------------------------------------------
    def _square(self, universe: Universe, rows: Sequence[tuple[Any, Any, Any]]) -> np.ndarray:
        """Rows (row label, column label, value) into an (n, n) array in series order; gaps are NaN."""
        pos = {s: i for i, s in enumerate(universe.series)}
        out = np.full((len(pos), len(pos)), np.nan)
        for a, b, value in rows:
            if a in pos and b in pos and value is not None:
                out[pos[a], pos[b]] = float(value)
        return out

    def pairwise_at(self, universe: Universe, end: dt.date) -> np.ndarray:
        """(n, n) table [target, source]: percent of target's variance due to source's shocks."""
        rows = self._select_window(
            "pairwise", ["target", "source", "share"], DateWindow(universe.name, end, end), order_by=()
        )
        return self._square(universe, rows)

    def pairwise_mean(self, window: DateWindow, universe: Universe) -> tuple[np.ndarray, int]:
        """(n, n) table [target, source] averaged over the window's windows, and how many."""
        rows = self._select_window(
            "pairwise", ["target", "source", "avg(share)", "count(*)"], window,
            group_by=("target", "source"), order_by=(),
        )
        count = max((int(r[3]) for r in rows), default=0)
        return self._square(universe, [r[:3] for r in rows]), count

    def directional_at(self, universe: Universe, end: dt.date) -> dict[str, tuple[float, float, float]]:
        rows = self._select_window(
            "directional", ["series", "to_others", "from_others", "net"],
            DateWindow(universe.name, end, end), order_by=(),
        )
        return {s: (float(t), float(f), float(n)) for s, t, f, n in rows}

    def granger_at(self, universe: Universe, end: dt.date) -> np.ndarray:
        """(n, n) p-values [caused, causing] at one window end (diagonal NaN)."""
        rows = self._select_window(
            "granger", ["caused", "causing", "p_value"], DateWindow(universe.name, end, end),
            order_by=(),
        )
        return self._square(universe, rows)

    def granger_share(
        self, window: DateWindow, universe: Universe, level: float
    ) -> tuple[np.ndarray, int]:
        """(n, n) share of windows [caused, causing] with p < `level`, and the number of windows."""
        rows = self._select_window(
            "granger",
            ["caused", "causing", "avg(CASE WHEN p_value < ? THEN 1.0 ELSE 0.0 END)", "count(*)"],
            window, select_params=[float(level)], group_by=("caused", "causing"), order_by=(),
        )
        count = max((int(r[3]) for r in rows), default=0)
        return self._square(universe, [r[:3] for r in rows]), count

    def fit(self, universe: Universe, end: dt.date) -> Fit:
        """The stored VAR of the window ending at `end`."""
        n = len(universe.series)
        rows = self.reader.rows(
            "SELECT p.lags, p.coefs, p.intercept, p.sigma_u, f.window_start "
            "FROM window_params p JOIN window_fits f USING (universe, window_end) "
            "WHERE p.universe = ? AND p.window_end = ?",
            [universe.name, end],
        )
        if not rows:
            msg = f"no stored model for {universe.name!r} at window end {end}"
            raise WindowError(msg)
        lags, coefs, intercept, sigma_u, start = rows[0]
        lags = int(lags)
        return Fit(
            universe=universe.name,
            window_end=end,
            window_start=start,
            lags=lags,
            coefs=_array(coefs, (lags, n, n)),  # type: ignore[arg-type]
            intercept=_array(intercept, (n,)) if intercept is not None else np.zeros(n),  # type: ignore[arg-type]
            sigma_u=_array(sigma_u, (n, n)),  # type: ignore[arg-type]
        )

    def responses(
        self, universe: Universe, end: dt.date, identification: str
    ) -> tuple[np.ndarray, np.ndarray | None, np.ndarray | None, float | None] | None:
        """Stored responses (H+1, n, n) [h, response, shock] with lower/upper bands, or None."""
        n = len(universe.series)
        rows = self.reader.rows(
            "SELECT horizon, response, lower, upper, coverage FROM responses "
            "WHERE universe = ? AND window_end = ? AND identification = ?",
            [universe.name, end, identification],
        )
        if not rows:
            return None
        horizon, response, lower, upper, coverage = rows[0]
        shape = (int(horizon) + 1, n, n)
        return (
            _array(response, shape),  # type: ignore[return-value]
            _array(lower, shape),
            _array(upper, shape),
            None if coverage is None else float(coverage),
        )

    def decomposition(self, universe: Universe, end: dt.date, method: str) -> np.ndarray | None:
        """Stored decomposition (H, n, n) [step, variable, shock], or None."""
        n = len(universe.series)
        rows = self.reader.rows(
            "SELECT horizon, share FROM decompositions "
            "WHERE universe = ? AND window_end = ? AND method = ?",
            [universe.name, end, method],
        )
        if not rows:
            return None
        horizon, share = rows[0]
        return _array(share, (int(horizon), n, n))

    def prepared(self, universe: Universe, start: dt.date, end: dt.date) -> np.ndarray:
        """The transformed data (T, n) the window's fit used, oldest row first, series in order."""
        cols = self._select_window(
            "prepared", ["date", "series", "value"], DateWindow(universe.name, start, end),
            date_column="date", order_by=("date",), as_arrays=True,
        )
        pos = {s: i for i, s in enumerate(universe.series)}
        dates, row = np.unique(np.asarray(cols["date"]), return_inverse=True)
        names, which = np.unique(np.asarray(cols["series"], dtype=object), return_inverse=True)
        col = np.array([pos.get(str(name), -1) for name in names], dtype=np.int64)[which]
        values = np.ma.filled(np.ma.asarray(cols["value"], dtype=np.float64), np.nan)
        keep = col >= 0
        out = np.full((dates.size, len(pos)), np.nan)
        out[row[keep], col[keep]] = values[keep]
        # a date with any series missing cannot enter a VAR; the pipeline's fits skip it too
        return out[~np.isnan(out).any(axis=1)]
