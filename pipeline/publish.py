"""Publish: copy the result tables into a NEW snapshot file, then swap it in atomically.

The dashboard opens only the serving snapshot, read-only. DuckDB lets no other process open a file
that one process holds read-write, so readers never touch the working warehouse: after a run the
pipeline writes every table the schema declares served (``SNAPSHOT_TABLES``, from
`serving._schema`) and the long views (`serving._views`) into ``.<snapshot>.<id>.tmp`` in the same folder
(ATTACH, CREATE TABLE … AS SELECT, DETACH — DETACH checkpoints, so the file is complete and has no
WAL), fsyncs it, and ``os.replace``s it over the served file. A nightly publish starts the new file
from a byte copy of the served one and rewrites only the windows that changed and the prepared rows
the runs since the served one rewrote (see :func:`publish_snapshot`), so its cost follows the night's
changes (plus one byte copy), not the history. Temporary files left by a publish
that was killed midway are deleted by the next publish. A reader that still holds the old
file keeps a consistent view of the previous run; a reader that opens after the swap sees the new
one; nobody ever sees a half-written file.

In-process caveat: ``duckdb.connect(path)`` returns the *cached* database of `path` while any
connection to it is open in the same process — that would be the old file. :func:`open_snapshot`
avoids the cache (an in-memory database that ATTACHes the file), so it always opens the current file.
"""

from __future__ import annotations

import glob
import os
import shutil
import time
import uuid
from dataclasses import dataclass
from datetime import date
from pathlib import Path

import duckdb
import pyarrow as pa

from pipeline.errors import PublishError
from serving._schema import (
    RESULT_TABLES,
    SCHEMA_VERSION,
    SNAPSHOT_TABLES,
    UNIVERSE_TABLES,
    order_by,
)
from serving._views import create_views

__all__ = ["PublishResult", "open_snapshot", "publish_snapshot", "stale_universes"]


@dataclass(frozen=True)
class PublishResult:
    """What a publish wrote."""

    path: Path
    tables: int
    rows: int
    bytes: int
    seconds: float
    incremental: bool = False
    windows_synced: int = 0
    prepared_synced: int = 0  # prepared rows copied by an incremental publish


def _order_by(table: str, prefix: str = "") -> str:
    keys = order_by(table)  # from the schema declarations (serving._schema)
    return f" ORDER BY {', '.join(prefix + k for k in keys)}" if keys else ""


def publish_snapshot(con: duckdb.DuckDBPyConnection, snapshot: str | Path, *, incremental: bool = True) -> PublishResult:
    """Write the snapshot tables of the warehouse open on `con` to `snapshot`, atomically.

    `con` is a read-write connection to the working warehouse (the pipeline's own).

    incremental: when the served snapshot exists with this schema version, start from a byte copy
    of it and bring it level with the warehouse: the bookkeeping tables are replaced whole, and in the
    per-window result tables only the windows whose ``window_fits.run_id`` differs between the two
    (refitted, new or deleted windows) are rewritten; of the per-universe tables, only universes
    whose ``universes`` row differs, and of their ``prepared`` rows only the dates logged in
    ``prepared_writes`` by the runs since the served one (:func:`_prepared_changes`). Otherwise every table is copied. Either way
    the result is written to a new file and swapped in.
    """
    t0 = time.perf_counter()
    target = Path(snapshot)
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        msg = f"snapshot folder {str(target.parent)!r} cannot be created ({exc.strerror}); fix [warehouse] snapshot"
        raise PublishError(msg) from None
    _remove_stale(target)
    tmp = target.with_name(f".{target.name}.{uuid.uuid4().hex[:8]}.tmp")
    alias = f"snap_{uuid.uuid4().hex[:8]}"
    rows = 0
    synced = prepared_synced = 0
    used_copy = False
    try:
        if incremental and target.is_file():
            _copy_file(target, tmp)
            con.execute(f"ATTACH '{_sql_path(tmp)}' AS {alias}")
            if _compatible(con, alias):
                used_copy = True
            else:
                con.execute(f"DETACH {alias}")
                _cleanup(tmp)
        if not used_copy:
            con.execute(f"ATTACH '{_sql_path(tmp)}' AS {alias}")
        try:
            if used_copy:
                synced, prepared_synced = _sync(con, alias)
            else:
                for table in SNAPSHOT_TABLES:
                    con.execute(f"CREATE TABLE {alias}.{table} AS SELECT * FROM main.{table}{_order_by(table)}")
            create_views(con, catalog=alias)  # the long views (serving._views), bound inside the file
            for table in SNAPSHOT_TABLES:
                rows += con.execute(f"SELECT count(*) FROM {alias}.{table}").fetchall()[0][0]
        finally:
            con.execute(f"DETACH {alias}")
        with open(tmp, "rb") as fh:
            os.fsync(fh.fileno())
        os.replace(tmp, target)
        _fsync_dir(target.parent)
    except duckdb.Error as exc:
        _cleanup(tmp)
        msg = f"publishing the snapshot {str(target)!r} failed: {' '.join(str(exc).split())}; the served snapshot is unchanged"
        raise PublishError(msg) from None
    except OSError as exc:
        _cleanup(tmp)
        msg = f"publishing the snapshot {str(target)!r} failed ({exc.strerror}); the served snapshot is unchanged — check the folder's permissions and free space"
        raise PublishError(msg) from None
    return PublishResult(
        path=target, tables=len(SNAPSHOT_TABLES), rows=rows, bytes=target.stat().st_size,
        seconds=time.perf_counter() - t0, incremental=used_copy, windows_synced=synced,
        prepared_synced=prepared_synced,
    )


