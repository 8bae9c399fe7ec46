"""Source adapters: each kind reads its rows and returns validated long rows (series, date, value).

``READERS`` maps a source kind to its reader — the one place to add a kind. Every reader has the
signature ``reader(source, *, today) -> SourceFrame`` and ends in the shared row checks of
:mod:`pipeline.sources._rows`, so all kinds obey the same cleaning rules and errors.
"""

from __future__ import annotations

from collections.abc import Callable
from datetime import date
from typing import TYPE_CHECKING

from pipeline.sources._csv import read_csv
from pipeline.sources._demo import DEMO_FILES, read_demo
from pipeline.sources._duckdb_sql import read_duckdb_sql
from pipeline.sources._frame import SourceFrame
from pipeline.sources._http import fetch_with_retries, read_http_csv
from pipeline.sources._parquet import read_parquet
from pipeline.sources._rows import LONG_SCHEMA, MAX_ABS_VALUE, MISSING_MARKERS

if TYPE_CHECKING:
    from pipeline.config import SourceConfig

__all__ = [
    "DEMO_FILES",
    "LONG_SCHEMA",
    "MAX_ABS_VALUE",
    "MISSING_MARKERS",
    "READERS",
    "SourceFrame",
    "fetch_with_retries",
    "read_csv",
    "read_demo",
    "read_duckdb_sql",
    "read_http_csv",
    "read_parquet",
    "read_source",
]

READERS: dict[str, Callable[..., SourceFrame]] = {
    "csv": read_csv,
    "parquet": read_parquet,
    "http_csv": read_http_csv,
    "duckdb_sql": read_duckdb_sql,
    "demo": read_demo,
}


def read_source(source: SourceConfig, *, today: date | None = None) -> SourceFrame:
    """Read one configured source; `today` (default: the local date) bounds acceptable dates."""
    return READERS[source.kind](source, today=today or date.today())
