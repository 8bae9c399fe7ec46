"""Publish: copy the result tables into a NEW snapshot file, then swap it in atomically.

The dashboard opens only the serving snapshot, read-only. DuckDB lets no other process open a file
that one process holds read-write, so readers never touch the working warehouse: after a run the
pipeline writes every table the schema declares served (``SNAPSHOT_TABLES``, from
`serving._schema`) and the long views (`serving._views`) into ``.<snapshot>.<id>.tmp`` in the same folder
(ATTACH, CREATE TABLE … AS SELECT, DETACH — DETACH checkpoints, so the file is complete and has no
WAL), fsyncs it, and ``os.replace``s it over the served file. A nightly publish starts the new file
from a byte copy of the served one and rewrites only the windows that changed (see
:func:`publish_snapshot`), so its cost follows the night's changes, not the history. Temporary files left by a publish
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
from pathlib import Path

import duckdb

from pipeline.errors import PublishError
from serving._schema import RESULT_TABLES, SCHEMA_VERSION, SNAPSHOT_TABLES, order_by
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


def _order_by(table: str) -> str:
    keys = order_by(table)  # from the schema declarations (serving._schema)
    return f" ORDER BY {', '.join(keys)}" if keys else ""


def publish_snapshot(con: duckdb.DuckDBPyConnection, snapshot: str | Path, *, incremental: bool = True) -> PublishResult:
    """Write the snapshot tables of the warehouse open on `con` to `snapshot`, atomically.

    `con` is a read-write connection to the working warehouse (the pipeline's own).

    incremental: when the served snapshot exists with this schema version, start from a byte copy
    of it and bring it level with the warehouse: the small tables are replaced whole, and in the
    per-window result tables only the windows whose ``window_fits.run_id`` differs between the two
    (refitted, new or deleted windows) are rewritten. Otherwise every table is copied. Either way
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
    synced = 0
    used_copy = False
    try:
        if incremental and target.is_file():
            shutil.copyfile(target, tmp)
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
                synced = _sync(con, alias)
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


def _sync(con: duckdb.DuckDBPyConnection, alias: str) -> int:
    """Bring the attached snapshot copy level with the warehouse; returns windows rewritten."""
    con.execute("BEGIN TRANSACTION")
    try:
        for table in SNAPSHOT_TABLES:
            if table in RESULT_TABLES:
                continue
            con.execute(f"DELETE FROM {alias}.{table}")
            con.execute(f"INSERT INTO {alias}.{table} SELECT * FROM main.{table}{_order_by(table)}")
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
    return int(synced)


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
