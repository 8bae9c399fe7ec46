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
from typing import Any

from pipeline.sources._config import SourceConfig
from pipeline.sources._csv import read_csv
from pipeline.sources._demo import DEMO_FILES, read_demo
from pipeline.sources._duckdb_sql import read_duckdb_sql
from pipeline.sources._excel import read_excel
from pipeline.sources._frame import SourceFrame
from pipeline.sources._http import fetch_with_retries, read_http_csv
from pipeline.sources._locate import has_scheme
from pipeline.sources._parquet import read_parquet
from pipeline.sources._rows import LONG_SCHEMA, MAX_ABS_VALUE, MISSING_MARKERS
from pipeline.sources._sql import PLAIN_FILES, read_sql

__all__ = [
    "DEMO_FILES",
    "KINDS",
    "LOCATION_KEYS",
    "LONG_SCHEMA",
    "MAX_ABS_VALUE",
    "MISSING_MARKERS",
    "READERS",
    "SourceConfig",
    "SourceFrame",
    "SourceKind",
    "check_keys",
    "fetch_with_retries",
    "read_csv",
    "read_demo",
    "read_duckdb_sql",
    "read_excel",
    "read_http_csv",
    "read_parquet",
    "read_source",
    "read_sql",
]


@dataclass(frozen=True)
class SourceKind:
    """A source kind: its reader, the `[[sources]]` key naming where its rows are, and the other
    location keys it may use (any location key not listed is refused for the kind)."""

    reader: Callable[..., SourceFrame]
    reads: str
    uses: tuple[str, ...] = ()


#: kind → reader and location keys. The one place a kind is added.
KINDS: dict[str, SourceKind] = {
    "csv": SourceKind(read_csv, "path", ("headers",)),
    "parquet": SourceKind(read_parquet, "path", ("headers",)),
    "excel": SourceKind(read_excel, "path", ("headers", "sheet", "range", "table", "header_row")),
    "http_csv": SourceKind(read_http_csv, "url", ("headers",)),
    "sql": SourceKind(read_sql, "query", ("database", "connection", "path")),
    "duckdb_sql": SourceKind(read_duckdb_sql, "query", ("database", "path")),
    "demo": SourceKind(read_demo, "dataset"),
}

#: keys that only some kinds use (a kind not listing one in `reads`/`uses` refuses it when set).
LOCATION_KEYS = ("path", "url", "query", "dataset", "database", "connection", "sheet", "range", "table", "headers")


def check_keys(kind: str, values: dict[str, Any]) -> list[tuple[str, str, str]]:
    """Rules between the keys of one source of `kind`: (key, problem, fix) for each broken one."""
    spec = KINDS[kind]
    out: list[tuple[str, str, str]] = []
    if values.get(spec.reads) is None:
        out.append((spec.reads, f"is required for kind = {kind!r}", f"add `{spec.reads} = ...` to this source"))
    for key in LOCATION_KEYS:
        if key != spec.reads and key not in spec.uses and values.get(key) not in (None, ()):
            out.append((key, f"is not used by kind = {kind!r}", f"remove it (this kind reads `{spec.reads}`)"))
    if kind == "duckdb_sql" and values.get("database") is None:
        out.append(("database", "is required for kind = 'duckdb_sql'", "set it to the DuckDB file the query reads"))
    if kind == "sql":
        given = [k for k in ("database", "connection", "path") if values.get(k) is not None]
        if len(given) != 1:
            shown = " and ".join(f"`{k}`" for k in given) or "none of them"
            out.append((
                "database", f"kind = 'sql' needs exactly one of `database`, `connection`, `path` (got {shown})",
                "set `database` (a DuckDB or SQLite file), `connection` (postgresql://…) or `path` (a CSV/Parquet file)",
            ))  # fmt: skip
        path = values.get("path")
        if path is not None and (has_scheme(path) or not path.lower().endswith(PLAIN_FILES)):
            out.append(("path", f"is {path!r}", f"a `sql` source reads one local file ending in {', '.join(PLAIN_FILES)}"))
    if kind == "excel" and values.get("table") is not None:
        for key in ("sheet", "range"):
            if values.get(key) is not None:
                out.append((key, "is set together with `table`", "give either `table` or `sheet`/`range`"))
    url = values.get("url")
    if kind == "http_csv" and url is not None and not url.startswith(("http://", "https://")):
        out.append(("url", f"is {url!r}", "use an http:// or https:// address"))
    return out
#: kind → reader (derived from `KINDS`).
READERS: dict[str, Callable[..., SourceFrame]] = {kind: k.reader for kind, k in KINDS.items()}


def read_source(source: SourceConfig, *, today: date | None = None) -> SourceFrame:
    """Read one configured source; `today` (default: the local date) bounds acceptable dates."""
    return READERS[source.kind](source, today=today or date.today())
