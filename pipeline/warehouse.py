"""The DuckDB warehouse: schema, connections, observation upserts and one-transaction result writes.

The schema is declared once, as data, in `serving._schema` (docs/warehouse.md's table is generated
from the same declarations); the DDL here is generated from it. Tables carry no
primary-key index (bulk inserts stay fast); uniqueness is kept by construction:

- observations: :func:`upsert_observations` updates changed values in place (logging each change
  in `revisions`) and inserts only (series, date) pairs not yet stored;
- results: :func:`store_universe_results` deletes the rows of every window it writes, then inserts,
  inside one transaction — a rerun never duplicates rows, and a crash leaves the previous state.

Runs are recorded as `running` when they start (committed at once) and become `succeeded` in the same
transaction that writes their results. A `running` row found by the next start belongs to a process
that died: :func:`mark_interrupted` marks it `failed`.
"""

from __future__ import annotations

import json
import threading
import uuid
from collections.abc import Iterator, Mapping
from contextlib import contextmanager
from dataclasses import dataclass
from datetime import UTC, date, datetime
from pathlib import Path
from typing import TYPE_CHECKING, Any

import duckdb
import polars as pl
import pyarrow as pa

from pipeline.errors import WarehouseError, from_duckdb
from serving import _schema as schema
from serving._schema import (
    RESULT_TABLES,
    SCHEMA_VERSION,
    SNAPSHOT_TABLES,
    STATE_TABLES,
    UNIVERSE_TABLES,
)
from serving._views import VIEWS, create_views, view_tag

if TYPE_CHECKING:
    from pipeline.config import UniverseConfig

__all__ = [
    "RESULT_TABLES",
    "SCHEMA_VERSION",
    "SNAPSHOT_TABLES",
    "STATE_TABLES",
    "TABLES",
    "IngestCounts",
    "begin_run",
    "connect",
    "ensure_schema",
    "fail_run",
    "finish_batch",
    "hold",
    "mark_interrupted",
    "new_id",
    "query",
    "read_observations",
    "start_batch",
    "store_universe_results",
    "stored_state",
    "upsert_observations",
]

#: table → column definitions, generated from the declarations. Order of columns is the order of inserts.
TABLES: dict[str, str] = {t.name: schema.ddl(t.name) for t in schema.SCHEMA}


def now() -> datetime:
    """Current time in UTC, naive (DuckDB TIMESTAMP columns hold UTC)."""
    return datetime.now(UTC).replace(tzinfo=None)


def new_id(prefix: str) -> str:
    """A sortable unique id, e.g. 'run-20240102T220001-3fa9c2d1'."""
    return f"{prefix}-{now():%Y%m%dT%H%M%S}-{uuid.uuid4().hex[:8]}"


def connect(path: str | Path, *, read_only: bool = False) -> duckdb.DuckDBPyConnection:
    """Open the warehouse at `path` (creating folder, file and schema unless read-only)."""
    path = Path(path)
    try:
        if not read_only:
            path.parent.mkdir(parents=True, exist_ok=True)
        elif not path.exists():
            msg = f"warehouse {str(path)!r} does not exist; run `shockflow run --config FILE` first"
            raise WarehouseError(msg)
        con = duckdb.connect(str(path), read_only=read_only)
    except duckdb.Error as exc:
        raise from_duckdb(exc, path=path, action="opening") from None
    except OSError as exc:
        msg = f"warehouse {str(path)!r}: cannot create its folder ({exc.strerror}); choose another [warehouse] path"
        raise WarehouseError(msg) from None
    if not read_only and _held_key(path) not in _HELD:  # a held warehouse's schema was ensured
        ensure_schema(con, path=path)
    return con


#: Warehouses held open by `hold` in this process: resolved path → number of holds. Their schema
#: was ensured when the hold opened and the open database cannot change under it, so the
#: connections of a run's steps (three per universe) skip the catalog check (~2 ms each).
_HELD: dict[str, int] = {}
_HELD_LOCK = threading.Lock()


