"""A two-night scenario for the bad-input corpus and the fault tests.

Night 1 ingests two good CSV sources (``equities``: EQ_A, EQ_B, EQ_C; ``rates``: RT_X, RT_Y) and
fits two universes (``stocks``, ``rates_pair``). Night 2 appends one business day to the equities
file and then does whatever the case under test does (a broken rates file, a bad config, a new
source, a kill -9 ...). The data are invented for these tests: log prices driven by a stable VAR(1)
of returns, drawn with a fixed seed (nothing here is market data).

Helpers read every warehouse table into polars frames (through an in-memory DuckDB that ATTACHes
the file read-only, so no cached database of the same path is ever handed back) and compare the
states before and after a night.
"""

from __future__ import annotations

import os
import re
import shutil
import subprocess
import sys
import textwrap
from collections import Counter
from collections.abc import Iterable
from dataclasses import dataclass
from datetime import date, timedelta
from pathlib import Path
from typing import Any

import duckdb
import numpy as np
import polars as pl

REPO = Path(__file__).resolve().parents[2]

#: Rows (business days) of each source on night 1; night 2 has one more equities row.
NIGHT1_ROWS = 100
WINDOW = 40
START = date(2015, 1, 5)  # a Monday

EQUITIES = ("EQ_A", "EQ_B", "EQ_C")
RATES = ("RT_X", "RT_Y")

CONFIG = """\
# Test scenario (invented data): two sources, two universes.
[warehouse]
path = "wh.duckdb"
snapshot = "serving.duckdb"

[export]
directory = "exports"
formats = ["csv"]

[[sources]]
name = "equities"
kind = "csv"
path = "equities.csv"

[[sources]]
name = "rates"
kind = "csv"
path = "rates.csv"

[[universes]]
name = "stocks"
series = ["EQ_A", "EQ_B", "EQ_C"]
window = 40
lags = 1
horizon = 4

[[universes]]
name = "rates_pair"
series = ["RT_X", "RT_Y"]
window = 40
lags = 1
horizon = 4
"""

#: Tables whose rows are never rewritten once a later night has run (only appended to).
APPEND_ONLY = ("observations", "revisions", "ingest_batches", "runs", "schema_version")

#: Tables whose rows belong to one universe (column `universe`).
UNIVERSE_TABLES = (
    "universes", "universe_series", "prepared", "dropped_dates", "window_fits", "connectedness",
    "directional", "pairwise", "granger", "window_params", "responses", "decompositions",
)  # fmt: skip


def business_days(n: int, start: date = START) -> list[date]:
    """The first `n` Monday–Friday dates from `start`."""
    out: list[date] = []
    d = start
    while len(out) < n:
        if d.weekday() < 5:
            out.append(d)
        d += timedelta(days=1)
    return out


def simulate(names: tuple[str, ...], rows: int, *, seed: int, start: date = START) -> pl.DataFrame:
    """Wide price table (date + one column per name): 100·exp(cumsum(r/100)), r a stable VAR(1).

    A(i, i) = 0.3, A(i, j) = 0.1 (spectral radius 0.3 + 0.1(n − 1) < 1); shocks with correlation
    0.5. Rounded to 6 decimals, as a CSV export would be.
    """
    n = len(names)
    rng = np.random.default_rng(seed)
    a = 0.3 * np.eye(n) + 0.1 * (np.ones((n, n)) - np.eye(n))
    chol = np.linalg.cholesky(0.5 * np.eye(n) + 0.5 * np.ones((n, n)))
    r = np.zeros((rows, n))
    for t in range(1, rows):
        r[t] = a @ r[t - 1] + chol @ rng.standard_normal(n)
    levels = np.round(100.0 * np.exp(np.cumsum(r / 100.0, axis=0)), 6)
    return pl.DataFrame({"date": business_days(rows, start), **{s: levels[:, j] for j, s in enumerate(names)}})


def equities(rows: int) -> pl.DataFrame:
    """The equities source's table with `rows` rows (a prefix of one fixed draw)."""
    return simulate(EQUITIES, 400, seed=11).head(rows)


def rates(rows: int) -> pl.DataFrame:
    """The rates source's table with `rows` rows (a prefix of one fixed draw)."""
    return simulate(RATES, 400, seed=23).head(rows)


def csv_text(df: pl.DataFrame) -> str:
    """The CSV the tests write: header line 1, data from line 2."""
    return df.write_csv()


# --------------------------------------------------------------------------------------------
# Reading a warehouse
# --------------------------------------------------------------------------------------------


