"""`sql` sources: one SELECT against PostgreSQL, SQLite, DuckDB or a plain CSV/Parquet file, read-only.

Where the query runs follows the one location key the source sets:

- ``connection = "postgresql://user@host:port/dbname"``: PostgreSQL through psycopg (libpq): the
  password comes from libpq's own chain (``PGPASSWORD``, ``PGPASSFILE``, ``~/.pgpass``), never the
  config. The session is read-only (``default_transaction_read_only`` and a ``READ ONLY``
  transaction, rolled back at the end) and the query runs as a server-side cursor
  (``DECLARE … CURSOR FOR <query>``), which PostgreSQL accepts only for a single SELECT or VALUES,
  and which hands the rows over a slice at a time.
- ``database = "file"``: the file's first bytes tell SQLite from DuckDB. SQLite is opened through
  the standard library in read-only mode (``mode=ro``, ``PRAGMA query_only``) with an authorizer
  that allows reading only (no ATTACH, PRAGMA, writes); DuckDB goes through the ``duckdb_sql``
  reader (attached read-only, locked down).
- ``path = "prices.csv"`` (or ``.parquet``): DuckDB in-process, no database: the file is the view
  ``source`` and file access is then limited to that one file (``allowed_paths`` with
  ``enable_external_access = false``, configuration locked).

Why not DuckDB's postgres_scanner/sqlite_scanner extensions: DuckDB downloads them at first use from
extensions.duckdb.org, which offline and locked-down machines cannot reach; psycopg and sqlite3 are
ordinary Python packages (sqlite3 is in the standard library).

MySQL is not supported yet.
"""

from __future__ import annotations

import contextlib
import re
import sqlite3
from collections.abc import Iterator
from datetime import date
from pathlib import Path
from typing import TYPE_CHECKING, Any
from urllib.parse import urlsplit

import duckdb
import polars as pl

from pipeline.errors import SourceError
from pipeline.sources._duckdb_sql import _one_select, read_duckdb_sql
from pipeline.sources._frame import SourceFrame
from pipeline.sources._rows import CHUNK_CELLS, LongRows

if TYPE_CHECKING:
    from pipeline.sources._config import SourceConfig

__all__ = ["PLAIN_FILES", "read_sql"]

#: file endings a `sql` source's `path` may have, and the DuckDB reader of each.
_PLAIN_READERS = {".csv": "read_csv", ".tsv": "read_csv", ".parquet": "read_parquet"}
PLAIN_FILES = tuple(_PLAIN_READERS)

_SQLITE_MAGIC = b"SQLite format 3\x00"


def _one_line(exc: BaseException) -> str:
    return " ".join(str(exc).split())[:400]


def read_sql(source: SourceConfig, *, today: date) -> SourceFrame:
    """Run the source's one SELECT where its location key says (module docstring)."""
    assert source.query is not None
    if source.connection is not None:
        return _read_postgres(source, today=today)
    if source.path is not None:
        return _read_plain_file(source, today=today)
    assert source.database is not None
    file = source.database
    if not file.exists():
        msg = f"source {source.name!r}: database {str(file)!r} does not exist; fix `database`"
        raise SourceError(msg)
    try:
        with file.open("rb") as f:
            head = f.read(16)
    except OSError as exc:
        msg = f"source {source.name!r}: database {str(file)!r} cannot be read ({exc.strerror}); check permissions"
        raise SourceError(msg) from None
    if head.startswith(_SQLITE_MAGIC):
        return _read_sqlite(source, today=today)
    if head[8:12] == b"DUCK":
        return read_duckdb_sql(source, today=today)
    msg = (
        f"source {source.name!r}: database {str(file)!r} is neither a SQLite nor a DuckDB file; "
        "point `database` at one, or read a CSV/Parquet file with `path`"
    )
    raise SourceError(msg)


def _collect(rows: LongRows, batches: Iterator[pl.DataFrame]) -> None:
    for part in batches:
        rows.add(part, lines=pl.Series("line", range(rows.rows + 1, rows.rows + 1 + part.height)))