def stale_universes(con: duckdb.DuckDBPyConnection, snapshot: str | Path) -> list[str] | None:
    """Universes whose results in the served snapshot differ from the warehouse's; None = no snapshot.

    Compared by the run that wrote each window (``window_fits``: universe, window_end, run_id) and
    each universe's bookkeeping row (``universes``). A run killed after storing its results but
    before publishing leaves exactly this difference; the next run publishes it even when it has
    nothing new of its own. A snapshot that cannot be read counts as missing.
    """
    target = Path(snapshot)
    if not target.is_file():
        return None
    alias = f"served_{uuid.uuid4().hex[:8]}"
    try:
        con.execute(f"ATTACH '{_sql_path(target)}' AS {alias} (READ_ONLY)")
    except duckdb.Error:
        return None
    try:
        rows = con.execute(
            "SELECT DISTINCT universe FROM ("
            "(SELECT universe, window_end, run_id FROM main.window_fits "
            f" EXCEPT SELECT universe, window_end, run_id FROM {alias}.window_fits) UNION ALL "
            f"(SELECT universe, window_end, run_id FROM {alias}.window_fits "
            " EXCEPT SELECT universe, window_end, run_id FROM main.window_fits) UNION ALL "
            "(SELECT universe, NULL, run_id FROM main.universes "
            f" EXCEPT SELECT universe, NULL, run_id FROM {alias}.universes) UNION ALL "
            f"(SELECT universe, NULL, run_id FROM {alias}.universes "
            " EXCEPT SELECT universe, NULL, run_id FROM main.universes)) ORDER BY universe"
        ).fetchall()
    except duckdb.Error:
        return None
    finally:
        con.execute(f"DETACH {alias}")
    return [r[0] for r in rows]


def _compatible(con: duckdb.DuckDBPyConnection, alias: str) -> bool:
    """The attached copy has every snapshot table and this schema version."""
    names = {
        r[0]
        for r in con.execute(
            "SELECT table_name FROM information_schema.tables WHERE table_catalog = ?", [alias]
        ).fetchall()
    }
    if not set(SNAPSHOT_TABLES) <= names:
        return False
    version = con.execute(f"SELECT max(version) FROM {alias}.schema_version").fetchall()[0][0]
    if version != SCHEMA_VERSION:
        return False
    for table in SNAPSHOT_TABLES:  # same columns in the same order
        cols = [
            r[0]
            for r in con.execute(
                "SELECT column_name FROM information_schema.columns WHERE table_catalog = ? AND table_name = ? "
                "ORDER BY ordinal_position",
                [alias, table],
            ).fetchall()
        ]
        main_cols = [
            r[0]
            for r in con.execute(
                "SELECT column_name FROM information_schema.columns WHERE table_catalog = current_database() "
                "AND table_schema = 'main' AND table_name = ? ORDER BY ordinal_position",
                [table],
            ).fetchall()
        ]
        if cols != main_cols:
            return False
    return True


