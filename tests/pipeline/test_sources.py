"""Source adapters: every kind, wide and long layouts, and the row-level rules with their errors."""

from __future__ import annotations

import dataclasses
import time
from collections.abc import Iterator
from datetime import date
from pathlib import Path
from typing import ClassVar

import duckdb
import polars as pl
import pytest

from pipeline.config import SourceConfig
from pipeline.errors import DataError, SourceError
from pipeline.sources import fetch_with_retries, read_source
from tests.pipeline.helpers import CsvHandler, serve_locally

TODAY = date(2024, 6, 28)

WIDE = "date,A,B\n2024-01-02,100,50\n2024-01-03,101.5,\n2024-01-04,102,51\n"
LONG = "date,series,value\n2024-01-02,A,100\n2024-01-02,B,50\n2024-01-03,A,101.5\n2024-01-04,A,102\n2024-01-04,B,51\n"
EXPECTED = pl.DataFrame(
    {
        "series": ["A", "A", "A", "B", "B"],
        "date": [date(2024, 1, 2), date(2024, 1, 3), date(2024, 1, 4), date(2024, 1, 2), date(2024, 1, 4)],
        "value": [100.0, 101.5, 102.0, 50.0, 51.0],
    }
)


def csv_source(path: Path | str, **kw: object) -> SourceConfig:
    return SourceConfig(name="s", kind="csv", path=str(path), **kw)  # type: ignore[arg-type]


def read(path: Path, text: str | bytes, **kw: object) -> pl.DataFrame:
    if isinstance(text, str):
        path.write_text(text, encoding="utf-8")
    else:
        path.write_bytes(text)
    return read_source(csv_source(path, **kw), today=TODAY).frame


def test_csv_wide_and_long_give_the_same_rows(tmp_path: Path) -> None:
    wide = read(tmp_path / "w.csv", WIDE)
    long = read(tmp_path / "l.csv", LONG, layout="long")
    assert wide.equals(EXPECTED)
    assert long.equals(EXPECTED)
    assert wide.schema == {"series": pl.String, "date": pl.Date, "value": pl.Float64}


def test_csv_glob_combines_files_and_sorts(tmp_path: Path) -> None:
    (tmp_path / "part1.csv").write_text("date,A\n2024-01-03,101.5\n2024-01-02,100\n")
    (tmp_path / "part2.csv").write_text("date,A,B\n2024-01-04,102,51\n2024-01-02,100,50\n")
    got = read_source(csv_source(tmp_path / "part*.csv"), today=TODAY)
    assert got.origins == (str(tmp_path / "part1.csv"), str(tmp_path / "part2.csv"))
    assert got.frame.filter(pl.col("series") == "A")["value"].to_list() == [100.0, 101.5, 102.0]


def test_glob_matching_nothing(tmp_path: Path) -> None:
    with pytest.raises(SourceError, match=r"no file matches path .*nothing\*\.csv"):
        read_source(csv_source(tmp_path / "nothing*.csv"), today=TODAY)


def test_conflict_across_files_names_both(tmp_path: Path) -> None:
    (tmp_path / "a.csv").write_text("date,A\n2024-01-02,100\n")
    (tmp_path / "b.csv").write_text("date,A\n2024-01-02,99\n")
    with pytest.raises(DataError, match=r"series 'A' on 2024-01-02 has value 100.0 in .*a.csv and 99.0 in .*b.csv"):
        read_source(csv_source(tmp_path / "*.csv"), today=TODAY)


