"""Source adapters: each kind reads its rows and returns validated long rows (series, date, value).

``KINDS`` maps a source kind to its reader and the key that says where its rows are — the one
place to add a kind (``READERS`` and the config's list of kinds are derived from it). Every reader
has the signature ``reader(source, *, today) -> SourceFrame`` and ends in the shared row checks of
:mod:`pipeline.sources._rows`, so all kinds obey the same cleaning rules and errors. The keys of a
``[[sources]]`` table are declared in :mod:`pipeline.sources._config` (``SourceConfig``).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from datetime import date

from pipeline.sources._config import SourceConfig
from pipeline.sources._csv import read_csv
from pipeline.sources._demo import DEMO_FILES, read_demo
from pipeline.sources._duckdb_sql import read_duckdb_sql
from pipeline.sources._frame import SourceFrame
from pipeline.sources._http import fetch_with_retries, read_http_csv
from pipeline.sources._parquet import read_parquet
from pipeline.sources._rows import LONG_SCHEMA, MAX_ABS_VALUE, MISSING_MARKERS

__all__ = [
    "DEMO_FILES",
    "KINDS",
    "LONG_SCHEMA",
    "MAX_ABS_VALUE",
    "MISSING_MARKERS",
    "READERS",
    "SourceConfig",
    "SourceFrame",
    "SourceKind",
    "fetch_with_retries",
    "read_csv",
    "read_demo",
    "read_duckdb_sql",
    "read_http_csv",
    "read_parquet",
    "read_source",
]


@dataclass(frozen=True)
class SourceKind:
    """A source kind: its reader, and the `[[sources]]` key naming where its rows are."""

    reader: Callable[..., SourceFrame]
    reads: str


#: kind → reader and location key. The one place a kind is added.
KINDS: dict[str, SourceKind] = {
    "csv": SourceKind(read_csv, "path"),
    "parquet": SourceKind(read_parquet, "path"),
    "http_csv": SourceKind(read_http_csv, "url"),
    "duckdb_sql": SourceKind(read_duckdb_sql, "query"),
    "demo": SourceKind(read_demo, "dataset"),
}
#: kind → reader (derived from `KINDS`).
READERS: dict[str, Callable[..., SourceFrame]] = {kind: k.reader for kind, k in KINDS.items()}


def read_source(source: SourceConfig, *, today: date | None = None) -> SourceFrame:
    """Read one configured source; `today` (default: the local date) bounds acceptable dates."""
    return READERS[source.kind](source, today=today or date.today())
