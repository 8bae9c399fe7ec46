"""An HTTP source that answers 500, hangs, or sends a truncated body, during a real `shockflow run`.

The rates source of night 2 is served by a local ``http.server`` on 127.0.0.1 (a thread of this
test process) that records when each request arrives. The pipeline must retry with exponential
back-off (attempt k waits backoff·2^k before the next), then record the source as failed in
`ingest_batches` with a one-line message, while the other source and both universes proceed and
the exit code says "partial" (2). A server that fails twice and then answers is retried into
success. One case runs the CLI as a child process, so its whole stderr (Prefect's own log lines
included) is checked for tracebacks.
"""

from __future__ import annotations

import itertools
import time
from collections.abc import Iterator
from pathlib import Path
from typing import ClassVar

import polars as pl
import pytest

from tests.bad_inputs.night import (
    NIGHT1_ROWS,
    TRACEBACK,
    CliResult,
    Night,
    assert_kept,
    csv_text,
    new_rows,
    of_universe,
    rates,
    run_subprocess,
    start_night_two,
)
from tests.pipeline.helpers import CsvHandler, serve_locally

RETRIES = 2
BACKOFF = 0.2
TIMEOUT = 0.4
HANG = 3.0
GOOD = csv_text(rates(NIGHT1_ROWS + 1)).encode()


class _Handler(CsvHandler):
    arrivals: ClassVar[dict[str, list[float]]] = {}

    def do_GET(self) -> None:
        times = self.arrivals.setdefault(self.path, [])
        times.append(time.monotonic())
        try:
            if self.path.startswith("/err500"):
                self._send(500, b"internal error")
            elif self.path.startswith("/hang"):
                time.sleep(HANG)
                self._send(200, GOOD)
            elif self.path.startswith("/truncated"):  # promises the whole file, sends a third, closes
                self._send(200, GOOD[: len(GOOD) // 3], length=len(GOOD))
                self.close_connection = True
            elif self.path.startswith("/flaky"):  # two 500s, then the file
                self._send(500, b"busy") if len(times) <= 2 else self._send(200, GOOD)
            else:
                self._send(404, b"no such file")
        except (BrokenPipeError, ConnectionResetError):  # the client gave up (timeout)
            pass


@pytest.fixture(scope="module")
def server() -> Iterator[str]:
    with serve_locally(_Handler) as url:
        yield url


def _http_night(night: Night, url: str) -> None:
    old = 'name = "rates"\nkind = "csv"\npath = "rates.csv"\n'
    new = (
        f'name = "rates"\nkind = "http_csv"\nurl = "{url}"\n'
        f"retries = {RETRIES}\nbackoff = {BACKOFF}\ntimeout = {TIMEOUT}\n"
    )
    text = night.config_text()
    assert old in text
    night.write_config(text.replace(old, new, 1))
    start_night_two(night)


@pytest.fixture
def night(fault_night_one: Night, tmp_path: Path) -> Night:
    return fault_night_one.copy(tmp_path / "scenario")


def _check_backoff(path: str, *, extra: float = 0.0) -> None:
    """RETRIES + 1 attempts; the k-th pause is at least backoff·2^k (plus the time the attempt took)."""
    times = _Handler.arrivals[path]
    assert len(times) == RETRIES + 1, times
    for k, (a, b) in enumerate(itertools.pairwise(times)):
        assert b - a >= BACKOFF * 2**k + extra - 0.01, (k, b - a)


def _failed_source(night: Night, result: CliResult, before: dict[str, pl.DataFrame], url: str, last: str) -> None:
    after = night.tables()
    assert result.exit_code == 2, result.stderr
    assert not TRACEBACK.search(result.stderr), result.stderr
    batch = new_rows(before["ingest_batches"], after["ingest_batches"]).filter(pl.col("source") == "rates").row(0, named=True)
    message = f"{url}: failed after {RETRIES + 1} attempts, last: {last}; check the server or raise `retries`/`timeout`"
    assert batch["status"] == "failed"
    assert batch["message"] == message
    assert result.lines("failed:") == [f"failed: source 'rates': {batch['message']}"], result.stderr
    # the rest of the night proceeded: equities stored, stocks fitted its new window, published
    eq = new_rows(before["ingest_batches"], after["ingest_batches"]).filter(pl.col("source") == "equities")
    assert eq["status"].to_list() == ["succeeded"]
    runs = new_rows(before["runs"], after["runs"])
    assert sorted(runs["status"].to_list()) == ["succeeded", "succeeded"]
    assert of_universe(after["window_fits"], "stocks").height == of_universe(before["window_fits"], "stocks").height + 1
    assert of_universe(night.snapshot_tables()["window_fits"], "stocks").height == of_universe(after["window_fits"], "stocks").height
    assert_kept(before, after, untouched=["rates_pair"], grown=["stocks"])


def test_http_500_is_retried_then_recorded_failed(night: Night, server: str) -> None:
    url = f"{server}/err500/rates.csv"
    _http_night(night, url)
    before = night.tables()
    result = night.run("--no-export")
    _check_backoff("/err500/rates.csv")
    _failed_source(night, result, before, url, "HTTP 500 Internal Server Error")


def test_http_hang_times_out_each_attempt(night: Night, server: str) -> None:
    url = f"{server}/hang/rates.csv"
    _http_night(night, url)
    before = night.tables()
    result = night.run("--no-export")
    _check_backoff("/hang/rates.csv", extra=TIMEOUT)
    _failed_source(night, result, before, url, f"no answer within the {TIMEOUT:g} s timeout")


def test_http_truncated_body_is_retried_then_recorded_failed(night: Night, server: str) -> None:
    url = f"{server}/truncated/rates.csv"
    _http_night(night, url)
    before = night.tables()
    result = night.run("--no-export")
    _check_backoff("/truncated/rates.csv")
    after = night.tables()
    batch = new_rows(before["ingest_batches"], after["ingest_batches"]).filter(pl.col("source") == "rates").row(0, named=True)
    assert batch["message"].startswith(f"{url}: failed after {RETRIES + 1} attempts, last: RemoteProtocolError: "), batch["message"]
    assert batch["message"].endswith("; check the server or raise `retries`/`timeout`")
    _failed_source(night, result, before, url, batch["message"].split("last: ", 1)[1].rsplit("; check", 1)[0])


def test_http_two_failures_then_success(night: Night, server: str) -> None:
    url = f"{server}/flaky/rates.csv"
    _http_night(night, url)
    before = night.tables()
    result = night.run("--no-export")
    assert result.exit_code == 0, result.stderr
    _check_backoff("/flaky/rates.csv")
    after = night.tables()
    batch = new_rows(before["ingest_batches"], after["ingest_batches"]).filter(pl.col("source") == "rates").row(0, named=True)
    assert (batch["status"], batch["rows_new"]) == ("succeeded", 2)
    assert_kept(before, after, grown=["stocks", "rates_pair"])


def test_http_failure_in_a_child_process_prints_no_traceback(night: Night, server: str, prefect_api: str) -> None:
    """The real process: Prefect's log lines and ours, no traceback, exit code 2."""
    url = f"{server}/err500/child.csv"
    _http_night(night, url)
    before = night.tables()
    result = run_subprocess(night, prefect_api, "--no-export")
    _check_backoff("/err500/child.csv")
    _failed_source(night, result, before, url, "HTTP 500 Internal Server Error")