def _held_key(path: Path) -> str:
    return str(path.resolve())


def _schema_current(con: duckdb.DuckDBPyConnection) -> bool:
    """Every table exists, every view carries this code's `view_tag` and the version is this one:
    what `ensure_schema` would leave, checked by reading the catalog (about 1 ms, where the DDL
    takes about 20 ms — and the nightly job connects three times per universe)."""
    try:
        tables = {
            r[0]
            for r in con.execute(
                "SELECT table_name FROM duckdb_tables() WHERE database_name = current_database() AND schema_name = 'main'"
            ).fetchall()
        }
        if not set(TABLES) <= tables:
            return False
        have = _table_columns(con)
        if any(not set(schema.columns(name)) <= have.get(name, set()) for name in TABLES):
            return False  # a column added since the file was made (`_add_columns`)
        views = dict(
            con.execute(
                "SELECT view_name, comment FROM duckdb_views() "
                "WHERE database_name = current_database() AND schema_name = 'main' AND NOT internal"
            ).fetchall()
        )
        if any(views.get(name) != view_tag(name) for name in VIEWS):
            return False
        row = con.execute("SELECT max(version) FROM schema_version").fetchone()
    except duckdb.Error:
        return False
    return row is not None and row[0] == SCHEMA_VERSION


def ensure_schema(con: duckdb.DuckDBPyConnection, *, path: str | Path = "?") -> None:
    """Create every table if missing (idempotent), (re)create the long views, record the version once.

    A file whose schema is already this code's (`_schema_current`) is left as it is.
    """
    if _schema_current(con):
        return
    try:
        con.execute("BEGIN TRANSACTION")
        for name, columns in TABLES.items():
            con.execute(f"CREATE TABLE IF NOT EXISTS {name} ({columns})")
        _add_columns(con, _table_columns(con))
        create_views(con)
        row = con.execute("SELECT max(version) FROM schema_version").fetchone()
        found = row[0] if row else None
        if found is None:
            con.execute("INSERT INTO schema_version VALUES (?, ?)", [SCHEMA_VERSION, now()])
        elif found > SCHEMA_VERSION:
            con.execute("ROLLBACK")
            msg = (
                f"warehouse {str(path)!r} has schema version {found}, newer than this shockflow's "
                f"{SCHEMA_VERSION}; upgrade shockflow or use another [warehouse] path"
            )
            raise WarehouseError(msg)
        con.execute("COMMIT")
    except duckdb.Error as exc:
        _rollback(con)
        raise from_duckdb(exc, path=path, action="creating the schema") from None


def _table_columns(con: duckdb.DuckDBPyConnection) -> dict[str, set[str]]:
    """Table name → its column names, for the tables of this database's main schema."""
    have: dict[str, set[str]] = {}
    for table, column in con.execute(
        "SELECT table_name, column_name FROM duckdb_columns() "
        "WHERE database_name = current_database() AND schema_name = 'main'"
    ).fetchall():
        have.setdefault(table, set()).add(column)
    return have


def _add_columns(con: duckdb.DuckDBPyConnection, have: Mapping[str, set[str]]) -> None:
    """Add the declared columns an existing table lacks (`have`: `_table_columns`). Such columns
    are declared last and nullable (a later addition to a table, e.g. `tvp_state.centre`), so rows
    already stored keep their values, get NULL in the new column, and the physical order stays
    the declared one."""
    for t in schema.SCHEMA:
        for c in t.columns:
            if c.name not in have.get(t.name, {c.name}):
                if c.not_null:
                    msg = f"table {t.name!r} lacks NOT NULL column {c.name!r}; declare added columns nullable"
                    raise AssertionError(msg)
                con.execute(f"ALTER TABLE {t.name} ADD COLUMN {c.sql()}")


def _rollback(con: duckdb.DuckDBPyConnection) -> None:
    try:
        con.execute("ROLLBACK")
    except duckdb.Error:
        pass


