"""A SQL query against another DuckDB file, opened read-only."""

from __future__ import annotations

from datetime import date
from typing import TYPE_CHECKING

import duckdb
import polars as pl

from pipeline.errors import SourceError
from pipeline.sources._frame import SourceFrame
from pipeline.sources._rows import from_table

if TYPE_CHECKING:
    from pipeline.sources._config import SourceConfig

__all__ = ["read_duckdb_sql"]


def read_duckdb_sql(source: SourceConfig, *, today: date) -> SourceFrame:
    """Run `query` on `database` (read-only, a fresh in-memory instance attaching the file)."""
    assert source.database is not None and source.query is not None
    if not source.database.exists():
        msg = f"source {source.name!r}: database {str(source.database)!r} does not exist; fix `database`"
        raise SourceError(msg)
    origin = f"query of source {source.name!r} on {source.database}"
    # An in-memory instance that ATTACHes the file: never handed a cached instance of the same path.
    con = duckdb.connect()
    try:
        con.execute("ATTACH ? AS src (READ_ONLY)", [str(source.database)])
        con.execute("USE src")
        table = con.sql(source.query).to_arrow_table()
    except duckdb.Error as exc:
        text = " ".join(str(exc).split())[:400]
        msg = f"{origin} failed: {text}; fix `query` (try it in the duckdb shell)"
        raise SourceError(msg) from None
    finally:
        con.close()
    df = pl.from_arrow(table)
    assert isinstance(df, pl.DataFrame)
    frame = from_table(df, origin=f"{origin} (row numbers from 1)", source=source, today=today, first_line=1)
    return SourceFrame(source=source.name, frame=frame, origins=(origin,))