def _finish(rows: LongRows, source: SourceConfig, origin: str, where: str) -> SourceFrame:
    if rows.rows == 0:
        msg = f"{where}: has a header but no data rows; check the export that wrote it"
        raise SourceError(msg)
    return SourceFrame(source=source.name, frame=rows.finish(), origins=(origin,))


def _refused(origin: str, text: str) -> SourceError:
    return SourceError(
        f"{origin} refused: {text}; a source query must be one SELECT statement (sources only read — "
        "no ATTACH, DROP, COPY, SET, INSERT, …)"
    )


# --------------------------------------------------------------------------------------------
# PostgreSQL
# --------------------------------------------------------------------------------------------


_COMMENTS = re.compile(r"^(?:\s+|--[^\n]*(?:\n|$)|/\*.*?\*/)+", re.DOTALL)


def _shown(connection: str) -> str:
    parts = urlsplit(connection)
    return f"{parts.hostname or 'localhost'}:{parts.port or 5432}/{parts.path.lstrip('/')}"


def _read_postgres(source: SourceConfig, *, today: date) -> SourceFrame:
    import psycopg

    assert source.connection is not None and source.query is not None
    shown = _shown(source.connection)
    origin = f"query of source {source.name!r} on postgresql {shown}"
    user = urlsplit(source.connection).username or "(the login user)"
    stripped = _COMMENTS.sub("", source.query).lstrip("( \t\r\n")
    first = stripped.split(None, 1)[0].upper() if stripped.strip() else ""
    if first not in ("SELECT", "WITH", "VALUES", "TABLE"):
        raise _refused(origin, f"it starts with {first or 'nothing'!r}")
    try:
        conn = psycopg.connect(
            source.connection, connect_timeout=max(int(source.timeout), 1), autocommit=False,
            options="-c default_transaction_read_only=on", application_name="shockflow",
        )  # fmt: skip
    except psycopg.OperationalError as exc:
        text = _one_line(exc)
        low = text.lower()
        if "password" in low or "authentication" in low:
            fix = f"PostgreSQL refused the login of user {user!r}; set the password in PGPASSWORD or ~/.pgpass (never in the config file)"
        elif "does not exist" in low:
            fix = "fix the user or database name in `connection`"
        else:
            fix = "cannot reach the server; check host and port in `connection`, that PostgreSQL runs, and the network (or raise `timeout`)"
        msg = f"source {source.name!r}: {fix} ({shown}: {text})"
        raise SourceError(msg) from None
    where = f"{origin} (row numbers from 1)"
    rows = LongRows(origin=where, source=source, today=today)
    try:
        with conn:
            conn.read_only = True
            with conn.cursor(name="shockflow_source") as cur:
                try:
                    cur.execute(source.query)
                except psycopg.Error as exc:
                    text = _one_line(exc)
                    # DECLARE … CURSOR accepts one SELECT/VALUES only; the transaction is read-only
                    writes = isinstance(exc, psycopg.errors.ReadOnlySqlTransaction | psycopg.errors.InvalidCursorDefinition)
                    primary = (exc.diag.message_primary or "").lower()
                    if writes or any(w in primary for w in ("cursor", "read-only", "multiple commands")):
                        raise _refused(origin, text) from None
                    raise
                if cur.description is None:
                    raise _refused(origin, "it returns no rows")
                names = [d.name for d in cur.description]
                rows.check_header(names)
                step = max(CHUNK_CELLS // max(len(names), 1), 1)

                def batches() -> Iterator[pl.DataFrame]:
                    while chunk := cur.fetchmany(step):
                        yield pl.DataFrame(chunk, schema=names, orient="row", infer_schema_length=None)

                _collect(rows, batches())
            conn.rollback()
    except SourceError:
        raise
    except psycopg.Error as exc:
        msg = f"{origin} failed: {_one_line(exc)}; fix `query` (try it in psql)"
        raise SourceError(msg) from None
    finally:
        conn.close()
    return _finish(rows, source, origin, where)


# --------------------------------------------------------------------------------------------
# SQLite
# --------------------------------------------------------------------------------------------

_SQLITE_READS = {sqlite3.SQLITE_SELECT, sqlite3.SQLITE_READ, sqlite3.SQLITE_FUNCTION, sqlite3.SQLITE_RECURSIVE}


def _read_sqlite(source: SourceConfig, *, today: date) -> SourceFrame:
    assert source.database is not None and source.query is not None
    origin = f"query of source {source.name!r} on {source.database}"
    where = f"{origin} (row numbers from 1)"
    try:
        con = sqlite3.connect(f"{source.database.resolve().as_uri()}?mode=ro", uri=True, timeout=source.timeout)
        con.execute("PRAGMA query_only = ON")
    except sqlite3.Error as exc:
        msg = f"source {source.name!r}: database {str(source.database)!r} cannot be opened read-only: {_one_line(exc)}"
        raise SourceError(msg) from None
    refused: list[str] = []

    def authorize(action: int, *_: Any) -> int:
        if action in _SQLITE_READS:
            return sqlite3.SQLITE_OK
        refused.append(str(action))
        return sqlite3.SQLITE_DENY

    con.set_authorizer(authorize)
    rows = LongRows(origin=where, source=source, today=today)
    try:
        try:
            cur = con.execute(source.query)
        except (sqlite3.DatabaseError, sqlite3.ProgrammingError, sqlite3.Warning) as exc:
            text = _one_line(exc)
            if refused or "one statement at a time" in text or "not authorized" in text:
                raise _refused(origin, text) from None
            msg = f"{origin} failed: {text}; fix `query` (try it in the sqlite3 shell)"
            raise SourceError(msg) from None
        if cur.description is None:
            raise _refused(origin, "it returns no rows")
        names = [d[0] for d in cur.description]
        rows.check_header(names)
        step = max(CHUNK_CELLS // max(len(names), 1), 1)

        def batches() -> Iterator[pl.DataFrame]:
            while chunk := cur.fetchmany(step):
                yield pl.DataFrame(chunk, schema=names, orient="row", infer_schema_length=None)

        _collect(rows, batches())
    finally:
        con.close()
    return _finish(rows, source, origin, where)


# --------------------------------------------------------------------------------------------
# A plain CSV or Parquet file, read by DuckDB in-process (no database)
# --------------------------------------------------------------------------------------------


@contextlib.contextmanager
def _file_connection(source: SourceConfig, file: Path) -> Iterator[duckdb.DuckDBPyConnection]:
    allow = source.external_access
    con = duckdb.connect(config={"autoinstall_known_extensions": allow, "autoload_known_extensions": allow})
    try:
        reader = _PLAIN_READERS[file.suffix.lower()]
        literal = str(file).replace("'", "''")
        con.execute(f"CREATE VIEW source AS SELECT * FROM {reader}('{literal}')")
        if not allow:
            con.execute("SET allowed_paths = ?", [[str(file)]])
            con.execute("SET enable_external_access = false")
        con.execute("SET lock_configuration = true")
        yield con
    finally:
        con.close()


def _read_plain_file(source: SourceConfig, *, today: date) -> SourceFrame:
    assert source.path is not None and source.query is not None
    file = Path(source.path)
    origin = f"query of source {source.name!r} on {file}"
    where = f"{origin} (row numbers from 1)"
    if not file.is_file():
        msg = f"source {source.name!r}: file {str(file)!r} does not exist; fix `path` (relative paths start at the config file's folder)"
        raise SourceError(msg)
    rows = LongRows(origin=where, source=source, today=today)
    try:
        with _file_connection(source, file) as con:
            _one_select(con, source, origin)
            relation = con.sql(source.query)
            rows.check_header(relation.columns)
            step = max(CHUNK_CELLS // max(len(relation.columns), 1), 1)

            def batches() -> Iterator[pl.DataFrame]:
                for batch in relation.to_arrow_reader(step):
                    part = pl.from_arrow(batch)
                    assert isinstance(part, pl.DataFrame)
                    yield part

            _collect(rows, batches())
    except duckdb.Error as exc:
        hint = (
            f"; the query reads only the table `source` ({file.name}) unless the source sets `external_access = true`"
            if isinstance(exc, duckdb.PermissionException) else ""
        )  # fmt: skip
        msg = f"{origin} failed: {_one_line(exc)}{hint}; fix `query` (the file is the table `source`)"
        raise SourceError(msg) from None
    return _finish(rows, source, origin, where)