def read_tables(path: Path, tables: Iterable[str] | None = None) -> dict[str, pl.DataFrame]:
    """Every table of the DuckDB file at `path`, rows sorted (ORDER BY ALL)."""
    con = duckdb.connect()
    try:
        con.execute(f"ATTACH '{str(path).replace(chr(39), chr(39) * 2)}' AS w (READ_ONLY)")
        names = [r[0] for r in con.execute(
            "SELECT table_name FROM information_schema.tables WHERE table_catalog = 'w' "
            "AND table_type = 'BASE TABLE' ORDER BY 1"
        ).fetchall()]  # fmt: skip
        wanted = names if tables is None else [t for t in tables if t in names]
        out = {}
        for t in wanted:
            df = pl.from_arrow(con.sql(f"SELECT * FROM w.main.{t} ORDER BY ALL").to_arrow_table())
            assert isinstance(df, pl.DataFrame)
            out[t] = df
        return out
    finally:
        con.close()


def _cell(v: Any) -> Any:
    if isinstance(v, float) and v != v:
        return "NaN"
    if isinstance(v, list):
        return tuple(_cell(x) for x in v)
    return v


def row_counter(df: pl.DataFrame, drop: Iterable[str] = ()) -> Counter[tuple[Any, ...]]:
    """Rows of `df` (minus columns `drop`) as a multiset of tuples; NaN compares equal to NaN."""
    keep = [c for c in df.columns if c not in set(drop)]
    return Counter(tuple(_cell(v) for v in row) for row in df.select(keep).iter_rows())


def missing_rows(before: pl.DataFrame, after: pl.DataFrame, drop: Iterable[str] = ()) -> list[tuple[Any, ...]]:
    """Rows of `before` that `after` no longer holds (as a multiset), at most 5 shown."""
    gone = row_counter(before, drop) - row_counter(after, drop)
    return list(gone.elements())[:5]


def of_universe(df: pl.DataFrame, universe: str) -> pl.DataFrame:
    return df.filter(pl.col("universe") == universe)


def assert_kept(
    before: dict[str, pl.DataFrame],
    after: dict[str, pl.DataFrame],
    *,
    untouched: Iterable[str] = (),
    grown: Iterable[str] = (),
) -> None:
    """Nothing stored before is lost or changed.

    - append-only tables (observations, revisions, batches, runs): every earlier row is still there,
      unchanged (a later night may only add rows); no run or batch is left `running`;
    - universes in `untouched`: every row of every per-universe table is exactly as before;
    - universes in `grown`: every earlier result row is still there, unchanged (new windows may be
      added; the per-universe bookkeeping row `universes` may carry the new run_id).
    """
    for t in APPEND_ONLY:
        gone = missing_rows(before[t], after[t])
        assert not gone, f"{t}: earlier rows lost or changed, e.g. {gone}"
    for t in ("runs", "ingest_batches"):
        left = after[t].filter(pl.col("status") == "running")
        assert left.height == 0, f"{t}: rows left running: {left.rows()}"
    for u in untouched:
        for t in UNIVERSE_TABLES:
            b, a = of_universe(before[t], u), of_universe(after[t], u)
            assert row_counter(b) == row_counter(a), f"{t}: rows of universe {u!r} changed"
    for u in grown:
        for t in UNIVERSE_TABLES:
            drop = ("run_id",) if t == "universes" else ()
            gone = missing_rows(of_universe(before[t], u), of_universe(after[t], u), drop)
            assert not gone, f"{t}: earlier rows of universe {u!r} lost or changed, e.g. {gone}"


def new_rows(before: pl.DataFrame, after: pl.DataFrame) -> pl.DataFrame:
    """Rows of `after` not in `before` (append-only tables: the night's own rows)."""
    keys = row_counter(before)
    mask = []
    for row in after.iter_rows():
        key = tuple(_cell(v) for v in row)
        if keys[key] > 0:
            keys[key] -= 1
            mask.append(False)
        else:
            mask.append(True)
    return after.filter(pl.Series(mask, dtype=pl.Boolean))


# --------------------------------------------------------------------------------------------
# The scenario folder and the CLI
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class CliResult:
    """What one `shockflow` invocation did."""

    exit_code: int
    stdout: str
    stderr: str

    def lines(self, prefix: str) -> list[str]:
        """stderr lines that start with `prefix` (e.g. 'failed:' or 'error:')."""
        return [ln for ln in self.stderr.splitlines() if ln.startswith(prefix)]