def _sync(con: duckdb.DuckDBPyConnection, alias: str) -> tuple[int, int]:
    """Bring the attached snapshot copy level with the warehouse; returns (windows, prepared rows) rewritten."""
    con.execute("BEGIN TRANSACTION")
    try:
        # universes whose bookkeeping row differs (another run rewrote their prepared data, series
        # or dropped dates — every such write replaces the `universes` row with the writer's
        # run_id — or the universe is on one side only): their rows of the per-universe tables
        con.execute(
            "CREATE OR REPLACE TEMP TABLE _publish_universes AS SELECT DISTINCT universe FROM ("
            f"(SELECT * FROM main.universes EXCEPT ALL SELECT * FROM {alias}.universes) UNION ALL "
            f"(SELECT * FROM {alias}.universes EXCEPT ALL SELECT * FROM main.universes))"
        )
        whole, dates = _prepared_changes(con, alias)
        prepared_rows = 0
        con.register("_publish_whole", pa.table({"universe": pa.array(whole, type=pa.string())}))
        con.register("_publish_dates", pa.table({
            "universe": pa.array([u for u, _ in dates], type=pa.string()),
            "date": pa.array([d for _, d in dates], type=pa.date32()),
        }))  # fmt: skip
        try:
            for table in SNAPSHOT_TABLES:
                if table in RESULT_TABLES:
                    continue
                if table == "prepared":  # the rows the runs since the served one rewrote (or whole universes)
                    for keys, on in (("_publish_whole", "t.universe = d.universe"),
                                     ("_publish_dates", "t.universe = d.universe AND t.date = d.date")):  # fmt: skip
                        con.execute(f"DELETE FROM {alias}.prepared t USING {keys} d WHERE {on}")
                        prepared_rows += con.execute(
                            f"INSERT INTO {alias}.prepared SELECT t.* FROM main.prepared t SEMI JOIN {keys} d ON {on}"
                            f"{_order_by(table, 't.')}"
                        ).fetchall()[0][0]
                elif table in UNIVERSE_TABLES:  # small: the changed universes' rows whole
                    con.execute(f"DELETE FROM {alias}.{table} WHERE universe IN (SELECT universe FROM _publish_universes)")
                    con.execute(
                        f"INSERT INTO {alias}.{table} SELECT t.* FROM main.{table} t "
                        f"SEMI JOIN _publish_universes d ON t.universe = d.universe{_order_by(table, 't.')}"
                    )
                else:  # bookkeeping (runs, ingest batches, schema version): replaced whole
                    con.execute(f"DELETE FROM {alias}.{table}")
                    con.execute(f"INSERT INTO {alias}.{table} SELECT * FROM main.{table}{_order_by(table)}")
        finally:
            con.unregister("_publish_whole")
            con.unregister("_publish_dates")
        con.execute("DROP TABLE _publish_universes")
        # windows written by another run than the one the snapshot holds, or on one side only
        con.execute(
            "CREATE OR REPLACE TEMP TABLE _publish_diff AS "
            "SELECT coalesce(m.universe, s.universe) AS universe, coalesce(m.window_end, s.window_end) AS window_end "
            f"FROM main.window_fits m FULL JOIN {alias}.window_fits s "
            "ON m.universe = s.universe AND m.window_end = s.window_end "
            "WHERE m.run_id IS DISTINCT FROM s.run_id"
        )
        synced = con.execute("SELECT count(*) FROM _publish_diff").fetchall()[0][0]
        if synced:
            for table in RESULT_TABLES:
                con.execute(
                    f"DELETE FROM {alias}.{table} t USING _publish_diff d "
                    "WHERE t.universe = d.universe AND t.window_end = d.window_end"
                )
                con.execute(
                    f"INSERT INTO {alias}.{table} SELECT t.* FROM main.{table} t "
                    "SEMI JOIN _publish_diff d ON t.universe = d.universe AND t.window_end = d.window_end "
                    "ORDER BY t.universe, t.window_end"
                )
        con.execute("DROP TABLE _publish_diff")
        con.execute("COMMIT")
    except BaseException:
        try:
            con.execute("ROLLBACK")
        except duckdb.Error:
            pass
        raise
    return int(synced), int(prepared_rows)