@contextmanager
def hold(path: str | Path) -> Iterator[duckdb.DuckDBPyConnection]:
    """Keep the warehouse open for a whole run.

    DuckDB checkpoints a database when its last connection closes; steps that each open and close
    their own connection would checkpoint (and reopen) between every step. While this anchor is
    open, those connections share the open database.
    """
    con = connect(path)
    key = _held_key(Path(path))
    with _HELD_LOCK:
        _HELD[key] = _HELD.get(key, 0) + 1
    try:
        yield con
    finally:
        with _HELD_LOCK:
            if _HELD[key] == 1:
                del _HELD[key]
            else:
                _HELD[key] -= 1
        con.close()


@contextmanager
def transaction(con: duckdb.DuckDBPyConnection, *, path: str | Path, action: str) -> Iterator[None]:
    """BEGIN … COMMIT, rolling back on any error; DuckDB errors become WarehouseError."""
    try:
        con.execute("BEGIN TRANSACTION")
    except duckdb.Error as exc:
        raise from_duckdb(exc, path=path, action=action) from None
    try:
        yield
        con.execute("COMMIT")
    except duckdb.Error as exc:
        _rollback(con)
        raise from_duckdb(exc, path=path, action=action) from None
    except BaseException:
        _rollback(con)
        raise


def query(con: duckdb.DuckDBPyConnection, sql: str, params: list[Any] | None = None) -> pl.DataFrame:
    """Run a parameterised query and return a polars frame (via Arrow)."""
    con.complete()  # a pending execute() result (e.g. after fetchone) would block con.sql
    df = pl.from_arrow(con.sql(sql, params=params or None).to_arrow_table())
    assert isinstance(df, pl.DataFrame)
    return df


def _insert(con: duckdb.DuckDBPyConnection, table: str, frame: pl.DataFrame) -> None:
    """Insert `frame` (columns named as the table's) through Arrow."""
    if frame.height == 0:
        return
    if tuple(frame.columns) == schema.columns(table):  # every column in the table's order: no view to register
        con.from_arrow(frame.to_arrow()).insert_into(table)  # (~1.1 ms where the view costs ~1.7 ms)
        return
    view = f"_incoming_{uuid.uuid4().hex[:8]}"
    con.register(view, frame.to_arrow())
    try:
        cols = ", ".join(frame.columns)
        con.execute(f"INSERT INTO {table} ({cols}) SELECT {cols} FROM {view}")
    finally:
        con.unregister(view)


# ------------------------------------------------------------------------------------------
# Ingest
# ------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class IngestCounts:
    """What one upsert did."""

    rows_read: int
    rows_new: int
    rows_revised: int

    @property
    def rows_unchanged(self) -> int:
        return self.rows_read - self.rows_new - self.rows_revised


def start_batch(con: duckdb.DuckDBPyConnection, source: str, *, path: str | Path = "?") -> str:
    """Record the start of one source's ingest; returns its batch_id."""
    batch_id = new_id("batch")
    try:
        con.execute(
            "INSERT INTO ingest_batches (batch_id, source, started, status) VALUES (?, ?, ?, 'running')",
            [batch_id, source, now()],
        )
    except duckdb.Error as exc:
        raise from_duckdb(exc, path=path, action=f"recording ingest of source {source!r}") from None
    return batch_id


def finish_batch(
    con: duckdb.DuckDBPyConnection,
    batch_id: str,
    *,
    status: str,
    counts: IngestCounts | None = None,
    message: str | None = None,
    path: str | Path = "?",
) -> None:
    """Close a batch as 'succeeded' or 'failed' with its counts or error message."""
    c = counts or IngestCounts(0, 0, 0)
    try:
        con.execute(
            "UPDATE ingest_batches SET finished = ?, status = ?, rows_read = ?, rows_new = ?, "
            "rows_revised = ?, message = ? WHERE batch_id = ?",
            [now(), status, c.rows_read, c.rows_new, c.rows_revised, message, batch_id],
        )
    except duckdb.Error as exc:
        raise from_duckdb(exc, path=path, action="closing an ingest batch") from None


