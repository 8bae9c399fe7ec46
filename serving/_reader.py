"""The one reader of the serving snapshot, used by the dashboard and the report exports.

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

Every statement is a constant string with ``?`` placeholders; values from the browser or the command
line travel only as parameters. Table and column names come from the schema declarations
(`serving._schema`), never from input. `Snapshot._select_window` is the one place that builds the
"rows of this universe inside this date window" filter.

Array columns are DuckDB ``DOUBLE[]`` lists flattened in C order from the arlib shapes declared in
`serving._schema` (and docs/warehouse.md); `_array` restores them. Series order is
``universe_series.position``.
"""

from __future__ import annotations

import bisect
import contextlib
import dataclasses
import datetime as dt
import json
import os
import re
import threading
from collections import OrderedDict
from collections.abc import Callable, Iterator, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from ._errors import SnapshotMissingError, StoredArrayError, WindowError
from ._results import StoredResult, position, stored_result
from ._schema import SCHEMA, columns, order_by, shape_of
from ._schema import table as schema_table

__all__ = [
    "BandHistory",
    "DateWindow",
    "Fit",
    "JointHistory",
    "Snapshot",
    "SnapshotReader",
    "Universe",
    "parse_date",
]

#: Columns of every served table (from the schema); `_select_window` checks against it.
TABLE_COLUMNS: dict[str, tuple[str, ...]] = {t.name: t.column_names for t in SCHEMA if t.served}

#: Tables a `Snapshot` keeps whole per universe as rows (columns, order); see `Snapshot._rows_of`.
_ROW_TABLES: dict[str, tuple[tuple[str, ...], tuple[str, ...]]] = {
    "window_fits": (
        ("window_end", "window_start", "nobs", "lags", "spectral_radius", "stable", "portmanteau_p",
         "aic", "condition_number", "skip_reason"),
        ("window_end",),
    ),
    "connectedness": (("window_end", "total"), ("window_end",)),
    "directional": (
        ("window_end", "series", "to_others", "from_others", "net"), ("window_end", "series")
    ),
    "shrinkage_fits": (
        ("window_end", "tightness", "tightness_chosen", "log_marginal_likelihood"), ("window_end",)
    ),
}
_SKIP_REASON = 9  # position of skip_reason in the window_fits rows above
#: Tables a `Snapshot` keeps per universe as (W, n, n) arrays: (row label, column label, value).
_CUBE_TABLES = {
    "pairwise": ("target", "source", "share"),
    "granger": ("caused", "causing", "p_value"),
}
#: Tables of arrays read in blocks of windows: (columns, filter on the variant or "").
_ARRAY_TABLES: dict[str, tuple[tuple[str, ...], str]] = {
    "responses": (("horizon", "response", "lower", "upper", "coverage"), "identification = ?"),
    "decompositions": (("horizon", "share"), "method = ?"),
    "window_params": (("lags", "coefs", "intercept", "sigma_u"), ""),
}
#: Consecutive windows fetched together from an array table.
_BLOCK_WINDOWS = 64

_MAX_DATE_TEXT = 32
#: Most values a `Snapshot` keeps per file and process, and their total size (bytes, estimated).
_CACHE_ENTRIES = 1024
_CACHE_BYTES = 192 * 2**20
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
    """A universe's settings as the last run stored them (`universes`, `universe_series`).

    `config` is the stored ``config_json`` (every fitting setting, e.g. ``bands``); `trend` is its
    deterministic terms ("n", "c", "ct"); `identification` is the stored name as written (the
    adapter, `serving.identification_of`, checks it).
    """

    name: str
    series: tuple[str, ...]
    horizon: int
    granger_level: float
    identification: str
    trend: str = "c"
    transforms: tuple[str, ...] = ()
    config_hash: str = ""
    config: dict[str, Any] = dataclasses.field(default_factory=dict, hash=False, compare=False)
    run_id: str | None = None

    @property
    def n(self) -> int:
        return len(self.series)

    @property
    def model(self) -> str:
        """"rolling" (windows of least squares) or "tvp" (the TVP-VAR filter: one result per date)."""
        return str(self.config.get("model", "rolling"))

    @property
    def estimator(self) -> str:
        """"ols" (least squares), "shrinkage" (the natural-conjugate shrinkage VAR) or "quantile"
        (quantile regression at each τ; the per-window tables hold the τ nearest 0.5,
        `Snapshot.quantile_history` every τ)."""
        return str(self.config.get("estimator", "ols"))


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


