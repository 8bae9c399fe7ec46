"""Sources where analysts' data lives, against real servers on loopback started by the fixtures.

An S3-compatible object server (moto, with credential checks on), Debian's PostgreSQL (initdb +
pg_ctl in a temporary folder), SQLite files, Excel workbooks and the local HTTP server. Every
failure a user can cause (bad credential, missing bucket, unreachable server, wrong sheet) is one
line naming the source and the fix. No fixture skips: a missing server program fails the test
with the install command (tests/pipeline/servers.py).
"""

from __future__ import annotations

import dataclasses
import io
import sqlite3
from collections.abc import Iterator
from datetime import date, timedelta
from pathlib import Path
from typing import ClassVar

import numpy as np
import polars as pl
import pytest

from pipeline.config import SeriesSpec, SourceConfig, UniverseConfig, load_config
from pipeline.errors import ConfigError, SourceError
from pipeline.sources import read_source
from tests.pipeline.helpers import CsvHandler, serve_locally
from tests.pipeline.servers import ObjectServer, Postgres, free_port, object_server, postgres_server

TODAY = date(2024, 6, 28)

WIDE = "date,A,B\n2024-01-02,100,50\n2024-01-03,101.5,\n2024-01-04,102,51\n"
EXPECTED = pl.DataFrame(
    {
        "series": ["A", "A", "A", "B", "B"],
        "date": [date(2024, 1, 2), date(2024, 1, 3), date(2024, 1, 4), date(2024, 1, 2), date(2024, 1, 4)],
        "value": [100.0, 101.5, 102.0, 50.0, 51.0],
    }
)
LONG_ROWS = [(r["date"], r["series"], r["value"]) for r in EXPECTED.iter_rows(named=True)]


def one_line(exc: pytest.ExceptionInfo[BaseException]) -> str:
    text = str(exc.value)
    assert "\n" not in text, text
    return text


# --------------------------------------------------------------------------------------------
# Object store (moto on 127.0.0.1) — credentials only from the environment
# --------------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def s3_server() -> Iterator[ObjectServer]:
    with object_server() as server:
        s3 = server.client()
        s3.create_bucket(Bucket="markets")
        buf = io.BytesIO()
        pl.read_csv(WIDE.encode(), try_parse_dates=True).write_parquet(buf)
        s3.put_object(Bucket="markets", Key="prices/2024.parquet", Body=buf.getvalue())
        s3.put_object(Bucket="markets", Key="csv/part1.csv", Body=b"date,A\n2024-01-03,101.5\n2024-01-02,100\n")
        s3.put_object(Bucket="markets", Key="csv/part2.csv", Body=b"date,A,B\n2024-01-04,102,51\n2024-01-02,100,50\n")
        # a hive-partitioned dataset: the series is a folder, year= only organises the files
        for name, part in EXPECTED.group_by("series"):
            buf = io.BytesIO()
            part.drop("series").write_parquet(buf)
            s3.put_object(Bucket="markets", Key=f"hive/series={name[0]}/year=2024/part-0.parquet", Body=buf.getvalue())
        yield server


@pytest.fixture
def s3(s3_server: ObjectServer, monkeypatch: pytest.MonkeyPatch) -> ObjectServer:
    for key, value in s3_server.env().items():
        monkeypatch.setenv(key, value)
    monkeypatch.delenv("AWS_PROFILE", raising=False)
    return s3_server


def s3_source(path: str, **kw: object) -> SourceConfig:
    base: dict[str, object] = {"name": "store", "kind": "parquet", "path": path, "timeout": 5.0, "retries": 0}
    base.update(kw)
    return SourceConfig(**base)  # type: ignore[arg-type]  # field overrides of mixed types


def test_parquet_and_csv_globs_on_the_object_store(s3: ObjectServer) -> None:
    got = read_source(s3_source("s3://markets/prices/*.parquet"), today=TODAY)
    assert got.frame.equals(EXPECTED)
    assert got.origins == ("s3://markets/prices/2024.parquet",)
    csv = read_source(s3_source("s3://markets/csv/part*.csv", kind="csv"), today=TODAY)
    assert csv.frame.equals(EXPECTED)
    assert csv.origins == ("s3://markets/csv/part1.csv", "s3://markets/csv/part2.csv")