def _arrow_stream(frame: pl.DataFrame, rows: int = 1 << 20) -> pa.RecordBatchReader:
    """`frame` as Arrow batches made one slice at a time (DuckDB reads it once, streaming)."""
    schema = frame.head(0).to_arrow().schema

    def batches() -> Iterator[pa.RecordBatch]:
        for part in frame.iter_slices(rows):
            yield from part.rechunk().to_arrow().cast(schema).to_batches()  # one batch per slice

    return pa.RecordBatchReader.from_batches(schema, batches())


#: DuckDB's memory limit while observations are merged: the join and inserts spill to the
#: warehouse's temp folder beyond it, so a large source costs a fixed amount of memory here.
UPSERT_MEMORY_LIMIT = "128MB"


@contextmanager
def _memory_limit(con: duckdb.DuckDBPyConnection, limit: str) -> Iterator[None]:
    """Run the block under DuckDB `memory_limit` = `limit`, then restore the previous limit."""
    row = con.execute("SELECT current_setting('memory_limit')").fetchone()
    con.execute(f"SET memory_limit = '{limit}'")
    try:
        yield
    finally:
        if row is not None:
            con.execute(f"SET memory_limit = '{row[0]}'")


def upsert_observations(
    con: duckdb.DuckDBPyConnection,
    frame: pl.DataFrame,
    *,
    source: str,
    batch_id: str,
    path: str | Path = "?",
) -> IngestCounts:
    """Merge long rows (series, date, value) into `observations` in one transaction.

    New (series, date) pairs are inserted; a stored pair whose value differs is updated and the
    change logged in `revisions` (old and new value, batch); equal values are left untouched, so a
    rerun writes nothing. Stored rows absent from `frame` are kept (ingest never deletes). DuckDB runs
    the merge under `UPSERT_MEMORY_LIMIT` (spilling beyond it), so memory stays bounded for large sources.
    """
    table = _arrow_stream(frame.select("series", "date", "value"))
    view = f"_incoming_{uuid.uuid4().hex[:8]}"
    with _memory_limit(con, UPSERT_MEMORY_LIMIT), transaction(con, path=path, action=f"storing observations of source {source!r}"):
        con.register(view, table)
        try:
            empty = not con.execute("SELECT EXISTS (SELECT 1 FROM observations)").fetchall()[0][0]
            if empty:  # first ingest: nothing to compare with
                new = con.execute(
                    f"INSERT INTO observations SELECT series, date, value, ?, ? FROM {view}", [source, batch_id]
                ).fetchall()
                revised = [(0,)]
            else:  # one join: each incoming row with the stored value (NULL when new)
                con.execute(
                    "CREATE OR REPLACE TEMP TABLE _inc AS SELECT i.series, i.date, i.value, o.value AS old "
                    f"FROM {view} i LEFT JOIN observations o ON o.series = i.series AND o.date = i.date"
                )
                revised = con.execute(
                    "INSERT INTO revisions SELECT ?, series, date, old, value FROM _inc "
                    "WHERE old IS NOT NULL AND old <> value",
                    [batch_id],
                ).fetchall()
                if revised[0][0]:
                    con.execute(
                        "UPDATE observations AS o SET value = i.value, source = ?, batch_id = ? FROM _inc i "
                        "WHERE i.old IS NOT NULL AND i.old <> i.value AND o.series = i.series AND o.date = i.date",
                        [source, batch_id],
                    )
                new = con.execute(
                    "INSERT INTO observations SELECT series, date, value, ?, ? FROM _inc WHERE old IS NULL",
                    [source, batch_id],
                ).fetchall()
                con.execute("DROP TABLE _inc")
        finally:
            con.unregister(view)
    return IngestCounts(rows_read=frame.height, rows_new=int(new[0][0]), rows_revised=int(revised[0][0]))


def read_observations(con: duckdb.DuckDBPyConnection, series: list[str] | tuple[str, ...]) -> pl.DataFrame:
    """Long rows (series, date, value) of the given series, sorted."""
    return query(
        con,
        "SELECT series, date, value FROM observations WHERE list_contains(?, series) ORDER BY series, date",
        [list(series)],
    )


