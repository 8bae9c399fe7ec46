"""The keys of one ``[[sources]]`` table, declared once (see :mod:`pipeline._declare`).

The declaration lives beside the readers that use it, below the config loader: the loader takes
the list of kinds from the reader registry (``pipeline.sources.KINDS``), so the readers must not
import the loader. `kind` and `dataset` are checked against that registry when the file is read.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from pipeline._declare import setting
from pipeline.sources._fetch import check_header

__all__ = ["SourceConfig", "check_name"]


def check_name(name: str) -> tuple[str, str] | None:
    """A source or universe name: non-empty, no slashes, tabs, newlines or surrounding spaces."""
    if not name.strip() or name != name.strip() or any(c in name for c in "/\\\n\t"):
        return f"is {name!r}", "use a non-empty name without slashes or surrounding spaces"
    return None


def _one_char(value: str) -> tuple[str, str] | None:
    return None if len(value) == 1 else (f"is {value!r}", "use a single character such as ',' or ';'")


def _strftime(value: str) -> tuple[str, str] | None:
    return None if "%" in value else (f"is {value!r}", "use strftime codes, e.g. '%Y-%m-%d'")


def _positive_seconds(value: float) -> tuple[str, str] | None:
    return None if value > 0 else (f"is {value}", "use a positive number of seconds")


def _seconds(value: float) -> tuple[str, str] | None:
    return None if value >= 0 else (f"is {value}", "use a non-negative number of seconds")


def _connection(value: str) -> tuple[str, str] | None:
    from urllib.parse import urlsplit

    parts = urlsplit(value)
    if parts.scheme not in ("postgresql", "postgres"):
        return f"is {value!r}", "use a postgresql://user@host:port/dbname address"
    if parts.password is not None:
        shown = value.replace(f":{parts.password}@", ":***@")
        return f"holds a password ({shown!r})", "remove it; set PGPASSWORD or ~/.pgpass in the environment instead"
    return None


def _cells(value: str) -> tuple[str, str] | None:
    import re

    if re.fullmatch(r"\$?[A-Za-z]{1,3}\$?[0-9]+:\$?[A-Za-z]{1,3}\$?[0-9]+", value.strip()):
        return None
    return f"is {value!r}", "give a cell range such as 'B3:F400'"


def _headers(value: tuple[str, ...]) -> tuple[str, str] | None:
    for entry in value:
        if (problem := check_header(entry)) is not None:
            return problem
    return None


@dataclass(frozen=True)
class SourceConfig:
    """One `[[sources]]` entry. `path` is an absolute glob pattern (csv, parquet) or DuckDB file."""

    name: str = setting(doc="unique name, recorded with every observation", check=check_name)
    kind: str = setting(doc="{choices}")
    path: str | None = setting(
        None,
        doc="`csv`/`parquet`/`excel`: a file, folder or glob (`data/*.csv`, `**` allowed), local or an address "
        "(`s3://bucket/prices/*.parquet`, `https://…`; credentials from the environment); all matching files "
        "are combined. `sql`: the CSV or Parquet file its query reads as the table `source`",
    )  # fmt: skip
    url: str | None = setting(None, doc="`http_csv`: an `http://` or `https://` address")
    query: str | None = setting(
        None,
        doc="`duckdb_sql`/`sql`: one SELECT statement, run read-only on a locked-down connection "
        "(no ATTACH, DETACH, DROP, COPY, SET; no other files)",
    )  # fmt: skip
    database: Path | None = setting(
        None, doc="`duckdb_sql`: the DuckDB file the query reads; `sql`: a DuckDB or SQLite file (told apart by its first bytes)"
    )
    connection: str | None = setting(
        None,
        doc="`sql`: a PostgreSQL address `postgresql://user@host:port/dbname`, without a password (libpq "
        "takes it from PGPASSWORD, PGPASSFILE or ~/.pgpass)",
        check=lambda v: _connection(v),
    )  # fmt: skip
    sheet: str | None = setting(None, doc="`excel`: the worksheet (default: the first)")
    range: str | None = setting(None, doc="`excel`: the cells to read, e.g. `B3:F400` (default: the whole sheet)", check=lambda v: _cells(v))
    table: str | None = setting(None, doc="`excel`: a named table or defined name to read instead of `sheet`/`range`")
    header_row: int = setting(1, minimum=1, doc="`excel`: the row holding the column names, counted from the first row read (1 = its first)")
    headers: tuple[str, ...] = setting(
        (), check=lambda v: _headers(v),
        doc="`http_csv` and http(s) paths: request headers `'Name: value'`; `${VAR}` is replaced by the environment "
        "variable VAR (a credential header must use one — the config names the variable, never the secret)",
    )  # fmt: skip
    dataset: str | None = setting(None, doc="`demo`: {choices} (the files in `data_samples/`)")
    layout: str = setting(
        "wide", choices=("wide", "long"), default_doc="`wide` (`long` for `duckdb_sql` and `sql`)",
        doc="`wide`: a date column and one column per series; `long`: date, series, value columns",
    )  # fmt: skip
    date_column: str = setting("date", doc="the date column")
    date_format: str = setting("%Y-%m-%d", doc="strftime format of text dates", check=_strftime)
    series_column: str = setting("series", doc="the long layout's series column")
    value_column: str = setting("value", doc="the long layout's value column")
    delimiter: str = setting(",", doc="CSV delimiter (one character)", check=_one_char)
    timeout: float = setting(30.0, doc="`http_csv`, `sql` on PostgreSQL, addresses in `path`: seconds allowed for connecting and for each read", check=_positive_seconds)
    retries: int = setting(
        3, minimum=0,
        doc="`http_csv` and addresses in `path`: extra attempts after a timeout, a dropped or truncated body, or HTTP 408/425/429/5xx",
    )  # fmt: skip
    backoff: float = setting(1.0, doc="`http_csv` and http(s) paths: attempt k (0-based) that fails waits `backoff · 2^k` seconds × a random factor in [1, 1.5), at least what `Retry-After` asks", check=_seconds)
    external_access: bool = setting(
        False,
        doc="`duckdb_sql`/`sql`: let the query read files or URLs besides `database` (the database stays "
        "read-only and the query one SELECT)",
    )  # fmt: skip

    @property
    def where(self) -> str:
        """Human description of where the rows come from, for messages."""
        return self.path or self.url or (str(self.database) if self.database else "") or self.connection or (
            f"demo dataset {self.dataset!r}"
        )