def test_hive_partitioned_parquet_dataset(s3: ObjectServer, tmp_path: Path) -> None:
    # the folder stands for every .parquet below it; series= supplies the series column
    got = read_source(s3_source("s3://markets/hive/", layout="long"), today=TODAY)
    assert got.frame.equals(EXPECTED)
    # the same dataset on local disk, named by a glob
    for name, part in EXPECTED.group_by("series"):
        folder = tmp_path / "hive" / f"series={name[0]}" / "year=2024"
        folder.mkdir(parents=True)
        part.drop("series").write_parquet(folder / "part-0.parquet")
    local = SourceConfig(name="h", kind="parquet", path=str(tmp_path / "hive" / "**" / "*.parquet"), layout="long")
    assert read_source(local, today=TODAY).frame.equals(EXPECTED)
    folder = dataclasses.replace(local, path=str(tmp_path / "hive"))
    assert read_source(folder, today=TODAY).frame.equals(EXPECTED)


def test_object_store_path_is_not_rewritten_into_a_local_path(tmp_path: Path) -> None:
    config = tmp_path / "c.toml"
    config.write_text(
        '[warehouse]\npath = "wh.duckdb"\nsnapshot = "serving.duckdb"\n\n'
        '[[sources]]\nname = "store"\nkind = "parquet"\npath = "s3://markets/prices/*.parquet"\n\n'
        '[[sources]]\nname = "web"\nkind = "csv"\npath = "https://example.org/prices.csv"\n'
        'headers = ["Authorization: Bearer ${MARKETS_TOKEN}"]\n\n'
        '[[universes]]\nname = "u"\nseries = ["A", "B"]\nwindow = 30\nlags = 1\nhorizon = 2\n',
        encoding="utf-8",
    )
    sources = load_config(config).sources
    assert [s.path for s in sources] == ["s3://markets/prices/*.parquet", "https://example.org/prices.csv"]


def test_missing_bucket_is_one_line_naming_source_and_fix(s3: ObjectServer) -> None:
    with pytest.raises(SourceError) as info:
        read_source(s3_source("s3://no-such-bucket/prices/*.parquet"), today=TODAY)
    text = one_line(info)
    assert text.startswith("source 'store': ") and "bucket 'no-such-bucket' does not exist" in text and "check the bucket name" in text


def test_missing_key_in_existing_bucket(s3: ObjectServer) -> None:
    with pytest.raises(SourceError) as info:
        read_source(s3_source("s3://markets/nothing/*.parquet"), today=TODAY)
    assert "no file matches path 's3://markets/nothing/*.parquet' (the bucket exists)" in one_line(info)