def _config(config_json: Any) -> dict[str, Any]:
    """The stored ``config_json`` as a dict ({} when missing or not a JSON object)."""
    try:
        config = json.loads(config_json)
    except (TypeError, ValueError):
        return {}
    return config if isinstance(config, dict) else {}


def _trend(config: dict[str, Any]) -> str:
    """The deterministic terms the universe's fits used ("n", "c", "ct"), from its stored config."""
    trend = config.get("trend", "c")
    return trend if trend in ("n", "c", "ct") else "c"


def _array(values: Sequence[float] | None, shape: tuple[int, ...], what: str = "stored array") -> np.ndarray | None:
    """A flattened C-order ``DOUBLE[]`` back to its arlib shape (read-only); NULL stays None."""
    if values is None:
        return None
    arr = np.asarray(values, dtype=np.float64)
    expected = int(np.prod(shape))
    if arr.size != expected:
        msg = (
            f"{what} has {arr.size} values, expected {expected} for shape {shape}; the snapshot does "
            "not follow docs/warehouse.md — publish it again with `shockflow run`"
        )
        raise StoredArrayError(msg)
    arr = arr.reshape(shape)
    arr.flags.writeable = False
    return arr


def _need(values: Sequence[float] | None, shape: tuple[int, ...], what: str) -> np.ndarray:
    """`_array` for a NOT NULL column: a NULL is a malformed snapshot."""
    arr = _array(values, shape, what)
    if arr is None:
        msg = f"{what} is NULL, which docs/warehouse.md does not allow; publish the snapshot again with `shockflow run`"
        raise StoredArrayError(msg)
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

    def arrow(self, sql: str, params: Sequence[Any] = ()) -> Any:
        """One parameterised statement's result as a `pyarrow.Table` (list columns stay flat)."""
        with self.cursor() as cur:
            return cur.sql(sql, params=list(params)).to_arrow_table()

    def close(self) -> None:
        with self._lock:
            handle, self._handle = self._handle, None
        if handle is not None:
            handle.retire()


@dataclasses.dataclass(frozen=True)
class _Rows:
    """One universe's rows of a per-window table, ordered by window end (bisect finds a window).

    `ends[k]` is the window end of `rows[k]`; a window may own several rows (one per series).
    """

    ends: list[dt.date]
    rows: list[tuple[Any, ...]]

    def between(self, start: dt.date, end: dt.date) -> list[tuple[Any, ...]]:
        """Rows whose window end lies in [start, end] (inclusive), in stored order."""
        return self.rows[bisect.bisect_left(self.ends, start) : bisect.bisect_right(self.ends, end)]


@dataclasses.dataclass(frozen=True)
class _Cube:
    """One universe's (row label × column label) table per window end, as dense arrays.

    ``values`` (W, n, n) [window, row series, column series], NaN where a row is missing or NULL;
    ``present`` (W, n, n) True where the snapshot has a row; ``ends`` the W window ends, ascending.
    Series positions follow ``universe_series.position``; labels outside the universe are dropped.
    """

    ends: list[dt.date]
    values: np.ndarray
    present: np.ndarray

    def span(self, start: dt.date, end: dt.date) -> slice:
        return slice(bisect.bisect_left(self.ends, start), bisect.bisect_right(self.ends, end))


def _nbytes(value: Any) -> int:
    """Rough size of a cached value (numpy arrays and Arrow tables counted; the rest nominal)."""
    if isinstance(value, np.ndarray):
        return int(value.nbytes)
    if isinstance(value, _Cube):
        return int(value.values.nbytes + value.present.nbytes) + 16 * len(value.ends)
    if isinstance(value, _Rows):
        return 160 * len(value.rows)
    if isinstance(value, _Block):
        return value.nbytes
    if isinstance(value, (list, tuple, dict)):
        return 64 * len(value) + 256
    return 1024


@dataclasses.dataclass(frozen=True)
class _Block:
    """Array rows of one universe for a run of consecutive window ends: end → the row's values.

    Fetched in one statement through Arrow (one scan of the list columns serves `_BLOCK_WINDOWS`
    windows); each array is a read-only view of the fetched buffer, flat in C order.
    """

    rows: dict[dt.date, tuple[Any, ...]]
    nbytes: int