@dataclass(frozen=True)
class Night:
    """A scenario folder: config, source files, warehouse, snapshot, exports."""

    folder: Path

    @property
    def config(self) -> Path:
        return self.folder / "shockflow.toml"

    @property
    def warehouse(self) -> Path:
        return self.folder / "wh.duckdb"

    @property
    def snapshot(self) -> Path:
        return self.folder / "serving.duckdb"

    def file(self, name: str) -> Path:
        return self.folder / name

    def write(self, name: str, content: str | bytes) -> Path:
        path = self.folder / name
        if isinstance(content, bytes):
            path.write_bytes(content)
        else:
            path.write_text(content, encoding="utf-8")
        return path

    def write_config(self, text: str) -> None:
        self.config.write_text(textwrap.dedent(text), encoding="utf-8")

    def config_text(self) -> str:
        return self.config.read_text(encoding="utf-8")

    def add_to_config(self, text: str) -> None:
        self.write_config(self.config_text() + "\n" + textwrap.dedent(text))

    def tables(self) -> dict[str, pl.DataFrame]:
        return read_tables(self.warehouse)

    def snapshot_tables(self) -> dict[str, pl.DataFrame]:
        return read_tables(self.snapshot)

    def run(self, *args: str) -> CliResult:
        """`shockflow run --config <this night's config> *args`, in this process."""
        return invoke("run", "--config", str(self.config), *args)

    def check(self, *args: str) -> CliResult:
        return invoke("check", "--config", str(self.config), *args)

    def copy(self, folder: Path) -> Night:
        shutil.copytree(self.folder, folder)
        return Night(folder)


def _runner() -> Any:
    """click's CliRunner whose isolation also points the console log handlers at its stderr.

    Prefect installs its console handler once per process, on whatever stderr existed then; an
    in-process run would otherwise lose (or fail to write) the log lines a real run prints.
    """
    import contextlib
    import logging

    from typer.testing import CliRunner

    class Runner(CliRunner):
        @contextlib.contextmanager
        def isolation(self, *args: Any, **kwargs: Any) -> Any:
            with super().isolation(*args, **kwargs) as streams:
                saved = []
                for h in logging.getLogger().handlers:
                    if isinstance(h, logging.StreamHandler) and not isinstance(h, logging.FileHandler):
                        console = getattr(h, "console", None)
                        saved.append((h, h.stream, console, getattr(console, "file", None)))
                        h.stream = sys.stderr
                        if console is not None:
                            console.file = sys.stderr
                try:
                    yield streams
                finally:
                    for h, stream, console, file in saved:
                        h.stream = stream
                        if console is not None:
                            console.file = file

    return Runner()


def invoke(*args: str) -> CliResult:
    """Run the `shockflow` CLI in this process (click's runner: real argv parsing, exit codes)."""
    from shockflow.cli import app

    result = _runner().invoke(app, list(args), catch_exceptions=False)
    return CliResult(result.exit_code, result.stdout, result.stderr)


def night_one(folder: Path) -> Night:
    """Write night 1's files and config into `folder` and run it; the folder holds the result."""
    folder.mkdir(parents=True, exist_ok=True)
    night = Night(folder)
    night.write("equities.csv", csv_text(equities(NIGHT1_ROWS)))
    night.write("rates.csv", csv_text(rates(NIGHT1_ROWS)))
    night.write_config(CONFIG)
    result = night.run("--no-export")
    assert result.exit_code == 0, result.stderr
    return night


def start_night_two(night: Night) -> None:
    """Night 2's ordinary news: one more business day in the equities file."""
    night.write("equities.csv", csv_text(equities(NIGHT1_ROWS + 1)))


def subprocess_env(api_url: str, **extra: str) -> dict[str, str]:
    """Environment for a `shockflow` subprocess that uses the test session's Prefect server."""
    env = {k: v for k, v in os.environ.items() if not k.startswith(("PREFECT_", "PYTEST_"))}
    env.update(
        {
            "PREFECT_API_URL": api_url,
            "DO_NOT_TRACK": "1",
            "PREFECT_SERVER_ANALYTICS_ENABLED": "false",
            "PREFECT_LOGGING_LEVEL": "WARNING",
            "PYTHONUNBUFFERED": "1",
            "COLUMNS": "200",
        }
    )
    env.update(extra)
    return env


def shockflow_command(*args: str) -> list[str]:
    """The console script `shockflow`, run by this interpreter (no reliance on PATH)."""
    return [sys.executable, "-c", "from shockflow.cli import main; main()", *args]


def run_subprocess(night: Night, api_url: str, *args: str, timeout: float = 300) -> CliResult:
    """`shockflow run --config … *args` in a child process; its whole stderr is kept."""
    proc = subprocess.run(
        shockflow_command("run", "--config", str(night.config), *args),
        cwd=REPO, env=subprocess_env(api_url), capture_output=True, text=True, timeout=timeout, check=False,
    )  # fmt: skip
    return CliResult(proc.returncode, proc.stdout, proc.stderr)


TRACEBACK = re.compile(r"Traceback \(most recent call last\)|^\s+File \".*\", line \d+", re.MULTILINE)