# ------------------------------------------------------------------------------------------
# Runs and results
# ------------------------------------------------------------------------------------------


def mark_interrupted(con: duckdb.DuckDBPyConnection, *, path: str | Path = "?") -> int:
    """Mark runs and ingest batches left `running` by a dead process as failed; returns how many."""
    message = "interrupted: the process ended before this finished (killed or crashed)"
    with transaction(con, path=path, action="marking interrupted runs"):
        row = con.execute(
            "UPDATE runs SET status = 'failed', finished = ?, message = ? WHERE status = 'running'",
            [now(), message],
        ).fetchone()
        con.execute(
            "UPDATE ingest_batches SET status = 'failed', finished = ?, message = ? WHERE status = 'running'",
            [now(), message],
        )
    return int(row[0]) if row else 0


def begin_run(
    con: duckdb.DuckDBPyConnection,
    *,
    universe: str,
    config_hash: str,
    data_fingerprint: str | None,
    code_version: str,
    path: str | Path = "?",
) -> str:
    """Record a `running` run of `universe` (committed at once); returns its run_id."""
    run_id = new_id("run")
    try:
        con.execute(
            "INSERT INTO runs (run_id, universe, status, started, config_hash, data_fingerprint, code_version) "
            "VALUES (?, ?, 'running', ?, ?, ?, ?)",
            [run_id, universe, now(), config_hash, data_fingerprint, code_version],
        )
    except duckdb.Error as exc:
        raise from_duckdb(exc, path=path, action=f"recording a run of universe {universe!r}") from None
    return run_id


def fail_run(
    con: duckdb.DuckDBPyConnection, run_id: str, message: str, *, windows_failed: int = 0, path: str | Path = "?"
) -> None:
    """Mark `run_id` failed with `message` (its results were never written)."""
    try:
        con.execute(
            "UPDATE runs SET status = 'failed', finished = ?, message = ?, windows_fitted = 0, "
            "windows_skipped = 0, windows_failed = ? WHERE run_id = ?",
            [now(), message, windows_failed, run_id],
        )
    except duckdb.Error as exc:
        raise from_duckdb(exc, path=path, action="recording a failed run") from None


