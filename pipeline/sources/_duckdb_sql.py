"""A SQL query against another DuckDB file, on a read-only, locked-down connection.

The query must be one SELECT statement (``WITH … SELECT``, ``FROM t``, ``VALUES``, ``DESCRIBE``
count as SELECT). It runs in a fresh in-memory DuckDB instance that ATTACHes `database` read-only
and then switches file access off (``enable_external_access = false``: no ATTACH of other files,
no COPY TO, no read_csv of other files, no extension downloads) and locks its configuration
(``lock_configuration = true``: no SET can undo that). A source with ``external_access = true``
keeps file and network access for its query (to read files besides `database`); the database stays
read-only and the query stays a single SELECT either way.
"""

from __future__ import annotations

from datetime import date
from typing import TYPE_CHECKING

import duckdb
import polars as pl

from pipeline.errors import SourceError
from pipeline.sources._frame import SourceFrame
from pipeline.sources._rows import CHUNK_CELLS, LongRows

if TYPE_CHECKING:
    from pipeline.sources._config import SourceConfig

__all__ = ["read_duckdb_sql"]


def _locked_connection(source: SourceConfig) -> duckdb.DuckDBPyConnection:
    """In-memory instance with `database` attached read-only as the default catalog, then locked."""
    assert source.database is not None
    allow = source.external_access
    con = duckdb.connect(config={"autoinstall_known_extensions": allow, "autoload_known_extensions": allow})
    try:
        con.execute("ATTACH ? AS src (READ_ONLY)", [str(source.database)])
        con.execute("USE src")
        if not allow:
            con.execute("SET enable_external_access = false")
        con.execute("SET lock_configuration = true")
    except BaseException:
        con.close()
        raise
    return con


def _one_select(con: duckdb.DuckDBPyConnection, source: SourceConfig, origin: str) -> None:
    """The query is exactly one SELECT statement; anything else is refused before it runs."""
    assert source.query is not None
    statements = con.extract_statements(source.query)
    if not statements:
        msg = f"source {source.name!r}: `query` is empty ({source.query.strip()[:40]!r}); write one SELECT statement"
        raise SourceError(msg)
    kinds = [s.type for s in statements]
    if len(kinds) > 1 or kinds[0] != duckdb.StatementType.SELECT:
        shown = ", ".join(k.name for k in kinds)
        msg = (
            f"{origin} refused: it holds {len(kinds)} statement(s) of type {shown}; a source query must be "
            "one SELECT statement (sources only read — no ATTACH, DETACH, DROP, COPY, SET, INSERT, …)"
        )
        raise SourceError(msg)


def read_duckdb_sql(source: SourceConfig, *, today: date) -> SourceFrame:
    """Run `query` on `database` (read-only, locked down; see the module docstring)."""
    assert source.database is not None and source.query is not None
    if not source.database.exists():
        msg = f"source {source.name!r}: database {str(source.database)!r} does not exist; fix `database`"
        raise SourceError(msg)
    origin = f"query of source {source.name!r} on {source.database}"
    try:
        # An in-memory instance that ATTACHes the file: never handed a cached instance of the same path.
        con = _locked_connection(source)
    except duckdb.Error as exc:
        text = " ".join(str(exc).split())[:400]
        msg = f"source {source.name!r}: database {str(source.database)!r} cannot be opened read-only: {text}"
        raise SourceError(msg) from None
    where = f"{origin} (row numbers from 1)"
    rows = LongRows(origin=where, source=source, today=today)
    try:
        _one_select(con, source, origin)
        relation = con.sql(source.query)
        rows.check_header(relation.columns)
        step = max(CHUNK_CELLS // max(len(relation.columns), 1), 1)
        reader = relation.to_arrow_reader(step)
        for batch in reader:  # one slice of the result at a time
            part = pl.from_arrow(batch)
            assert isinstance(part, pl.DataFrame)
            rows.add(part, lines=pl.Series("line", range(rows.rows + 1, rows.rows + 1 + part.height)))
    except duckdb.Error as exc:
        text = " ".join(str(exc).split())[:400]
        hint = (
            "; a query reads only `database` unless the source sets `external_access = true`"
            if isinstance(exc, duckdb.PermissionException) else ""
        )  # fmt: skip
        msg = f"{origin} failed: {text}{hint}; fix `query` (try it in the duckdb shell)"
        raise SourceError(msg) from None
    finally:
        con.close()
    if rows.rows == 0:
        msg = f"{where}: has a header but no data rows; check the export that wrote it"
        raise SourceError(msg)
    return SourceFrame(source=source.name, frame=rows.finish(), origins=(origin,))