def _prepared_changes(con: duckdb.DuckDBPyConnection, alias: str) -> tuple[list[str], list[tuple[str, date]]]:
    """Which prepared rows of the universes in ``_publish_universes`` the snapshot must take anew:
    (universes to copy whole, (universe, date) pairs).

    Every run that rewrites a universe's prepared rows logs them in ``prepared_writes`` with the
    `universes.run_id` it replaced. From the warehouse's current run of the universe, the log is
    followed back to the run the snapshot holds; the dates met on the way are the rows that can
    differ. A universe is copied whole when that chain is not complete (a run that rewrote every
    date, a run without a log — written before the log existed —, a universe on one side only).
    """
    changed = [r[0] for r in con.execute("SELECT universe FROM _publish_universes ORDER BY universe").fetchall()]
    if not changed:
        return [], []
    current = dict(con.execute(
        "SELECT universe, run_id FROM main.universes WHERE universe IN (SELECT universe FROM _publish_universes)"
    ).fetchall())  # fmt: skip
    served = dict(con.execute(
        f"SELECT universe, run_id FROM {alias}.universes WHERE universe IN (SELECT universe FROM _publish_universes)"
    ).fetchall())  # fmt: skip
    log: dict[tuple[str, str], tuple[str | None, list[date | None]]] = {}
    for universe, run, previous, day in con.execute(
        "SELECT universe, run_id, previous_run_id, date FROM main.prepared_writes "
        "WHERE universe IN (SELECT universe FROM _publish_universes)"
    ).fetchall():
        log.setdefault((universe, run), (previous, []))[1].append(day)
    whole: list[str] = []
    dates: list[tuple[str, date]] = []
    for universe in changed:
        run, target = current.get(universe), served.get(universe)
        found: set[date] = set()
        seen: set[str] = set()
        complete = target is not None
        while complete and run is not None and run != target:
            entry = log.get((universe, run))
            if entry is None or run in seen or None in entry[1]:
                complete = False
                break
            seen.add(run)
            found.update(d for d in entry[1] if d is not None)
            run = entry[0]
        if complete and run == target:
            dates.extend((universe, d) for d in sorted(found))
        else:
            whole.append(universe)
    return whole, dates


def _copy_file(source: Path, target: Path) -> None:
    """Byte copy by ``copy_file_range`` (in the kernel, no user-space buffer; about twice
    shutil.copyfile's sendfile loop on a 1 GB snapshot), falling back to shutil.copyfile."""
    try:
        with open(source, "rb") as src, open(target, "wb") as dst:
            size, done = os.fstat(src.fileno()).st_size, 0
            while done < size:
                step = os.copy_file_range(src.fileno(), dst.fileno(), size - done)
                if step == 0:
                    break
                done += step
        if done == size:
            return
    except (AttributeError, OSError):
        pass
    shutil.copyfile(source, target)


def _sql_path(path: Path) -> str:
    # ATTACH takes no parameters; quote the path as a SQL string literal.
    return str(path).replace("'", "''")


def _cleanup(tmp: Path) -> None:
    for p in (tmp, tmp.with_name(tmp.name + ".wal")):
        try:
            p.unlink()
        except FileNotFoundError:
            pass
        except OSError:
            pass


def _remove_stale(target: Path) -> int:
    """Delete temporary files of earlier publishes that never finished (a killed process).

    Only the process holding the working warehouse read-write publishes, so any
    ``.<snapshot>.<id>.tmp`` (and its ``.wal``) found now belongs to a dead publish.
    """
    removed = 0
    for p in target.parent.glob(f".{glob.escape(target.name)}.*.tmp*"):
        if p.suffix in (".tmp", ".wal"):
            try:
                p.unlink()
                removed += 1
            except OSError:
                pass
    return removed


def _fsync_dir(folder: Path) -> None:
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def open_snapshot(path: str | Path) -> duckdb.DuckDBPyConnection:
    """A read-only connection to the CURRENT snapshot file, never a cached older one.

    An in-memory database ATTACHes the file read-only and makes it the default schema, so queries
    name tables plainly (``SELECT * FROM connectedness``).
    """
    p = Path(path)
    if not p.exists():
        msg = f"snapshot {str(p)!r} does not exist yet; run `shockflow run --config FILE` to publish one"
        raise PublishError(msg)
    con = duckdb.connect()
    try:
        con.execute(f"ATTACH '{_sql_path(p)}' AS snapshot (READ_ONLY)")
        con.execute("USE snapshot")
    except duckdb.Error as exc:
        con.close()
        msg = f"snapshot {str(p)!r} cannot be opened: {' '.join(str(exc).split())}; publish it again with `shockflow run`"
        raise PublishError(msg) from None
    return con