def test_bad_credentials_are_one_line_naming_the_environment(s3: ObjectServer, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("AWS_SECRET_ACCESS_KEY", "wrong-secret")
    with pytest.raises(SourceError) as info:
        read_source(s3_source("s3://markets/prices/*.parquet"), today=TODAY)
    text = one_line(info)
    assert text.startswith("source 'store': ") and "refused the credentials" in text
    assert "AWS_ACCESS_KEY_ID and AWS_SECRET_ACCESS_KEY" in text and "never in the config file" in text


def test_unreachable_object_store(s3: ObjectServer, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("AWS_ENDPOINT_URL", f"http://127.0.0.1:{free_port()}")  # nothing listens there
    with pytest.raises(SourceError) as info:
        read_source(s3_source("s3://markets/prices/*.parquet", timeout=1.0), today=TODAY)
    text = one_line(info)
    assert text.startswith("source 'store': ") and "cannot reach the object store" in text and "AWS_ENDPOINT_URL" in text


# --------------------------------------------------------------------------------------------
# PostgreSQL (Debian's server) and SQLite
# --------------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def pg() -> Iterator[Postgres]:
    import psycopg

    with postgres_server() as server:
        with psycopg.connect(server.admin(), autocommit=True) as con:
            con.execute("CREATE TABLE px (d DATE, name TEXT, v DOUBLE PRECISION)")
            with con.cursor() as cur:
                cur.executemany("INSERT INTO px VALUES (%s, %s, %s)", LONG_ROWS)
        yield server


@pytest.fixture
def pg_env(pg: Postgres, monkeypatch: pytest.MonkeyPatch) -> Postgres:
    monkeypatch.setenv("PGPASSWORD", pg.password)  # libpq's chain: never in the config
    return pg


QUERY = "SELECT d AS date, name AS series, v AS value FROM px"


def pg_source(pg: Postgres, **kw: object) -> SourceConfig:
    base: dict[str, object] = {"name": "pg", "kind": "sql", "connection": pg.url(), "query": QUERY, "layout": "long", "timeout": 5.0}
    base.update(kw)
    return SourceConfig(**base)  # type: ignore[arg-type]  # field overrides of mixed types


def _pg_rows(pg: Postgres) -> int:
    import psycopg

    with psycopg.connect(pg.admin()) as con:
        row = con.execute("SELECT count(*) FROM px").fetchone()
    assert row is not None
    return int(row[0])


def test_postgres_query_reads_long_rows(pg_env: Postgres) -> None:
    got = read_source(pg_source(pg_env), today=TODAY)
    assert got.frame.equals(EXPECTED)
    assert got.origins == (f"query of source 'pg' on postgresql 127.0.0.1:{pg_env.port}/markets",)


@pytest.mark.parametrize(
    "attack",
    [
        "DROP TABLE px",
        "INSERT INTO px VALUES ('2024-01-05', 'A', 1) RETURNING *",
        QUERY + "; DROP TABLE px",
        "DELETE FROM px RETURNING d AS date, name AS series, v AS value",
        "WITH gone AS (DELETE FROM px RETURNING *) SELECT d AS date, name AS series, v AS value FROM gone",
    ],
)
def test_postgres_query_that_writes_is_refused(pg_env: Postgres, attack: str) -> None:
    before = _pg_rows(pg_env)
    with pytest.raises(SourceError) as info:
        read_source(pg_source(pg_env, query=attack), today=TODAY)
    text = one_line(info)
    assert text.startswith("query of source 'pg' on postgresql ") and ("refused" in text or "read-only" in text), text
    assert _pg_rows(pg_env) == before


def test_postgres_wrong_password(pg: Postgres, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("PGPASSWORD", "not-the-password")
    with pytest.raises(SourceError) as info:
        read_source(pg_source(pg), today=TODAY)
    text = one_line(info)
    assert text.startswith("source 'pg': PostgreSQL refused the login of user 'shockflow'") and "PGPASSWORD or ~/.pgpass" in text


def test_postgres_unreachable_and_missing_database(pg_env: Postgres) -> None:
    with pytest.raises(SourceError) as info:
        read_source(pg_source(pg_env, connection=f"postgresql://shockflow@127.0.0.1:{free_port()}/markets", timeout=2.0), today=TODAY)
    text = one_line(info)
    assert text.startswith("source 'pg': cannot reach the server; check host and port in `connection`")
    with pytest.raises(SourceError) as info:
        read_source(pg_source(pg_env, connection=pg_env.url(database="nope")), today=TODAY)
    assert "fix the user or database name in `connection`" in one_line(info)


def test_postgres_query_error_names_the_source(pg_env: Postgres) -> None:
    with pytest.raises(SourceError) as info:
        read_source(pg_source(pg_env, query="SELECT * FROM nope"), today=TODAY)
    assert "failed: " in one_line(info) and "fix `query`" in str(info.value)


def test_password_in_connection_is_refused_by_the_config(tmp_path: Path) -> None:
    config = tmp_path / "c.toml"
    config.write_text(
        '[warehouse]\npath = "wh.duckdb"\nsnapshot = "serving.duckdb"\n\n'
        '[[sources]]\nname = "pg"\nkind = "sql"\nconnection = "postgresql://u:hunter2@db:5432/m"\nquery = "SELECT 1"\n\n'
        '[[universes]]\nname = "u"\nseries = ["A", "B"]\nwindow = 30\nlags = 1\nhorizon = 2\n',
        encoding="utf-8",
    )
    with pytest.raises(ConfigError) as info:
        load_config(config)
    assert any("connection` holds a password" in p and "PGPASSWORD" in p and "hunter2" not in p for p in info.value.problems)


def _sqlite(path: Path) -> Path:
    con = sqlite3.connect(path)
    con.execute("CREATE TABLE px (d TEXT, name TEXT, v REAL)")
    con.executemany("INSERT INTO px VALUES (?, ?, ?)", [(d.isoformat(), s, v) for d, s, v in LONG_ROWS])
    con.commit()
    con.close()
    return path


def test_sqlite_query(tmp_path: Path) -> None:
    src = SourceConfig(name="lite", kind="sql", database=_sqlite(tmp_path / "m.sqlite"), query=QUERY, layout="long")
    assert read_source(src, today=TODAY).frame.equals(EXPECTED)


@pytest.mark.parametrize(
    "attack",
    [
        "DROP TABLE px",
        QUERY + "; DROP TABLE px",
        "ATTACH '{dir}/other.sqlite' AS o",
        "INSERT INTO px VALUES ('2024-01-05', 'A', 1) RETURNING *",
        "PRAGMA writable_schema = 1",
    ],
)
def test_sqlite_query_that_writes_is_refused(tmp_path: Path, attack: str) -> None:
    db = _sqlite(tmp_path / "m.sqlite")
    src = SourceConfig(name="lite", kind="sql", database=db, query=attack.format(dir=tmp_path), layout="long")
    with pytest.raises(SourceError) as info:
        read_source(src, today=TODAY)
    assert "refused" in one_line(info) and "one SELECT statement" in str(info.value)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["m.sqlite"]
    assert sqlite3.connect(db).execute("SELECT count(*) FROM px").fetchone() == (len(LONG_ROWS),)


def test_sql_reads_a_plain_file_without_a_database(tmp_path: Path) -> None:
    (tmp_path / "px.csv").write_text("d,name,v\n" + "".join(f"{d},{s},{v!r}\n" for d, s, v in LONG_ROWS))
    pl.read_csv(tmp_path / "px.csv", try_parse_dates=True).write_parquet(tmp_path / "px.parquet")
    for name in ("px.csv", "px.parquet"):
        src = SourceConfig(name="f", kind="sql", path=str(tmp_path / name), query=QUERY.replace("px", "source"), layout="long")
        assert read_source(src, today=TODAY).frame.equals(EXPECTED), name
    (tmp_path / "other.csv").write_text("x\n1\n")
    other = SourceConfig(name="f", kind="sql", path=str(tmp_path / "px.csv"), query=f"SELECT * FROM read_csv('{tmp_path}/other.csv')")
    with pytest.raises(SourceError) as info:
        read_source(other, today=TODAY)
    assert "reads only the table `source` (px.csv)" in one_line(info)


def test_sql_location_rules_in_the_config(tmp_path: Path) -> None:
    config = tmp_path / "c.toml"
    config.write_text(
        '[warehouse]\npath = "wh.duckdb"\nsnapshot = "serving.duckdb"\n\n'
        '[[sources]]\nname = "both"\nkind = "sql"\nconnection = "postgresql://u@db/m"\ndatabase = "m.sqlite"\nquery = "SELECT 1"\n\n'
        '[[sources]]\nname = "sheetless"\nkind = "csv"\npath = "a.csv"\nsheet = "Data"\n\n'
        '[[universes]]\nname = "u"\nseries = ["A", "B"]\nwindow = 30\nlags = 1\nhorizon = 2\n',
        encoding="utf-8",
    )
    with pytest.raises(ConfigError) as info:
        load_config(config)
    problems = "\n".join(info.value.problems)
    assert "needs exactly one of `database`, `connection`, `path`" in problems
    assert "`sources['sheetless'].sheet` is not used by kind = 'csv'" in problems


# --------------------------------------------------------------------------------------------
# Excel workbooks
# --------------------------------------------------------------------------------------------


def _workbook(path: Path) -> Path:
    import openpyxl
    from openpyxl.workbook.defined_name import DefinedName
    from openpyxl.worksheet.table import Table

    book = openpyxl.Workbook()
    notes = book.active
    assert notes is not None
    notes.title = "Notes"
    notes["A1"] = "invented test data"
    ws = book.create_sheet("Prices")
    ws["A1"] = "Closing prices (title row)"
    ws.append([])
    ws.append(["date", "A", "B"])  # header on row 3
    ws.append([date(2024, 1, 2), 100, 50])
    ws.append([date(2024, 1, 3), 101.5, None])
    ws.append([])  # a blank separator row is skipped
    ws.append([date(2024, 1, 4), 102, 51])
    ws.add_table(Table(displayName="PriceTable", ref="A3:C7"))
    book.defined_names["price_block"] = DefinedName("price_block", attr_text="Prices!$A$3:$C$7")
    book.save(path)
    return path


def excel(path: Path, **kw: object) -> SourceConfig:
    fields: dict[str, object] = {"name": "book", "kind": "excel", "path": str(path), **kw}
    return SourceConfig(**fields)  # type: ignore[arg-type]  # field overrides of mixed types


def test_excel_sheet_range_table_and_defined_name(tmp_path: Path) -> None:
    book = _workbook(tmp_path / "prices.xlsx")
    for kw in (
        {"sheet": "Prices", "header_row": 3},
        {"sheet": "Prices", "range": "A3:C7"},
        {"sheet": "Prices", "range": "A1:C7", "header_row": 3},
        {"table": "PriceTable"},
        {"table": "price_block"},
    ):
        assert read_source(excel(book, **kw), today=TODAY).frame.equals(EXPECTED), kw


@pytest.mark.parametrize(
    ("kw", "pattern"),
    [
        ({"sheet": "Price"}, r"^source 'book': workbook .*prices\.xlsx has no sheet 'Price' \(did you mean 'Prices'\?\); its sheets are 'Notes', 'Prices' — fix `sheet`$"),
        ({"table": "Nope"}, r"^source 'book': workbook .*has no table or defined name 'Nope' \(it has: 'PriceTable', 'price_block'\); fix `table`$"),
        ({"sheet": "Prices", "header_row": 2}, r"^source 'book': .*sheet 'Prices' has no column names in row 2 \(header_row = 2\); set `header_row`"),
        ({"sheet": "Prices"}, r"sheet 'Prices' \(line = worksheet row\): no column 'date'.*set the source's column keys"),
    ],
)
def test_excel_wrong_sheet_table_or_header_is_one_line(tmp_path: Path, kw: dict[str, object], pattern: str) -> None:
    book = _workbook(tmp_path / "prices.xlsx")
    with pytest.raises(SourceError, match=pattern) as info:
        read_source(excel(book, **kw), today=TODAY)
    one_line(info)


def test_excel_bad_cell_names_the_worksheet_row(tmp_path: Path) -> None:
    import openpyxl

    book = openpyxl.Workbook()
    ws = book.active
    assert ws is not None
    ws.append(["date", "A"])
    ws.append([date(2024, 1, 2), 1.0])
    ws.append([date(2024, 1, 3), "n/a?"])
    book.save(tmp_path / "b.xlsx")
    with pytest.raises(Exception, match=r"b\.xlsx, sheet 'Sheet' \(line = worksheet row\), line 3: value 'n/a\?' of series 'A' is not a number"):
        read_source(excel(tmp_path / "b.xlsx"), today=TODAY)


def test_not_a_workbook(tmp_path: Path) -> None:
    (tmp_path / "x.xlsx").write_text("date,A\n")
    with pytest.raises(SourceError, match=r"^source 'book': .*x\.xlsx is not a readable \.xlsx workbook .*save it as \.xlsx"):
        read_source(excel(tmp_path / "x.xlsx"), today=TODAY)


# --------------------------------------------------------------------------------------------
# HTTP: headers from the environment, Retry-After, jitter, proxies from the environment
# --------------------------------------------------------------------------------------------


class _Handler(CsvHandler):
    hits: ClassVar[dict[str, int]] = {}
    seen: ClassVar[dict[str, str | None]] = {}

    def do_GET(self) -> None:
        n = self.hits[self.path] = self.hits.get(self.path, 0) + 1
        self.seen[self.path] = self.headers.get("Authorization")
        body = WIDE.encode()
        if self.path.endswith("/private.csv"):
            ok = self.headers.get("Authorization") == "Bearer t0ken"
            self._send(200, body) if ok else self._send(401, b"who are you")
        elif self.path.endswith("/busy.csv"):  # 503 with Retry-After: 2 once, then the file
            if n == 1:
                self.send_response(503)
                self.send_header("Retry-After", "2")
                self.send_header("Content-Length", "0")
                self.end_headers()
            else:
                self._send(200, body)
        elif self.path.endswith("/closed.csv"):
            self.send_response(429)
            self.send_header("Retry-After", "86400")
            self.send_header("Content-Length", "0")
            self.end_headers()
        else:
            self._send(200, body)


@pytest.fixture(scope="module")
def web() -> Iterator[str]:
    with serve_locally(_Handler) as url:
        yield url


def test_header_value_comes_from_the_environment(web: str, monkeypatch: pytest.MonkeyPatch) -> None:
    src = SourceConfig(name="h", kind="http_csv", url=web + "/private.csv", headers=("Authorization: Bearer ${MARKETS_TOKEN}",), retries=0)
    monkeypatch.delenv("MARKETS_TOKEN", raising=False)
    with pytest.raises(SourceError, match=r"^source 'h': header 'Authorization' needs the environment variable MARKETS_TOKEN, which is not set; export it"):
        read_source(src, today=TODAY)
    monkeypatch.setenv("MARKETS_TOKEN", "wrong")
    with pytest.raises(SourceError, match=r"HTTP 401 .*check the credentials in the environment variables its `headers` name \(not retried\)"):
        read_source(src, today=TODAY)
    monkeypatch.setenv("MARKETS_TOKEN", "t0ken")
    assert read_source(src, today=TODAY).frame.equals(EXPECTED)
    # a csv source at an https/http address sends the same headers
    as_path = SourceConfig(name="h", kind="csv", path=web + "/private.csv", headers=src.headers, retries=0)
    assert read_source(as_path, today=TODAY).frame.equals(EXPECTED)


def test_literal_secret_header_is_refused_by_the_config(tmp_path: Path) -> None:
    config = tmp_path / "c.toml"
    config.write_text(
        '[warehouse]\npath = "wh.duckdb"\nsnapshot = "serving.duckdb"\n\n'
        '[[sources]]\nname = "h"\nkind = "http_csv"\nurl = "https://example.org/a.csv"\nheaders = ["Authorization: Bearer abc123"]\n\n'
        '[[universes]]\nname = "u"\nseries = ["A", "B"]\nwindow = 30\nlags = 1\nhorizon = 2\n',
        encoding="utf-8",
    )
    with pytest.raises(ConfigError) as info:
        load_config(config)
    assert any("gives header 'Authorization' a literal value" in p and "${MY_TOKEN}" in p for p in info.value.problems)


def test_retry_after_is_honoured_and_back_off_is_jittered(web: str) -> None:
    from pipeline.sources import fetch_with_retries

    waits: list[float] = []
    data = fetch_with_retries(web + "/busy.csv", timeout=5, retries=2, backoff=0.1, sleep=waits.append, jitter=lambda: 0.0)
    assert data == WIDE.encode()
    assert waits == [2.0]  # the server's Retry-After (2 s) beats the back-off 0.1 · 2^0 · 1
    # jitter: attempt k waits backoff · 2^k · (1 + u/2), u in [0, 1): never below the plain back-off
    spread: list[float] = []
    with pytest.raises(SourceError):
        fetch_with_retries(f"http://127.0.0.1:{free_port()}/x.csv", timeout=1, retries=2, backoff=1.0,
                           sleep=spread.append, jitter=iter([0.0, 0.99]).__next__)  # fmt: skip
    assert spread == [1.0, 2 * 1.495]


def test_retry_after_longer_than_a_run_waits_fails_at_once(web: str) -> None:
    from pipeline.sources import fetch_with_retries

    waits: list[float] = []
    with pytest.raises(SourceError, match=r"HTTP 429 .* with Retry-After 86400 s, longer than the 300 s a run waits; run again later"):
        fetch_with_retries(web + "/closed.csv", timeout=5, retries=3, backoff=0.1, sleep=waits.append)
    assert waits == []


def test_retry_after_as_http_date() -> None:
    from datetime import UTC, datetime

    from pipeline.sources._fetch import retry_after

    now = datetime(2024, 6, 28, 12, 0, 0, tzinfo=UTC)
    assert retry_after("Fri, 28 Jun 2024 12:00:30 GMT", now=now) == 30.0
    assert retry_after("7", now=now) == 7.0
    assert retry_after("soon", now=now) is None


class _Proxy(CsvHandler):
    """A forward proxy: answers every absolute-URI request itself (records what it was asked)."""

    asked: ClassVar[list[str]] = []

    def do_GET(self) -> None:
        self.asked.append(self.path)
        self._send(200, WIDE.encode())


def test_proxy_from_the_environment_is_used(monkeypatch: pytest.MonkeyPatch) -> None:
    with serve_locally(_Proxy) as proxy:
        monkeypatch.setenv("HTTP_PROXY", proxy)
        monkeypatch.delenv("NO_PROXY", raising=False)
        monkeypatch.delenv("no_proxy", raising=False)
        src = SourceConfig(name="h", kind="http_csv", url="http://markets.invalid/prices.csv", retries=0, timeout=5.0)
        assert read_source(src, today=TODAY).frame.equals(EXPECTED)
    assert _Proxy.asked == ["http://markets.invalid/prices.csv"]


# --------------------------------------------------------------------------------------------
# The check: one universe from CSV, Parquet on the object store, PostgreSQL, SQLite and Excel
# gives bit-identical prepared data
# --------------------------------------------------------------------------------------------


def _universe_rows() -> list[tuple[date, str, float]]:
    """Three invented price series on 90 weekdays, a few missing cells (an invented scenario)."""
    rng = np.random.default_rng(14)
    days = [date(2024, 1, 1) + timedelta(days=i) for i in range(130)]
    days = [d for d in days if d.weekday() < 5][:90]
    rows = []
    for j, name in enumerate(("EQ", "FX", "RATE")):
        level = 100.0 * np.exp(np.cumsum(rng.normal(0, 0.01, len(days)))) * (j + 1)
        # quoted to 6 decimals (9-10 significant digits): openpyxl's writer keeps 15 significant
        # digits (Excel's own writer 17), so the test workbook holds exactly these doubles
        rows += [(d, name, round(float(v), 6)) for i, (d, v) in enumerate(zip(days, level, strict=True)) if (i + j) % 17 != 5]
    return rows


def test_same_universe_from_every_kind_of_source_prepares_bit_identically(
    tmp_path: Path, s3: ObjectServer, pg_env: Postgres
) -> None:
    import openpyxl
    import psycopg

    from pipeline import warehouse as wh
    from pipeline.jobs import ingest_source
    from pipeline.prepare import prepare_universe

    rows = _universe_rows()
    long = pl.DataFrame(rows, schema={"date": pl.Date, "series": pl.String, "value": pl.Float64}, orient="row")
    wide = long.pivot(on="series", index="date", values="value").sort("date")
    # CSV (local), written with repr: the shortest text that reads back as the same double
    (tmp_path / "u.csv").write_text(
        "date,EQ,FX,RATE\n" + "".join(f"{r[0]}," + ",".join("" if v is None else repr(v) for v in r[1:]) + "\n" for r in wide.iter_rows())
    )
    # Parquet on the object store
    buf = io.BytesIO()
    wide.write_parquet(buf)
    s3.client().put_object(Bucket="markets", Key="universe/u.parquet", Body=buf.getvalue())
    # PostgreSQL and SQLite: long tables
    with psycopg.connect(pg_env.admin(), autocommit=True) as con:
        con.execute("CREATE TABLE IF NOT EXISTS u (d DATE, name TEXT, v DOUBLE PRECISION)")
        con.execute("TRUNCATE u")
        with con.cursor() as cur:
            cur.executemany("INSERT INTO u VALUES (%s, %s, %s)", rows)
    lite = sqlite3.connect(tmp_path / "u.sqlite")
    lite.execute("CREATE TABLE u (d TEXT, name TEXT, v REAL)")
    lite.executemany("INSERT INTO u VALUES (?, ?, ?)", [(d.isoformat(), s, v) for d, s, v in rows])
    lite.commit()
    lite.close()
    # Excel: a title row above the header, dates as date cells
    book = openpyxl.Workbook()
    ws = book.active
    assert ws is not None
    ws.title = "Data"
    ws.append(["invented scenario"])
    ws.append(["date", "EQ", "FX", "RATE"])
    for r in wide.iter_rows():
        ws.append(list(r))
    book.save(tmp_path / "u.xlsx")

    query = "SELECT d AS date, name AS series, v AS value FROM u"
    sources = {
        "csv": SourceConfig(name="u", kind="csv", path=str(tmp_path / "u.csv")),
        "parquet_s3": SourceConfig(name="u", kind="parquet", path="s3://markets/universe/u.parquet", retries=0),
        "postgres": SourceConfig(name="u", kind="sql", connection=pg_env.url(), query=query, layout="long"),
        "sqlite": SourceConfig(name="u", kind="sql", database=tmp_path / "u.sqlite", query=query, layout="long"),
        "excel": SourceConfig(name="u", kind="excel", path=str(tmp_path / "u.xlsx"), sheet="Data", header_row=2),
        "sql_on_csv": SourceConfig(name="u", kind="sql", path=str(tmp_path / "u.csv"), layout="wide", query="SELECT * FROM source"),
    }
    universe = UniverseConfig(
        name="u", series=(SeriesSpec("EQ", "log_return"), SeriesSpec("FX", "log_return"), SeriesSpec("RATE", "diff")),
        window=30, lags=1, max_fill_gap=1,
    )  # fmt: skip
    prepared = {}
    for kind, source in sources.items():
        warehouse = tmp_path / f"wh_{kind}.duckdb"
        result = ingest_source(warehouse, source, today=TODAY)
        assert result.status == "succeeded", (kind, result)
        con = wh.connect(warehouse)
        try:
            obs = wh.read_observations(con, universe.names)
        finally:
            con.close()
        prepared[kind] = prepare_universe(obs, universe)
    base = prepared["csv"]
    assert base.y.shape[0] > 60 and len(base.names) == 3
    for kind, p in prepared.items():
        assert p.names == base.names and p.dates == base.dates, kind
        assert p.y.tobytes() == base.y.tobytes(), kind  # bit-identical
        assert p.dropped.equals(base.dropped), kind


def test_unreachable_http_server_is_one_line() -> None:
    src = SourceConfig(name="vendor", kind="http_csv", url=f"http://127.0.0.1:{free_port()}/a.csv", retries=1, backoff=0.0, timeout=2.0)
    with pytest.raises(SourceError) as info:
        read_source(src, today=TODAY)
    text = one_line(info)
    # the CLI and the ingest record put the source's name in front ("failed: source 'vendor': …")
    assert text.startswith("http://127.0.0.1:") and "failed after 2 attempts, last: ConnectError" in text
    assert "check the server or raise `retries`/`timeout`" in text


@pytest.fixture(scope="module")
def https_server(tmp_path_factory: pytest.TempPathFactory) -> Iterator[tuple[str, Path]]:
    """An HTTPS server on 127.0.0.1 whose certificate is signed by a private CA (made here with openssl)."""
    import shutil
    import ssl
    import subprocess

    from tests.pipeline.helpers import serve_locally

    openssl = shutil.which("openssl")
    if openssl is None:
        pytest.fail("the certificate test needs the openssl command (Debian package openssl)")
    d = tmp_path_factory.mktemp("tls")

    def run(*args: str) -> None:
        subprocess.run([openssl, *args], cwd=d, check=True, capture_output=True, timeout=60)

    run("req", "-x509", "-newkey", "rsa:2048", "-nodes", "-keyout", "ca.key", "-out", "ca.pem", "-days", "2", "-subj", "/CN=shockflow test CA")
    run("req", "-newkey", "rsa:2048", "-nodes", "-keyout", "srv.key", "-out", "srv.csr", "-subj", "/CN=127.0.0.1")
    (d / "ext.cnf").write_text("subjectAltName = IP:127.0.0.1\n")
    run("x509", "-req", "-in", "srv.csr", "-CA", "ca.pem", "-CAkey", "ca.key", "-CAcreateserial", "-out", "srv.pem", "-days", "2", "-extfile", "ext.cnf")
    context = ssl.SSLContext(ssl.PROTOCOL_TLS_SERVER)
    context.load_cert_chain(d / "srv.pem", d / "srv.key")
    with serve_locally(_Handler, tls=context) as url:
        yield url, d / "ca.pem"


def test_certificate_authority_from_the_environment(https_server: tuple[str, Path], monkeypatch: pytest.MonkeyPatch) -> None:
    url, ca = https_server
    assert url.startswith("https://127.0.0.1:")
    src = SourceConfig(name="tls", kind="http_csv", url=url + "/ok.csv", retries=0, timeout=5.0)
    for name in ("SSL_CERT_FILE", "SSL_CERT_DIR", "REQUESTS_CA_BUNDLE", "CURL_CA_BUNDLE"):
        monkeypatch.delenv(name, raising=False)
    with pytest.raises(SourceError) as info:
        read_source(src, today=TODAY)
    assert "certificate is not trusted: set SSL_CERT_FILE" in one_line(info)
    monkeypatch.setenv("SSL_CERT_FILE", str(ca))
    assert read_source(src, today=TODAY).frame.equals(EXPECTED)
    monkeypatch.delenv("SSL_CERT_FILE")
    monkeypatch.setenv("REQUESTS_CA_BUNDLE", str(ca))
    assert read_source(src, today=TODAY).frame.equals(EXPECTED)


def test_excel_workbook_on_the_object_store(s3: ObjectServer, tmp_path: Path) -> None:
    book = _workbook(tmp_path / "prices.xlsx")
    s3.client().put_object(Bucket="markets", Key="books/prices.xlsx", Body=book.read_bytes())
    got = read_source(SourceConfig(name="book", kind="excel", path="s3://markets/books/prices.xlsx", table="PriceTable"), today=TODAY)
    assert got.frame.equals(EXPECTED)


def test_readme_source_examples_load(tmp_path: Path) -> None:
    import re

    readme = (Path(__file__).resolve().parents[2] / "README.md").read_text(encoding="utf-8")
    block = re.search(r"Sources read local files.*?```toml\n(.*?)```", readme, re.DOTALL)
    assert block is not None, "README lost its sources example"
    config = tmp_path / "c.toml"
    config.write_text(
        '[warehouse]\npath = "wh.duckdb"\nsnapshot = "serving.duckdb"\n\n' + block.group(1)
        + '\n[[universes]]\nname = "u"\nseries = ["A", "B"]\nwindow = 30\nlags = 1\nhorizon = 2\n',
        encoding="utf-8",
    )
    kinds = [s.kind for s in load_config(config).sources]
    assert kinds == ["parquet", "sql", "excel", "http_csv"]


def test_a_folder_stands_for_its_csv_files(tmp_path: Path) -> None:
    (tmp_path / "2024").mkdir()
    (tmp_path / "2024" / "part1.csv").write_text("date,A\n2024-01-03,101.5\n2024-01-02,100\n")
    (tmp_path / "part2.csv").write_text("date,A,B\n2024-01-04,102,51\n2024-01-02,100,50\n")
    (tmp_path / "notes.txt").write_text("not data")
    got = read_source(SourceConfig(name="f", kind="csv", path=str(tmp_path)), today=TODAY)
    assert got.frame.equals(EXPECTED)
    assert got.origins == (str(tmp_path / "2024" / "part1.csv"), str(tmp_path / "part2.csv"))


def test_sql_database_kind_is_told_by_its_first_bytes(tmp_path: Path) -> None:
    import duckdb

    con = duckdb.connect(str(tmp_path / "m.db"))
    con.execute("CREATE TABLE px (d DATE, name VARCHAR, v DOUBLE)")
    con.executemany("INSERT INTO px VALUES (?, ?, ?)", [list(r) for r in LONG_ROWS])
    con.close()
    _sqlite(tmp_path / "lite.db")  # same ending, other engine
    for name in ("m.db", "lite.db"):
        src = SourceConfig(name="db", kind="sql", database=tmp_path / name, query=QUERY, layout="long")
        assert read_source(src, today=TODAY).frame.equals(EXPECTED), name
    (tmp_path / "other.db").write_bytes(b"not a database at all")
    with pytest.raises(SourceError, match=r"^source 'db': database .*other\.db' is neither a SQLite nor a DuckDB file; point `database` at one"):
        read_source(SourceConfig(name="db", kind="sql", database=tmp_path / "other.db", query=QUERY), today=TODAY)
