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
    fields: dict[str, object] = {"name": "s", "kind": "csv", "path": str(path), **kw}
    return SourceConfig(**fields)  # type: ignore[arg-type]  # field overrides of mixed types


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
    assert wide.schema == long.schema
    assert [wide.schema[c] for c in ("series", "date", "value")] == [pl.Categorical, pl.Date, pl.Float64]


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
    base: dict[str, object] = {
        "name": "h", "kind": "http_csv", "url": url, "timeout": 5.0, "retries": 2, "backoff": 0.01,
    }
    base.update(kw)
    return SourceConfig(**base)  # type: ignore[arg-type]  # field overrides of mixed types


def test_http_ok(server: str) -> None:
    assert read_source(http_source(server + "/ok.csv"), today=TODAY).frame.equals(EXPECTED)


def test_http_500_then_success_is_retried_with_backoff(server: str) -> None:
    waits: list[float] = []
    data = fetch_with_retries(server + "/flaky.csv", timeout=5, retries=3, backoff=0.25, sleep=waits.append, jitter=lambda: 0.0)
    assert data == WIDE.encode()
    assert waits == [0.25]  # jitter factor 1 + 0/2 = 1
    assert _Handler.hits["/flaky.csv"] == 2


def test_http_persistent_500_fails_after_all_attempts(server: str) -> None:
    waits: list[float] = []
    with pytest.raises(SourceError, match=r"/down.csv: failed after 4 attempts, last: HTTP 503"):
        fetch_with_retries(server + "/down.csv", timeout=5, retries=3, backoff=0.5, sleep=waits.append, jitter=lambda: 0.0)
    assert waits == [0.5, 1.0, 2.0]  # exponential back-off (jitter factor 1 + 0/2 = 1)


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


# --------------------------------------------------------------------------------------------
# Rows with the wrong number of fields (a file cut mid-write, a damaged row) and CSV quoting
# --------------------------------------------------------------------------------------------

_TRUNCATED_WIDE = (
    "date,A,B,C\n"
    "2021-06-10,76.10000001,118.5,3.25\n"
    "2021-06-11,77.00000002,119.0,3.5\n"
    "2021-06-14,77.72549029,1"  # the last line, cut mid-write: no B value ends in '1', no C at all
)


@pytest.mark.parametrize(
    ("text", "kw", "pattern"),
    [
        (_TRUNCATED_WIDE, {}, r"t\.csv, line 4: 3 fields where the header has 4 \('2021-06-14,77\.72549029,1'\)"),
        (
            "date,A,B,C,D,E\n2024-01-02,1,2,3,4,5\n2024-01-03,1,2\n2024-01-04,1,2,3,4,5\n", {},
            r"t\.csv, line 3: 3 fields where the header has 6",
        ),
        ("date,A,B\n2024-01-02,1,2\n2024-01-03,1,2,3\n", {}, r"t\.csv, line 3: 4 fields where the header has 3"),
        ("date,A,B\n2024-01-02,1,2\n\n2024-01-03,1,2\n", {}, r"t\.csv, line 3: 1 field where the header has 3 \(an empty line\)"),
        (
            "date,series,value\n2024-01-02,A,1\n2024-01-03,A\n", {"layout": "long"},
            r"t\.csv, line 3: 2 fields where the header has 3",
        ),
        # a quoted field may hold the delimiter and a line break: line 4 is the short row
        ('date,A,"B,C"\n2024-01-02,1,"2"\n2024-01-03,"x\ny",2\n2024-01-04,1\n', {}, r"t\.csv, line 5: 2 fields where the header has 3"),
    ],
)
def test_row_with_wrong_number_of_fields_is_an_error(tmp_path: Path, text: str, kw: dict, pattern: str) -> None:
    with pytest.raises(DataError, match=pattern) as info:
        read(tmp_path / "t.csv", text, **kw)
    assert "\n" not in str(info.value)
    assert "fix the row or remove it" in str(info.value)


def test_quoted_headers_and_cells_follow_csv_quoting(tmp_path: Path) -> None:
    text = 'date,"e""f","g,h"\n2024-01-02,"1.5",2\n"2024-01-03",3,"4"\n'
    got = read(tmp_path / "q.csv", text)
    assert got.equals(
        pl.DataFrame(
            {
                "series": ['e"f', 'e"f', "g,h", "g,h"],
                "date": [date(2024, 1, 2), date(2024, 1, 3)] * 2,
                "value": [1.5, 3.0, 2.0, 4.0],
            }
        )
    )


