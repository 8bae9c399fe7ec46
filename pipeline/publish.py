"""Publish: copy the result tables into a NEW snapshot file, then swap it in atomically.

The dashboard opens only the serving snapshot, read-only. DuckDB lets no other process open a file
that one process holds read-write, so readers never touch the working warehouse: after a run the
pipeline writes every table of ``SNAPSHOT_TABLES`` into ``.<snapshot>.<id>.tmp`` in the same folder
(ATTACH, CREATE TABLE … AS SELECT, DETACH — DETACH checkpoints, so the file is complete and has no
WAL), fsyncs it, and ``os.replace``s it over the served file. A reader that still holds the old
file keeps a consistent view of the previous run; a reader that opens after the swap sees the new
one; nobody ever sees a half-written file.

In-process caveat: ``duckdb.connect(path)`` returns the *cached* database of `path` while any
connection to it is open in the same process — that would be the old file. :func:`open_snapshot`
avoids the cache (an in-memory database that ATTACHes the file), so it always opens the current file.
"""

from __future__ import annotations

import os
import time
import uuid
from dataclasses import dataclass
from pathlib import Path

import duckdb

from pipeline.errors import PublishError
from pipeline.warehouse import SNAPSHOT_TABLES, TABLES

__all__ = ["PublishResult", "open_snapshot", "publish_snapshot"]


@dataclass(frozen=True)
class PublishResult:
    """What a publish wrote."""

    path: Path
    tables: int
    rows: int
    bytes: int
    seconds: float


def _order_by(table: str) -> str:
    cols = TABLES[table]
    keys = [c for c in ("universe", "window_end", "date", "started") if f"{c} " in cols]
    return f" ORDER BY {', '.join(keys)}" if keys else ""


def publish_snapshot(con: duckdb.DuckDBPyConnection, snapshot: str | Path) -> PublishResult:
    """Write the snapshot tables of the warehouse open on `con` to `snapshot`, atomically.

    `con` is a read-write connection to the working warehouse (the pipeline's own).
    """
    t0 = time.perf_counter()
    target = Path(snapshot)
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        msg = f"snapshot folder {str(target.parent)!r} cannot be created ({exc.strerror}); fix [warehouse] snapshot"
        raise PublishError(msg) from None
    tmp = target.with_name(f".{target.name}.{uuid.uuid4().hex[:8]}.tmp")
    alias = f"snap_{uuid.uuid4().hex[:8]}"
    rows = 0
    try:
        con.execute(f"ATTACH '{_sql_path(tmp)}' AS {alias}")
        try:
            for table in SNAPSHOT_TABLES:
                con.execute(f"CREATE TABLE {alias}.{table} AS SELECT * FROM main.{table}{_order_by(table)}")
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
        path=target, tables=len(SNAPSHOT_TABLES), rows=rows, bytes=target.stat().st_size, seconds=time.perf_counter() - t0
    )


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