def store_universe_results(
    con: duckdb.DuckDBPyConnection,
    *,
    run_id: str,
    universe: UniverseConfig,
    tables: Mapping[str, pl.DataFrame],
    replace_ends: list[date] | None,
    prepared: pl.DataFrame | None,
    dropped: pl.DataFrame | None,
    counts: Mapping[str, int],
    prepared_dates: list[date] | None = None,
    data_fingerprint: str | None = None,
    message: str | None = None,
    path: str | Path = "?",
) -> None:
    """Write one universe's run in ONE transaction and mark the run succeeded.

    tables: result table name → frame with the table's columns (run_id and universe included).
    replace_ends: window ends whose old rows are deleted first (None = delete all of the universe's
    window rows: a full refit). prepared / dropped: the universe's new prepared data and dropped
    dates (None = leave the stored ones, used when nothing changed). prepared_dates: only these
    dates' prepared rows are replaced (None = all of the universe's).
    """
    name = universe.name
    with transaction(con, path=path, action=f"storing results of universe {name!r}"):
        if replace_ends is None:
            for t in RESULT_TABLES:
                con.execute(f"DELETE FROM {t} WHERE universe = ?", [name])
        elif replace_ends:
            ends_view = f"_ends_{uuid.uuid4().hex[:8]}"
            con.register(ends_view, pa.table({"window_end": pa.array(replace_ends, type=pa.date32())}))
            try:
                for t in RESULT_TABLES:
                    con.execute(
                        f"DELETE FROM {t} WHERE universe = ? AND window_end IN (SELECT window_end FROM {ends_view})",
                        [name],
                    )
            finally:
                con.unregister(ends_view)
        for t in RESULT_TABLES:
            if t in tables:
                _insert(con, t, tables[t])
        for t in STATE_TABLES:  # one row per universe: a new one replaces it, a full refit drops it
            if t in tables or replace_ends is None:
                con.execute(f"DELETE FROM {t} WHERE universe = ?", [name])
            if t in tables:
                _insert(con, t, tables[t])
        if prepared is not None:
            # which prepared rows this run rewrites (publish copies only those into the snapshot)
            previous = con.execute("SELECT run_id FROM universes WHERE universe = ?", [name]).fetchall()
            written: list[date | None] = list(prepared_dates) if prepared_dates is not None else [None]
            _insert(
                con,
                "prepared_writes",
                pl.DataFrame(
                    {
                        "run_id": [run_id] * len(written),
                        "universe": [name] * len(written),
                        "previous_run_id": [previous[0][0] if previous else None] * len(written),
                        "date": written,
                    },
                    schema={"run_id": pl.String, "universe": pl.String, "previous_run_id": pl.String, "date": pl.Date},
                ),
            )
            for t in UNIVERSE_TABLES:
                if t == "prepared" and prepared_dates is not None:
                    continue
                con.execute(f"DELETE FROM {t} WHERE universe = ?", [name])
            if prepared_dates is not None:
                dates_view = f"_dates_{uuid.uuid4().hex[:8]}"
                con.register(dates_view, pa.table({"date": pa.array(prepared_dates, type=pa.date32())}))
                try:
                    con.execute(
                        f"DELETE FROM prepared WHERE universe = ? AND date IN (SELECT date FROM {dates_view})", [name]
                    )
                finally:
                    con.unregister(dates_view)
                prepared = prepared.filter(pl.col("date").is_in(prepared_dates))
            con.execute(
                "INSERT INTO universes VALUES (?, ?, ?, ?, ?, ?, ?)",
                [
                    name,
                    universe.config_hash,
                    json.dumps(universe.fit_settings(), sort_keys=True),
                    universe.horizon,
                    universe.granger_level,
                    universe.identification,
                    run_id,
                ],
            )
            _insert(
                con,
                "universe_series",
                pl.DataFrame(
                    {
                        "universe": [name] * len(universe.series),
                        "position": list(range(len(universe.series))),
                        "series": [s.name for s in universe.series],
                        "transform": [s.transform for s in universe.series],
                    },
                    schema={"universe": pl.String, "position": pl.Int32, "series": pl.String, "transform": pl.String},
                ),
            )
            _insert(con, "prepared", prepared.select(pl.lit(name).alias("universe"), "date", "series", "value"))
            if dropped is not None:
                _insert(con, "dropped_dates", dropped.select(pl.lit(name).alias("universe"), "date", "reason"))
        con.execute(
            "UPDATE runs SET status = 'succeeded', finished = ?, windows_fitted = ?, windows_skipped = ?, "
            "windows_failed = ?, message = ?, data_fingerprint = coalesce(?, data_fingerprint) WHERE run_id = ?",
            [
                now(),
                counts.get("fitted", 0),
                counts.get("skipped", 0),
                counts.get("failed", 0),
                message,
                data_fingerprint,
                run_id,
            ],
        )


def stored_state(con: duckdb.DuckDBPyConnection, universe: str) -> Any:
    """The universe's stored config hash, windows and prepared data (a fit.StoredState), or None."""
    from pipeline.fit import StoredState

    row = con.execute("SELECT config_hash FROM universes WHERE universe = ?", [universe]).fetchall()
    if not row:
        return None
    windows = query(
        con, "SELECT window_end, window_start FROM window_fits WHERE universe = ? ORDER BY window_end", [universe]
    )
    prepared = query(
        con, "SELECT date, series, value FROM prepared WHERE universe = ? ORDER BY date, series", [universe]
    )
    from pipeline.fit import stored_filter

    tvp = query(con, "SELECT * FROM tvp_state WHERE universe = ?", [universe])
    state = stored_filter(tvp.row(0, named=True)) if tvp.height else None
    return StoredState(config_hash=row[0][0], windows=windows, prepared=prepared, tvp=state)