@dataclasses.dataclass(frozen=True, eq=False)
class BandHistory:
    """Frequency-band connectedness of every stored window (Baruník–Křehlík 2018), in percent.

    ends: W window ends; periods: d bands as (shortest, longest] cycle lengths in rows; total,
    within, share: (W, d); to_others, from_others: (W, d, n); table: (W, d, n, n) [window, band,
    variable, shock]; truncation: the MA terms behind them (bands add up to the index at that horizon).
    """

    ends: list[dt.date]
    periods: tuple[tuple[float, float], ...]
    total: np.ndarray
    within: np.ndarray
    share: np.ndarray
    to_others: np.ndarray
    from_others: np.ndarray
    table: np.ndarray
    truncation: int

    def at(self, end: dt.date) -> int:
        """Position of window `end` (WindowError when it has no band results)."""
        return position(self.ends, end, "frequency-band results")

    def index_like(self, other: StoredResult) -> np.ndarray | None:
        """(W,) the generalized index the bands add up to (at `truncation` steps) for the windows of
        another band result `other`, or None unless both are stored for the same windows and
        truncation (then the two are comparable window by window)."""
        if self.ends != other.ends or self.truncation != other.truncation:
            return None
        return self.total.sum(axis=1)


@dataclasses.dataclass(frozen=True, eq=False)
class JointHistory:
    """Joint connectedness of every stored window (Lastrapes & Wiesen 2021), in percent.

    ends: W window ends; total, generalized_total: (W,); from_others: (W, n).
    """

    ends: list[dt.date]
    total: np.ndarray
    generalized_total: np.ndarray
    from_others: np.ndarray


@dataclasses.dataclass(frozen=True)
class QuantileHistory:
    """Quantile connectedness of every stored window (Ando, Greenwood-Nimmo & Shin 2022), percent.

    ends: W window ends; quantiles: (Q,) the τ levels, increasing; total: (W, Q);
    to_others, from_others, net: (W, Q, n); table: (W, Q, n, n) [window, τ, variable, shock].
    """

    ends: list[dt.date]
    quantiles: np.ndarray
    total: np.ndarray
    to_others: np.ndarray
    from_others: np.ndarray
    net: np.ndarray
    table: np.ndarray

    def at(self, end: dt.date) -> int:
        """Index of the last stored window ending on or before `end` (0 when none is)."""
        return max(bisect.bisect_right(self.ends, end) - 1, 0)