# --------------------------------------------------------------------------------------------
# duckdb_sql: the query only reads (one SELECT on a read-only, locked-down connection)
# --------------------------------------------------------------------------------------------


def _source_db(tmp_path: Path) -> Path:
    db = tmp_path / "other.duckdb"
    con = duckdb.connect(str(db))
    con.execute("CREATE TABLE px (d DATE, name VARCHAR, v DOUBLE)")
    con.execute("INSERT INTO px VALUES ('2024-01-02','A',100), ('2024-01-03','A',101.5), ('2024-01-04','A',102), ('2024-01-02','B',50), ('2024-01-04','B',51)")
    con.close()
    return db


def _db_state(db: Path) -> tuple[bytes, list[tuple]]:
    con = duckdb.connect(str(db), read_only=True)
    try:
        tables = con.execute("SELECT database_name, table_name FROM duckdb_tables() ORDER BY ALL").fetchall()
        rows = con.execute("SELECT * FROM px ORDER BY ALL").fetchall()
    finally:
        con.close()
    return db.read_bytes(), [*tables, *rows]


_SELECT = "SELECT d AS date, name AS series, v AS value FROM px"


@pytest.mark.parametrize(
    "attack",
    [
        "ATTACH '{dir}/new.duckdb' AS w",
        "DETACH src",
        "DROP TABLE px",
        "COPY px TO '{dir}/stolen.csv'",
        "SET enable_external_access = true",
        "INSERT INTO px VALUES ('2024-01-05', 'A', 1)",
        _SELECT + "; DROP TABLE px",
        _SELECT + "; COPY px TO '{dir}/stolen.csv'",
        "ATTACH '{dir}/new.duckdb' AS w; " + _SELECT,
    ],
)
def test_duckdb_sql_query_that_writes_is_refused(tmp_path: Path, attack: str) -> None:
    db = _source_db(tmp_path)
    before = _db_state(db)
    query = attack.format(dir=tmp_path)
    src = SourceConfig(name="q", kind="duckdb_sql", database=db, layout="long", query=query)
    with pytest.raises(SourceError, match=r"query of source 'q' on .*other\.duckdb refused: .* must be one SELECT statement") as info:
        read_source(src, today=TODAY)
    assert "\n" not in str(info.value)
    assert _db_state(db) == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["other.duckdb"]


@pytest.mark.parametrize(
    "query",
    [
        "SELECT * FROM read_csv('{dir}/other.csv')",  # another file: needs external_access
        "SELECT * FROM (SELECT 1) WHERE 1 = (SELECT count(*) FROM read_text('/etc/hostname'))",
    ],
)
def test_duckdb_sql_select_cannot_reach_other_files(tmp_path: Path, query: str) -> None:
    db = _source_db(tmp_path)
    (tmp_path / "other.csv").write_text("date,series,value\n2024-01-02,A,1\n")
    src = SourceConfig(name="q", kind="duckdb_sql", database=db, layout="long", query=query.format(dir=tmp_path))
    with pytest.raises(SourceError, match=r"failed: Permission Error: .*unless the source sets `external_access = true`"):
        read_source(src, today=TODAY)
    # the explicit opt-in lets the query read the file (the database stays read-only)
    allowed = dataclasses.replace(src, query=f"SELECT * FROM read_csv('{tmp_path}/other.csv')", external_access=True)
    assert read_source(allowed, today=TODAY).frame["value"].to_list() == [1.0]
    writes = dataclasses.replace(allowed, query="DROP TABLE px")
    with pytest.raises(SourceError, match="must be one SELECT statement"):
        read_source(writes, today=TODAY)


@pytest.mark.parametrize("query", [";", "  ", "-- nothing\n;"])
def test_duckdb_sql_empty_query_is_a_one_line_error(tmp_path: Path, query: str) -> None:
    src = SourceConfig(name="q", kind="duckdb_sql", database=_source_db(tmp_path), layout="long", query=query)
    with pytest.raises(SourceError, match=r"^source 'q': `query` is empty .*; write one SELECT statement$") as info:
        read_source(src, today=TODAY)
    assert "\n" not in str(info.value)