@pytest.mark.parametrize(
    ("content", "kw", "error", "pattern"),
    [
        ("", {}, SourceError, r"the file is empty"),
        ("date,A,B\n", {}, SourceError, r"has a header but no data rows"),
        (b"date,A\n2024-01-02,1\n2024-01-03,caf\xe9\n", {}, SourceError, r"line 3: not UTF-8 \(byte 0xe9"),
        ("date;A;B\n2024-01-02;1;2\n", {}, SourceError, r"looks ';'-delimited.*set `delimiter = \";\"`"),
        ("date,A\n2024-01-02,1\n2024-01-03,abc\n", {}, DataError, r"line 3: value 'abc' of series 'A' is not a number"),
        ("date,A\n2024-01-02,1\n2024-01-02,2\n", {}, DataError, r"series 'A' has 2 different values for 2024-01-02 \(lines 2, 3\)"),
        ("date,A\n2024-01-02,1\n01/03/2024,2\n", {}, DataError, r"line 3: date '01/03/2024' does not match date_format '%Y-%m-%d' that other rows use \(mixed"),
        ("date,A\n02.01.2024,1\n", {}, DataError, r"line 2: date '02.01.2024' does not match date_format.*set `date_format`"),
        ("date,A\n2024-01-02T00:00:00+01:00,1\n", {}, DataError, r"line 2: date '2024-01-02T00:00:00\+01:00' is a timestamp with a time zone"),
        ("date,A\n2024-01-02 15:30,1\n", {}, DataError, r"line 2: date '2024-01-02 15:30' has a time of day"),
        ("date,A\n2024-01-02,1\n2031-01-02,2\n", {}, DataError, r"line 3: date 2031-01-02 of series 'A' is after today \(2024-06-28\)"),
        ("date,A\n2024-01-02,1\n2024-01-03,inf\n", {}, DataError, r"line 3: value inf of series 'A' is infinite"),
        ("date,A\n2024-01-02,-inf\n", {}, DataError, r"line 2: value -inf of series 'A' is infinite"),
        ("date,A\n2024-01-02,1e308\n", {}, DataError, r"line 2: value 1e\+308 of series 'A' is at or above ±1e\+15"),
        ("date,A,B\n2024-01-02,1,\n2024-01-03,2,NA\n", {}, DataError, r"column 'B' has no values \(all missing\)"),
        ("day,A\n2024-01-02,1\n", {}, SourceError, r"no column 'date'; columns are 'day', 'A'"),
        ("date,series,value\n2024-01-02,,1\n", {"layout": "long"}, DataError, r"line 2: the series name in column 'series' is empty"),
        ("date,A\n,1\n", {}, DataError, r"line 2: the date in column 'date' is empty"),
    ],
)
def test_bad_files_give_one_line_errors(tmp_path: Path, content: str | bytes, kw: dict, error: type, pattern: str) -> None:
    path = tmp_path / "bad.csv"
    with pytest.raises(error, match=pattern) as info:
        read(path, content, **kw)
    text = str(info.value)
    assert "\n" not in text
    assert "bad.csv" in text


def test_cleaning_rules(tmp_path: Path) -> None:
    # Unsorted dates, blanks/markers as missing, exact duplicates kept once, spaces stripped.
    text = "date , A ,B\n2024-01-04, 102 ,51\n2024-01-02,100,50\n2024-01-03,101.5,NA\n2024-01-02,100,50\n2024-01-05,#N/A,\n"
    assert read(tmp_path / "c.csv", text).equals(EXPECTED)


def test_byte_order_mark_and_fast_path_agree(tmp_path: Path) -> None:
    # plain numbers take the typed fast path; a BOM or padded cells take the text path: same rows
    assert read(tmp_path / "plain.csv", WIDE).equals(EXPECTED)
    assert read(tmp_path / "bom.csv", b"\xef\xbb\xbf" + WIDE.encode()).equals(EXPECTED)
    assert read(tmp_path / "pad.csv", WIDE.replace(",101.5,", ", 101.5 ,")).equals(EXPECTED)


def test_custom_columns_and_format(tmp_path: Path) -> None:
    text = "when;name;px\n02/01/2024;A;100\n03/01/2024;A;101,5\n"
    path = tmp_path / "x.csv"
    with pytest.raises(DataError, match=r"line 3: value '101,5' of series 'A' is not a number"):
        read(path, text, layout="long", delimiter=";", date_column="when", series_column="name", value_column="px", date_format="%d/%m/%Y")
    got = read(path, text.replace("101,5", "101.5"), layout="long", delimiter=";", date_column="when", series_column="name", value_column="px", date_format="%d/%m/%Y")
    assert got["date"].to_list() == [date(2024, 1, 2), date(2024, 1, 3)]


def test_parquet_wide_and_long(tmp_path: Path) -> None:
    wide = pl.DataFrame({"date": [date(2024, 1, 2), date(2024, 1, 3), date(2024, 1, 4)], "A": [100.0, 101.5, 102.0], "B": [50.0, None, 51.0]})
    wide.write_parquet(tmp_path / "w.parquet")
    got = read_source(SourceConfig(name="p", kind="parquet", path=str(tmp_path / "w.parquet")), today=TODAY)
    assert got.frame.equals(EXPECTED)
    EXPECTED.write_parquet(tmp_path / "l.parquet")
    got = read_source(SourceConfig(name="p", kind="parquet", path=str(tmp_path / "l.parquet"), layout="long"), today=TODAY)
    assert got.frame.equals(EXPECTED)


def test_parquet_time_zone_timestamps_refused(tmp_path: Path) -> None:
    from datetime import datetime

    df = pl.DataFrame({"date": [datetime(2024, 1, 2)], "A": [1.0]}).with_columns(pl.col("date").dt.replace_time_zone("Europe/Paris"))
    df.write_parquet(tmp_path / "tz.parquet")
    with pytest.raises(DataError, match=r"holds timestamps with time zone 'Europe/Paris'"):
        read_source(SourceConfig(name="p", kind="parquet", path=str(tmp_path / "tz.parquet")), today=TODAY)