class Snapshot:
    """The dashboard's questions to the snapshot, each one parameterised statement.

    Answers are read through caches kept per snapshot file (the reader's generation: a replaced
    file starts afresh) and per process, bounded in entries and bytes, least recently used first out:

    - per universe, the small per-window tables as rows ordered by window end (window fits, the
      connectedness index, directional spillovers), so a date window is two bisections;
    - per universe, the pairwise spillover and Granger tables as dense (W, n, n) arrays, so a mean
      over a date window is one numpy reduction;
    - the array tables (responses, decompositions, window parameters) in blocks of consecutive
      windows, one Arrow fetch per block: DuckDB decodes a table's list columns a row group at a
      time whatever the filter, so one window costs a scan and a block costs about the same.
    """

    def __init__(self, reader: SnapshotReader | str | os.PathLike[str]) -> None:
        self.reader = reader if isinstance(reader, SnapshotReader) else SnapshotReader(reader)
        self._cache_lock = threading.Lock()
        self._cache_generation = -1
        self._cache: OrderedDict[Any, tuple[Any, int]] = OrderedDict()
        self._cache_bytes = 0

    @property
    def path(self) -> Path:
        return self.reader.path

    def close(self) -> None:
        """Close the open file (a later query opens it again)."""
        self.reader.close()

    def __enter__(self) -> Snapshot:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def tables(self) -> frozenset[str]:
        """Names of the tables (and views) the snapshot file holds."""
        rows = self.reader.rows(
            "SELECT table_name FROM information_schema.tables WHERE table_catalog = 'snap'"
        )
        return frozenset(r[0] for r in rows)

    def has(self, table: str) -> bool:
        return table in self.tables()

    def require(self, tables: Sequence[str]) -> None:
        """Raise `SnapshotMissingError` naming the file and the fix unless every table is there."""
        present = self.tables()
        missing = [t for t in tables if t not in present]
        if missing:
            msg = (
                f"serving snapshot {self.path} lacks table(s) {', '.join(missing)}; it was not "
                "written by `shockflow run` of this version (see docs/warehouse.md)"
            )
            raise SnapshotMissingError(msg)

    def cached(self, key: Any, compute: Callable[[], Any]) -> Any:
        """`compute()` once per snapshot file and `key` (a replaced file starts afresh)."""
        return self._cached(key, compute)

    def _cached(self, key: Any, compute: Callable[[], Any]) -> Any:
        # pinned: the generation read here and every query of compute() see the same file
        with self.reader.pinned():
            generation = self.reader.current_generation()
            if generation < self._cache_generation:  # a request pinned to a replaced file
                return compute()
            with self._cache_lock:
                if generation != self._cache_generation:
                    self._cache.clear()
                    self._cache_bytes = 0
                    self._cache_generation = generation
                hit = self._cache.get(key)
                if hit is not None:
                    self._cache.move_to_end(key)
                    return hit[0]
            value = compute()
            size = _nbytes(value)
            with self._cache_lock:
                if generation == self._cache_generation and key not in self._cache:
                    self._cache[key] = (value, size)
                    self._cache_bytes += size
                    while self._cache and (
                        len(self._cache) > _CACHE_ENTRIES or self._cache_bytes > _CACHE_BYTES
                    ):
                        _, (_, old) = self._cache.popitem(last=False)
                        self._cache_bytes -= old
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
        as_arrow: bool = False,
    ) -> Any:
        """Rows of `table` for ``window.universe`` with `date_column` inside the window (inclusive).

        `table`, `columns`, `date_column`, `where`, `group_by` and `order_by` are constants of this
        module (plain column names are checked against `TABLE_COLUMNS`); `where` may hold ``?``
        placeholders whose values come in `params` (`select_params` for placeholders inside
        `columns`) — values from the browser never enter the SQL text. Every select-by-date-window
        that reaches DuckDB goes through here (the cached tables are filtered in memory).
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
        if as_arrow:
            return self.reader.arrow(sql, values)
        if as_arrays:
            return self.reader.arrays(sql, values)
        return self.reader.rows(sql, values)

    # -- universes ----------------------------------------------------------------------------
    def universes(self) -> dict[str, Universe]:
        """Every universe in the snapshot, with its series in stored column order."""
        return self._cached("universes", self._universes)

    def _universes(self) -> dict[str, Universe]:
        rows = self.reader.rows(
            "SELECT u.universe, u.horizon, u.granger_level, u.identification, u.config_json, "
            "u.config_hash, u.run_id, s.series, s.transform FROM universes u "
            "JOIN universe_series s USING (universe) ORDER BY u.universe, s.position"
        )
        out: dict[str, Universe] = {}
        series: dict[str, list[tuple[str, str]]] = {}
        for name, horizon, level, ident, config_json, config_hash, run_id, name_s, transform in rows:
            if name not in out:
                config = _config(config_json)
                out[name] = Universe(
                    name, (), int(horizon), float(level), str(ident), _trend(config),
                    config_hash=str(config_hash), config=config, run_id=run_id,
                )  # fmt: skip
            series.setdefault(name, []).append((str(name_s), str(transform)))
        return {
            name: dataclasses.replace(
                u, series=tuple(s for s, _ in series[name]), transforms=tuple(t for _, t in series[name])
            )
            for name, u in out.items()
        }

    def universe(self, name: Any) -> Universe:
        """The named universe, or `WindowError` (the name came from the browser)."""
        universes = self.universes()
        if not isinstance(name, str) or name not in universes:
            shown = str(name)[:40]
            msg = f"unknown universe {shown!r}; pick one of {sorted(universes)}"
            raise WindowError(msg)
        return universes[name]

    def counterpart(self, universe: Universe) -> Universe | None:
        """The universe of the other model (rolling ↔ tvp) on the same series in the same order,
        or None; with several, the first by name. This is how "configured both ways" is found."""
        for name in sorted(self.universes()):
            other = self.universes()[name]
            if other.model != universe.model and other.series == universe.series and other.estimator == universe.estimator:
                return other
        return None

    # -- per-universe tables kept in memory --------------------------------------------------------
    def _rows_of(self, table: str, universe: str) -> _Rows:
        """All rows of `universe` in one of the small per-window tables, ordered by window end."""
        columns, order = _ROW_TABLES[table]

        def load() -> _Rows:
            rows = self._select_window(
                table, columns, DateWindow(universe, dt.date.min, dt.date.max), order_by=order
            )
            return _Rows([r[0] for r in rows], rows)

        return self._cached(("rows", table, universe), load)

    def _cube(self, table: str, universe: Universe) -> _Cube:
        """`universe`'s pairwise or Granger table for every window, as (W, n, n) arrays."""
        row_col, col_col, value_col = _CUBE_TABLES[table]

        def load() -> _Cube:
            cols = self._select_window(
                table, ["window_end", row_col, col_col, value_col],
                DateWindow(universe.name, dt.date.min, dt.date.max), order_by=(), as_arrays=True,
            )  # fmt: skip
            n = len(universe.series)
            ends, w = np.unique(np.asarray(cols["window_end"]), return_inverse=True)
            pos = {s: i for i, s in enumerate(universe.series)}

            def positions(labels: Any) -> np.ndarray:
                names, which = np.unique(np.asarray(labels, dtype=object).astype(str), return_inverse=True)
                return np.array([pos.get(x, -1) for x in names.tolist()], dtype=np.int64)[which]

            i, j = positions(cols[row_col]), positions(cols[col_col])
            keep = (i >= 0) & (j >= 0)
            values = np.full((ends.size, n, n), np.nan)
            present = np.zeros((ends.size, n, n), dtype=bool)
            raw = np.ma.filled(np.ma.asarray(cols[value_col], dtype=np.float64), np.nan)
            values[w[keep], i[keep], j[keep]] = raw[keep]
            present[w[keep], i[keep], j[keep]] = True
            values.flags.writeable = False
            present.flags.writeable = False
            return _Cube(ends.astype("datetime64[D]").tolist(), values, present)

        return self._cached(("cube", table, universe.name), load)

    def _block(self, table: str, universe: str, end: dt.date, variant: str | None = None) -> _Block | None:
        """The block of `table`'s array rows holding window `end` (None: `end` is no stored window).

        Blocks are runs of `_BLOCK_WINDOWS` consecutive window ends of ``window_fits``; `variant` is
        the identification (responses) or method (decompositions).
        """
        ends = self._rows_of("window_fits", universe).ends
        k = bisect.bisect_left(ends, end)
        if k == len(ends) or ends[k] != end:
            return None
        b = k // _BLOCK_WINDOWS
        lo, hi = ends[b * _BLOCK_WINDOWS], ends[min(len(ends), (b + 1) * _BLOCK_WINDOWS) - 1]
        columns, where = _ARRAY_TABLES[table]

        def load() -> _Block:
            table_ = self._select_window(
                table, ["window_end", *columns], DateWindow(universe, lo, hi), where=where,
                params=[] if variant is None else [variant], order_by=(), as_arrow=True,
            )  # fmt: skip
            decoded = []
            for name in ("window_end", *columns):
                col = table_.column(name).combine_chunks()
                if hasattr(col, "offsets"):  # a list column: one flat buffer, offsets per row
                    flat = col.values.to_numpy(zero_copy_only=False)
                    offsets = col.offsets.to_numpy()
                    valid = col.is_valid().to_numpy(zero_copy_only=False)
                    decoded.append([
                        flat[offsets[r] : offsets[r + 1]] if valid[r] else None for r in range(len(col))
                    ])  # fmt: skip
                else:
                    decoded.append(col.to_pylist())
            rows = {r[0]: r[1:] for r in zip(*decoded, strict=True)}
            return _Block(rows, int(table_.nbytes) + 256 * len(rows))

        return self._cached(("block", table, universe, variant, b), load)

    def date_bounds(self, universe: str) -> tuple[dt.date, dt.date]:
        """First and last window end stored for `universe`."""
        ends = self._rows_of("window_fits", universe).ends
        if not ends:
            msg = f"universe {universe!r} has no windows in the snapshot yet"
            raise WindowError(msg)
        return ends[0], ends[-1]

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
        return list(self._rows_of("connectedness", universe).rows)

    def tightness_in(self, window: DateWindow) -> list[tuple[dt.date, float, bool, float]]:
        """Per window of a shrinkage universe: end, λ, whether it was chosen, log marginal
        likelihood (empty for other universes)."""
        return self._rows_of("shrinkage_fits", window.universe).between(window.start, window.end)

    def index_in(self, window: DateWindow) -> list[tuple[dt.date, float]]:
        return self._rows_of("connectedness", window.universe).between(window.start, window.end)

    def fitted_end(self, window: DateWindow) -> dt.date:
        """The last window end inside `window` with a fitted model (the views' reference window)."""
        rows = self._rows_of("window_fits", window.universe).between(window.start, window.end)
        for row in reversed(rows):
            if row[_SKIP_REASON] is None:
                return row[0]
        msg = f"no fitted window of {window.universe!r} ends between {window.label}; widen the range"
        raise WindowError(msg)

    def health(self, window: DateWindow) -> list[tuple[Any, ...]]:
        """Per window: end, start, nobs, lags, spectral radius, stable, portmanteau p, aic,
        condition number, skip reason."""
        return self._rows_of("window_fits", window.universe).between(window.start, window.end)

    def directional(self, window: DateWindow) -> list[tuple[Any, ...]]:
        """Per window and series: to others, from others, net (percent)."""
        return self._rows_of("directional", window.universe).between(window.start, window.end)

    # -- tables at one window end or averaged over the window -------------------------------------------
    def _square(self, universe: Universe, rows: Sequence[tuple[Any, Any, Any]]) -> np.ndarray:
        """Rows (row label, column label, value) into an (n, n) array in series order; gaps are NaN."""
        pos = {s: i for i, s in enumerate(universe.series)}
        out = np.full((len(pos), len(pos)), np.nan)
        for a, b, value in rows:
            if a in pos and b in pos and value is not None:
                out[pos[a], pos[b]] = float(value)
        return out

    def _at(self, table: str, universe: Universe, end: dt.date) -> np.ndarray:
        cube = self._cube(table, universe)
        k = bisect.bisect_left(cube.ends, end)
        if k == len(cube.ends) or cube.ends[k] != end:
            n = len(universe.series)
            return np.full((n, n), np.nan)
        return cube.values[k].copy()

    def pairwise_at(self, universe: Universe, end: dt.date) -> np.ndarray:
        """(n, n) table [target, source]: percent of target's variance due to source's shocks."""
        return self._at("pairwise", universe, end)

    def pairwise_mean(self, window: DateWindow, universe: Universe) -> tuple[np.ndarray, int]:
        """(n, n) table [target, source] averaged over the window's windows, and how many.

        Per cell: the mean of its non-NULL shares (NaN if none); the count is the most windows any
        cell has a row in — as ``avg(share)``, ``count(*)`` grouped by (target, source) would give.
        """
        cube = self._cube("pairwise", universe)
        span = cube.span(window.start, window.end)
        present = cube.present[span]
        values = cube.values[span]
        count = int(present.sum(axis=0).max()) if present.shape[0] else 0
        known = present & ~np.isnan(values)
        k = known.sum(axis=0)
        total = np.where(known, values, 0.0).sum(axis=0)
        with np.errstate(invalid="ignore", divide="ignore"):
            mean = np.where(k > 0, total / np.maximum(k, 1), np.nan)
        return mean, count

    def directional_at(self, universe: Universe, end: dt.date) -> dict[str, tuple[float, float, float]]:
        rows = self._rows_of("directional", universe.name).between(end, end)
        return {s: (float(t), float(f), float(n)) for _, s, t, f, n in rows}

    def spillover_sums(self, universe: Universe, end: dt.date) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Stored (to others, from others, net), each (n,) in series order, at one window end.

        These are arlib's directional sums as the run stored them (`directional`); NaN where a row
        is missing. Use them rather than summing the pairwise table again.
        """
        pos = {s: i for i, s in enumerate(universe.series)}
        out = np.full((3, len(pos)), np.nan)
        for _, s, t, f, net in self._rows_of("directional", universe.name).between(end, end):
            if s in pos:
                out[:, pos[s]] = (t, f, net)
        return out[0], out[1], out[2]

    def spillover_sums_mean(
        self, window: DateWindow, universe: Universe
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray, int]:
        """Stored (to, from, net) averaged over the windows ending inside `window`, and how many.

        The sums are linear in the pairwise table, so these equal the sums of `pairwise_mean`'s
        table whenever every window has every row.
        """
        pos = {s: i for i, s in enumerate(universe.series)}
        rows = self._rows_of("directional", universe.name).between(window.start, window.end)
        total = np.zeros((3, len(pos)))
        count = np.zeros(len(pos))
        ends = set()
        for end, s, t, f, net in rows:
            if s in pos and None not in (t, f, net):
                total[:, pos[s]] += (t, f, net)
                count[pos[s]] += 1
                ends.add(end)
        with np.errstate(invalid="ignore", divide="ignore"):
            mean = np.where(count > 0, total / np.maximum(count, 1), np.nan)
        return mean[0], mean[1], mean[2], len(ends)

    def granger_at(self, universe: Universe, end: dt.date) -> np.ndarray:
        """(n, n) p-values [caused, causing] at one window end (diagonal NaN)."""
        return self._at("granger", universe, end)

    def granger_share(
        self, window: DateWindow, universe: Universe, level: float
    ) -> tuple[np.ndarray, int]:
        """(n, n) share of windows [caused, causing] with p < `level`, and the number of windows.

        A NULL p-value counts as not significant (as ``CASE WHEN p_value < level`` would).
        """
        cube = self._cube("granger", universe)
        span = cube.span(window.start, window.end)
        present = cube.present[span]
        with np.errstate(invalid="ignore"):
            significant = present & (cube.values[span] < float(level))
        k = present.sum(axis=0)
        count = int(k.max()) if present.shape[0] else 0
        with np.errstate(invalid="ignore", divide="ignore"):
            share = np.where(k > 0, significant.sum(axis=0) / np.maximum(k, 1), np.nan)
        return share, count

    def fit(self, universe: Universe, end: dt.date) -> Fit:
        """The stored VAR of the window ending at `end`."""
        n = len(universe.series)
        block = self._block("window_params", universe.name, end)
        row = None if block is None else block.rows.get(end)
        if row is None:
            msg = f"no stored model for {universe.name!r} at window end {end}"
            raise WindowError(msg)
        lags, coefs, intercept, sigma_u = row
        fits = self._rows_of("window_fits", universe.name)
        start = fits.rows[bisect.bisect_left(fits.ends, end)][1]
        lags = int(lags)
        return Fit(
            universe=universe.name,
            window_end=end,
            window_start=start,
            lags=lags,
            coefs=_need(coefs, shape_of("window_params", "coefs", n=n, p=lags), "window_params.coefs"),
            intercept=(
                _need(intercept, shape_of("window_params", "intercept", n=n), "window_params.intercept")
                if intercept is not None
                else np.zeros(n)
            ),
            sigma_u=_need(sigma_u, shape_of("window_params", "sigma_u", n=n), "window_params.sigma_u"),
        )

    def responses(
        self, universe: Universe, end: dt.date, identification: str
    ) -> tuple[np.ndarray, np.ndarray | None, np.ndarray | None, float | None] | None:
        """Stored responses (H+1, n, n) [h, response, shock] with lower/upper bands, or None."""
        n = len(universe.series)
        block = self._block("responses", universe.name, end, identification)
        row = None if block is None else block.rows.get(end)
        if row is None:
            return None
        horizon, response, lower, upper, coverage = row
        shape = shape_of("responses", "response", n=n, h=int(horizon))
        return (
            _need(response, shape, "responses.response"),
            _array(lower, shape),
            _array(upper, shape),
            None if coverage is None else float(coverage),
        )

    def decomposition(self, universe: Universe, end: dt.date, method: str) -> np.ndarray | None:
        """Stored decomposition (H, n, n) [step, variable, shock], or None."""
        n = len(universe.series)
        block = self._block("decompositions", universe.name, end, method)
        row = None if block is None else block.rows.get(end)
        if row is None:
            return None
        horizon, share = row
        return _need(share, shape_of("decompositions", "share", n=n, h=int(horizon)), "decompositions.share")

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

    # -- whole histories and lineage (the report and its extracts) ----------------------------------
    # -- declared results (serving/_schema.py `fill`): frequency bands, joint connectedness, … ------
    def results(self, table_name: str, universe: Universe) -> StoredResult | None:
        """Every stored window of declared result table `table_name` as arrays (`StoredResult`),
        or None when the universe stores none (or the snapshot predates the table)."""
        t = schema_table(table_name)
        if not t.fill:
            msg = f"{table_name!r} is not a declared result table; declared: {[x.name for x in SCHEMA if x.fill]}"
            raise KeyError(msg)

        def load() -> StoredResult | None:
            if not self.has(table_name):
                return None
            return stored_result(t, self.history(table_name, universe.name), len(universe.series))

        return self._cached(("results", table_name, universe.name), load)

    def band_history(self, universe: Universe) -> BandHistory | None:
        """Frequency-band connectedness of every window, or None when the universe stores none."""
        r = self.results("band_connectedness", universe)
        if r is None:
            return None
        return BandHistory(
            ends=r.ends, periods=r.periods, total=r["total"], within=r["within_total"],
            share=r["band_share"], to_others=r["to_others"], from_others=r["from_others"],
            table=r["shares"], truncation=int(r.truncation or 0),
        )  # fmt: skip

    def joint_history(self, universe: Universe) -> JointHistory | None:
        """Joint connectedness of every window, or None when the universe stores none."""
        r = self.results("joint_connectedness", universe)
        if r is None:
            return None
        return JointHistory(r.ends, r["total"], r["generalized_total"], r["from_others"])

    def quantile_history(self, universe: Universe) -> QuantileHistory | None:
        """Connectedness at every τ of every window, or None when the universe stores none."""

        def load() -> QuantileHistory | None:
            if not self.has("quantile_connectedness"):
                return None
            t = self.history("quantile_connectedness", universe.name)
            if t.num_rows == 0:
                return None
            col = {name: t.column(name).to_pylist() for name in ("window_end", "quantile", "total", "to_others", "from_others", "net", "shares")}
            taus = sorted(set(col["quantile"]))
            Q, n = len(taus), len(universe.series)
            W = t.num_rows // Q
            if W * Q != t.num_rows or col["quantile"][:Q] * W != col["quantile"]:
                msg = f"universe {universe.name!r}: quantile_connectedness rows are not whole windows (every τ per window)"
                raise StoredArrayError(msg)

            def grid(name: str, *shape: int) -> np.ndarray:
                out = np.asarray(col[name] if not shape else [_need(v, shape, f"quantile_connectedness.{name}") for v in col[name]],
                                 dtype=np.float64).reshape(W, Q, *shape)  # fmt: skip
                out.flags.writeable = False
                return out

            quantiles = np.asarray(taus)
            quantiles.flags.writeable = False
            return QuantileHistory(
                ends=col["window_end"][::Q], quantiles=quantiles, total=grid("total"),
                to_others=grid("to_others", n), from_others=grid("from_others", n), net=grid("net", n),
                table=grid("shares", n, n),
            )  # fmt: skip

        return self._cached(("quantile", universe.name), load)

    def universe_names(self) -> list[str]:
        return sorted(self.universes())

    def latest_window(self, universe: str, as_of: dt.date | None = None) -> dt.date | None:
        """Last window end (fitted or skipped) on or before `as_of` (any date when None)."""
        ends = self._rows_of("window_fits", universe).ends
        k = len(ends) if as_of is None else bisect.bisect_right(ends, as_of)
        return ends[k - 1] if k else None

    def latest_fitted_window(self, universe: str, as_of: dt.date | None = None) -> dt.date | None:
        """Last fitted window end (one with a connectedness row) on or before `as_of`."""
        ends = self._rows_of("connectedness", universe).ends
        k = len(ends) if as_of is None else bisect.bisect_right(ends, as_of)
        return ends[k - 1] if k else None

    def history(self, table: str, universe: str, as_of: dt.date | None = None) -> Any:
        """Every row of per-window `table` for `universe` up to `as_of`, all declared columns, as a
        `pyarrow.Table` ordered by window end and then the table's label columns."""
        cols = columns(table)
        labels = [c for c in (*_LABEL_ORDER.get(table, ()), "band") if c in cols]
        return self._select_window(
            table, cols, DateWindow(universe, dt.date.min, as_of or dt.date.max),
            order_by=(*order_by(table)[1:], *labels), as_arrow=True,
        )  # fmt: skip

    def variants(self, table: str, universe: str, end: dt.date) -> list[str]:
        """The identifications (`responses`) or methods (`decompositions`) stored at one window."""
        column = _VARIANT[table]
        rows = self._select_window(
            table, [column], DateWindow(universe, end, end), order_by=(column,)
        )
        return [str(r[0]) for r in rows]

    def runs(self, universe: str) -> Any:
        """The universe's `runs` rows, newest first (`pyarrow.Table`)."""
        return self.reader.arrow(
            f"SELECT {', '.join(columns('runs'))} FROM runs WHERE universe = ? ORDER BY started DESC",
            [universe],
        )

    def source_batches(self, universe: str, as_of: dt.date, before: dt.datetime | None = None) -> Any:
        """Ingest batches behind the universe's results, newest first (`pyarrow.Table`).

        With `observations` in the file: exactly the batches that supplied the universe's series up
        to `as_of`. Without it (the published snapshot leaves observations in the working
        warehouse): the batches that started before `before` (the run's finish), i.e. the data the
        run could have read. None when the file has no `ingest_batches`.
        """
        present = self.tables()
        if "ingest_batches" not in present:
            return None
        cols = ", ".join(f"b.{c}" for c in columns("ingest_batches"))
        if "observations" in present:
            return self.reader.arrow(
                f"SELECT {cols} FROM ingest_batches b WHERE b.batch_id IN ("
                "SELECT DISTINCT o.batch_id FROM observations o JOIN universe_series s "
                "ON o.series = s.series WHERE s.universe = ? AND o.date <= ?) "
                "ORDER BY b.started DESC",
                [universe, as_of],
            )
        return self.reader.arrow(
            f"SELECT {cols} FROM ingest_batches b "
            "WHERE CAST(? AS TIMESTAMP) IS NULL OR b.started <= CAST(? AS TIMESTAMP) "
            "ORDER BY b.started DESC",
            [before, before],
        )


#: After window_end, the columns that order a table's rows within one window.
_LABEL_ORDER: dict[str, tuple[str, ...]] = {
    "directional": ("series",),
    "pairwise": ("target", "source"),
    "granger": ("caused", "causing"),
    "responses": ("identification",),
    "decompositions": ("method",),
    "quantile_connectedness": ("quantile",),
}
#: The column naming an array table's variants.
_VARIANT = {"responses": "identification", "decompositions": "method"}