def test_check_refuses_a_writing_query_and_the_config_key_opts_in(tmp_path: Path) -> None:
    from pipeline.config import load_config
    from tests.bad_inputs.night import invoke

    db = _source_db(tmp_path)
    before = _db_state(db)
    config = tmp_path / "c.toml"
    body = (
        '[warehouse]\npath = "wh.duckdb"\nsnapshot = "serving.duckdb"\n\n'
        '[[sources]]\nname = "q"\nkind = "duckdb_sql"\ndatabase = "other.duckdb"\n{extra}'
        "query = \"COPY px TO '{dir}/stolen.csv'\"\n\n"
        '[[universes]]\nname = "u"\nseries = ["A", "B"]\nwindow = 30\nlags = 1\nhorizon = 2\n'
        "\n[export]\nformats = []\n"
    )
    config.write_text(body.format(extra="", dir=tmp_path), encoding="utf-8")
    result = invoke("check", "--config", str(config))
    assert result.exit_code != 0
    assert any("must be one SELECT statement" in ln for ln in result.lines("error:")), result.stderr
    assert not (tmp_path / "stolen.csv").exists()
    assert _db_state(db) == before
    config.write_text(body.format(extra="external_access = true\n", dir=tmp_path), encoding="utf-8")
    assert load_config(config).sources[0].external_access is True


# --------------------------------------------------------------------------------------------
# Chunked reading: any chunk size gives the rows and the errors of the whole file at once
# --------------------------------------------------------------------------------------------


def _parse(text: str | bytes, chunk_bytes: int, **kw: object) -> pl.DataFrame:
    import io

    from pipeline.sources._csv import parse_csv_stream

    data = text.encode() if isinstance(text, str) else text
    return parse_csv_stream(io.BytesIO(data), origin="f.csv", source=csv_source("f.csv", **kw), today=TODAY, chunk_bytes=chunk_bytes)


_WIDE_ROWS = [f"2024-01-{d:02d},{100 + d}.5,{(d, 'NA', '')[d % 3] if d > 12 else ''},{50 + d}" for d in range(2, 29)]
_CHUNK_FILES = {
    "ascending": "date,A,B,C\n" + "\n".join(_WIDE_ROWS) + "\n",
    "descending": "date,A,B,C\r\n" + "\r\n".join(_WIDE_ROWS[::-1]),
    "shuffled": "date,A,B,C\n" + "\n".join(_WIDE_ROWS[::2] + _WIDE_ROWS[1::2]) + "\n",
    # B is empty in the first rows (a series that starts late), an exact duplicate row far apart
    "late-series-and-duplicate": "date,A,B,C\n" + "\n".join([*_WIDE_ROWS, _WIDE_ROWS[0]]) + "\n",
    "quoted-line-breaks": 'date,"A\nx","B,b","C ""c"""\n' + "\n".join('"' + r.replace(",", '","') + '"' for r in _WIDE_ROWS) + "\n",
    "bom": "\ufeffdate,A,B,C\n" + "\n".join(_WIDE_ROWS) + "\n",
}


@pytest.mark.parametrize("name", list(_CHUNK_FILES))
@pytest.mark.parametrize("chunk_bytes", [1, 7, 64, 300])
def test_chunked_read_equals_whole_read(name: str, chunk_bytes: int) -> None:
    text = _CHUNK_FILES[name]
    whole = _parse(text, 1 << 30)
    got = _parse(text, chunk_bytes)
    assert got.equals(whole)
    assert got.schema == whole.schema
    assert got.height == whole.height > 0
    long = got.sort("series", "date")
    assert got.equals(long)  # sorted by series and date


def test_chunked_long_layout_equals_whole_read() -> None:
    rows = [f"2024-01-{d:02d},{s},{d}.25" for d in range(2, 29) for s in ("Y", "X")]
    text = "date,series,value\n" + "\n".join(rows[::-1] + rows[:3]) + "\n"
    assert _parse(text, 50, layout="long").equals(_parse(text, 1 << 30, layout="long"))