def test_duckdb_sql_source(tmp_path: Path) -> None:
    db = tmp_path / "other.duckdb"
    con = duckdb.connect(str(db))
    con.execute("CREATE TABLE px (d DATE, name VARCHAR, v DOUBLE)")
    con.execute("INSERT INTO px VALUES ('2024-01-02','A',100), ('2024-01-03','A',101.5), ('2024-01-04','A',102), ('2024-01-02','B',50), ('2024-01-04','B',51)")
    con.close()
    src = SourceConfig(name="q", kind="duckdb_sql", database=db, layout="long", query="SELECT d AS date, name AS series, v AS value FROM px")
    assert read_source(src, today=TODAY).frame.equals(EXPECTED)
    bad = dataclasses.replace(src, query="SELECT * FROM nope")
    with pytest.raises(SourceError, match=r"query of source 'q' on .*other.duckdb failed: .*nope.*fix `query`"):
        read_source(bad, today=TODAY)


def test_demo_source_reads_shipped_files() -> None:
    from pipeline.sources import DEMO_FILES
    from pipeline.sources._demo import DEMO_DIR

    if not (DEMO_DIR / DEMO_FILES["markets"][0]).exists():
        pytest.skip("data_samples/markets_wide.csv not generated yet (the demo-data helper writes it)")
    got = read_source(SourceConfig(name="d", kind="demo", dataset="markets"), today=date(2100, 1, 1))
    assert got.rows > 1000 and len(got.series) >= 2


# ---------------------------------------------------------------------------------------------
# HTTP against a local http.server on 127.0.0.1
# ---------------------------------------------------------------------------------------------


class _Handler(CsvHandler):
    hits: ClassVar[dict[str, int]] = {}

    def do_GET(self) -> None:
        try:
            self._answer()
        except (BrokenPipeError, ConnectionResetError):  # the client gave up (timeout test)
            pass

    def _answer(self) -> None:
        n = self.hits[self.path] = self.hits.get(self.path, 0) + 1
        body = WIDE.encode()
        if self.path == "/ok.csv":
            self._send(200, body)
        elif self.path == "/flaky.csv":  # 500 on the first attempt, then the file
            self._send(500, b"oops") if n == 1 else self._send(200, body)
        elif self.path == "/down.csv":
            self._send(503, b"down")
        elif self.path == "/missing.csv":
            self._send(404, b"no")
        elif self.path == "/truncated.csv":  # promises more bytes than it sends, then closes
            self._send(200, body[:20], length=len(body))
            self.close_connection = True
        elif self.path == "/hang.csv":
            time.sleep(1.5)
            self._send(200, body)


@pytest.fixture(scope="module")
def server() -> Iterator[str]:
    with serve_locally(_Handler) as url:
        yield url


def http_source(url: str, **kw: object) -> SourceConfig:
    base = {"timeout": 5.0, "retries": 2, "backoff": 0.01}
    base.update(kw)
    return SourceConfig(name="h", kind="http_csv", url=url, **base)  # type: ignore[arg-type]


def test_http_ok(server: str) -> None:
    assert read_source(http_source(server + "/ok.csv"), today=TODAY).frame.equals(EXPECTED)


def test_http_500_then_success_is_retried_with_backoff(server: str) -> None:
    waits: list[float] = []
    data = fetch_with_retries(server + "/flaky.csv", timeout=5, retries=3, backoff=0.25, sleep=waits.append)
    assert data == WIDE.encode()
    assert waits == [0.25]
    assert _Handler.hits["/flaky.csv"] == 2


def test_http_persistent_500_fails_after_all_attempts(server: str) -> None:
    waits: list[float] = []
    with pytest.raises(SourceError, match=r"/down.csv: failed after 4 attempts, last: HTTP 503"):
        fetch_with_retries(server + "/down.csv", timeout=5, retries=3, backoff=0.5, sleep=waits.append)
    assert waits == [0.5, 1.0, 2.0]  # exponential back-off


def test_http_404_is_not_retried(server: str) -> None:
    before = _Handler.hits.get("/missing.csv", 0)
    with pytest.raises(SourceError, match=r"HTTP 404 .*not retried"):
        fetch_with_retries(server + "/missing.csv", timeout=5, retries=3, backoff=0, sleep=lambda s: None)
    assert _Handler.hits["/missing.csv"] == before + 1


def test_http_truncated_body_is_retried_then_fails(server: str) -> None:
    with pytest.raises(SourceError, match=r"failed after 2 attempts, last: RemoteProtocolError"):
        fetch_with_retries(server + "/truncated.csv", timeout=5, retries=1, backoff=0, sleep=lambda s: None)


def test_http_hang_times_out(server: str) -> None:
    with pytest.raises(SourceError, match=r"failed after 1 attempts, last: no answer within the 0.3 s timeout"):
        fetch_with_retries(server + "/hang.csv", timeout=0.3, retries=0, backoff=0)