@pytest.mark.parametrize(
    ("text", "pattern"),
    [
        # the same date in two chunks with different values: both lines named
        ("date,A\n" + "\n".join(f"2024-01-{d:02d},{d}" for d in range(2, 20)) + "\n2024-01-03,99\n",
         r"f\.csv: series 'A' has 2 different values for 2024-01-03 \(lines 3, 20\): 3\.0, 99\.0"),
        # a column empty in every chunk
        ("date,A,B\n" + "\n".join(f"2024-01-{d:02d},{d}," for d in range(2, 20)) + "\n",
         r"f\.csv: column 'B' has no values \(all missing\)"),
        # a date format change in a later chunk is still called mixed
        ("date,A\n" + "\n".join(f"2024-01-{d:02d},{d}" for d in range(2, 20)) + "\n01/20/2024,1\n",
         r"f\.csv, line 20: date '01/20/2024' does not match date_format '%Y-%m-%d' that other rows use \(mixed"),
        ("date,A\n" + "\n".join(f"2024-01-{d:02d},{d}" for d in range(2, 20)) + "\n2024-01-21,x\n",
         r"f\.csv, line 20: value 'x' of series 'A' is not a number"),
        ("date,A\n" + "\n".join(f"2024-01-{d:02d},{d}" for d in range(2, 20)) + "\n2024-01-21\n",
         r"f\.csv, line 20: 1 field where the header has 2 \('2024-01-21'\)"),
        (b"date,A\n" + b"\n".join(b"2024-01-%02d,%d" % (d, d) for d in range(2, 20)) + b"\n2024-01-21,caf\xe9\n",
         r"f\.csv, line 20: not UTF-8 \(byte 0xe9 at offset 265\)"),
    ],
)
@pytest.mark.parametrize("chunk_bytes", [16, 1 << 30])
def test_chunked_errors_name_the_same_line(text: str | bytes, pattern: str, chunk_bytes: int) -> None:
    with pytest.raises((DataError, SourceError), match=pattern):
        _parse(text, chunk_bytes)


def test_ingest_peak_memory_is_bounded(tmp_path: Path) -> None:
    """Ingest of a ~60 MB wide CSV, in a child process: resident memory added by the ingest (peak
    minus the peak after imports) stays within 3x the file size plus a fixed 150 MB (DuckDB's merge
    limit of 128 MB and the chunk buffers). Measured before chunking: 6.7x the file size (net)."""
    import json
    import subprocess
    import sys

    from bench.ingest_memory import _CHILD, write_wide_csv

    file = write_wide_csv(tmp_path / "wide.csv", 60)
    mb = file.stat().st_size / 2**20
    done = subprocess.run(
        [sys.executable, "-c", _CHILD, "ingest", str(file), str(tmp_path)],
        capture_output=True, text=True, check=False, timeout=600,
    )  # fmt: skip
    assert done.returncode == 0, done.stderr
    m = json.loads(done.stdout.strip().splitlines()[-1])
    net = m["peak"] - m["imports"]
    assert m["rows"] > 4_000_000
    assert net <= 3 * mb + 150, f"net peak {net:.0f} MB for a {mb:.0f} MB file"


@pytest.mark.parametrize("kind", ["parquet", "duckdb_sql"])
def test_parquet_and_query_read_in_slices_like_whole(tmp_path: Path, monkeypatch: pytest.MonkeyPatch, kind: str) -> None:
    import pipeline.sources._duckdb_sql as sql_mod
    import pipeline.sources._parquet as pq_mod

    days = pl.date_range(date(2024, 1, 1), date(2024, 2, 19), eager=True)
    df = pl.DataFrame({"date": days, "A": [float(i) for i in range(len(days))], "B": [None] * 20 + [2.5] * (len(days) - 20)})
    if kind == "parquet":
        df.write_parquet(tmp_path / "w.parquet")
        src = SourceConfig(name="s", kind="parquet", path=str(tmp_path / "w.parquet"))
    else:
        db = tmp_path / "w.duckdb"
        con = duckdb.connect(str(db))
        con.register("df", df.to_arrow())
        con.execute("CREATE TABLE w AS SELECT * FROM df")
        con.close()
        src = SourceConfig(name="s", kind="duckdb_sql", database=db, layout="wide", query="SELECT * FROM w ORDER BY date")
    whole = read_source(src, today=TODAY).frame
    monkeypatch.setattr(pq_mod if kind == "parquet" else sql_mod, "CHUNK_CELLS", 6)  # 2 rows per slice
    sliced = read_source(src, today=TODAY).frame
    assert sliced.equals(whole)
    assert whole.height == len(days) + len(days) - 20
    # an error in a later slice names its row number in the whole table
    bad = df.with_columns(pl.when(pl.int_range(pl.len()) == 36).then(float("inf")).otherwise(pl.col("A")).alias("A"))
    if kind == "parquet":
        bad.write_parquet(tmp_path / "w.parquet")
    else:
        con = duckdb.connect(str(db))
        con.register("bad", bad.to_arrow())
        con.execute("CREATE OR REPLACE TABLE w AS SELECT * FROM bad")
        con.close()
    with pytest.raises(DataError, match=r"\(row numbers from 1\), line 37: value inf of series 'A' is infinite"):
        read_source(src, today=TODAY)
