"""kill -9 of a running `shockflow run`: the warehouse stays consistent and the next run finishes the job.

Each test starts night 2 (five new days in both sources, one revised rates value) in a child
process and kills it with SIGKILL, either at a known point (the launcher tests.faults._child kills
the process from inside: mid-ingest, mid-fit, mid-write, mid-publish) or at a random moment after
the child first opens the warehouse (fixed seeds; the child is then the plain CLI and the test
sends the signal). Then:

1. right after the kill, every universe's stored results and every source's observations are
   either exactly night 1's or exactly the uninterrupted night 2's — never a mix; night 1's runs and
   batches are intact; the served snapshot opens and holds night 1's or night 2's results;
2. the next `shockflow run` exits 0 and ends with every table equal to the uninterrupted run's
   (run ids, batch ids and timestamps aside); the killed run and batch are marked `failed`
   ("interrupted") or absent, none is left `running`; no temporary snapshot file is left behind.

The child uses the test session's Prefect server (PREFECT_API_URL), so no temporary Prefect server
is started per child.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import polars as pl
import pytest

from tests.bad_inputs.night import (
    APPEND_ONLY,
    REPO,
    UNIVERSE_TABLES,
    Night,
    missing_rows,
    new_rows,
    of_universe,
    read_tables,
    row_counter,
    shockflow_command,
    subprocess_env,
)
from tests.faults.conftest import Reference

UNIVERSES = ("stocks", "rates_pair")
SOURCES = {"equities": ("EQ_A", "EQ_B", "EQ_C"), "rates": ("RT_X", "RT_Y")}
IDS = ("run_id", "batch_id")


def _rows(df: pl.DataFrame) -> object:
    return row_counter(df, drop=[c for c in IDS if c in df.columns])


def _universe_state(tables: dict[str, pl.DataFrame], universe: str) -> dict[str, object]:
    return {t: _rows(of_universe(tables[t], universe)) for t in UNIVERSE_TABLES}


def _source_rows(tables: dict[str, pl.DataFrame], source: str) -> object:
    obs = tables["observations"]
    return _rows(obs.filter(pl.col("series").is_in(list(SOURCES[source]))).drop("source"))


def _which(state: object, night1: object, night2: object, what: str) -> str:
    if state == night2:
        return "night 2"
    assert state == night1, f"{what} is neither night 1's nor the finished night 2's: a half-written state"
    return "night 1"


def assert_consistent(tables: dict[str, pl.DataFrame], snapshot: dict[str, pl.DataFrame], night1: Night, ref: Reference) -> dict[str, str]:
    """Check 1 of the module docstring; returns what each universe/source holds."""
    n1 = night1.tables()
    held = {}
    for u in UNIVERSES:
        held[u] = _which(_universe_state(tables, u), _universe_state(n1, u), _universe_state(ref.tables, u), f"universe {u!r}")
    for s in SOURCES:
        held[s] = _which(_source_rows(tables, s), _source_rows(n1, s), _source_rows(ref.tables, s), f"observations of {s!r}")
    for t in APPEND_ONLY:
        if t == "observations":
            continue  # night 2 revises a value in place: checked per source above
        gone = missing_rows(n1[t], tables[t])
        assert not gone, f"{t}: night 1's rows lost or changed after the kill, e.g. {gone}"
    n1_snap = night1.snapshot_tables()
    for u in UNIVERSES:
        for t in ("window_fits", "connectedness", "pairwise", "granger", "responses", "decompositions"):
            _which(_rows(of_universe(snapshot[t], u)), _rows(of_universe(n1_snap[t], u)), _rows(of_universe(ref.snapshot[t], u)), f"snapshot {t} of {u!r}")
    return held


def assert_finished_like_reference(night: Night, ref: Reference, killed_batches: pl.DataFrame, killed_runs: pl.DataFrame) -> None:
    """Check 2 of the module docstring."""
    after = night.tables()
    for t in (*UNIVERSE_TABLES, "observations", "revisions"):
        assert _rows(after[t]) == _rows(ref.tables[t]), f"{t} differs from the uninterrupted run's"
    for t in ("runs", "ingest_batches"):
        assert after[t].filter(pl.col("status") == "running").height == 0, t
    for frame, key in ((killed_batches, "batch_id"), (killed_runs, "run_id")):
        for row in frame.iter_rows(named=True):
            if row["status"] == "running":  # the killed one: now failed, saying why
                table = "ingest_batches" if key == "batch_id" else "runs"
                now = after[table].filter(pl.col(key) == row[key]).row(0, named=True)
                assert now["status"] == "failed" and now["message"].startswith("interrupted"), now
    snap = night.snapshot_tables()
    for t in UNIVERSE_TABLES:
        assert _rows(snap[t]) == _rows(ref.snapshot[t]), f"snapshot {t} differs from the uninterrupted run's"
    leftovers = [p.name for p in night.folder.iterdir() if p.name.startswith(".serving.duckdb.")]
    assert not leftovers, f"temporary snapshot files left behind: {leftovers}"


def _survive(night: Night, night1: Night, ref: Reference, kill: object) -> dict[str, str]:
    """Run the kill, check consistency, resume, compare; returns what the warehouse held after the kill."""
    before = night.tables()
    phase = kill()  # type: ignore[operator]
    assert isinstance(phase, str)
    killed = night.tables()
    held = assert_consistent(killed, night.snapshot_tables(), night1, ref)
    killed_batches = new_rows(before["ingest_batches"], killed["ingest_batches"])
    killed_runs = new_rows(before["runs"], killed["runs"])
    resumed = night.run()
    assert resumed.exit_code == 0, resumed.stderr
    assert_finished_like_reference(night, ref, killed_batches, killed_runs)
    print(f"kill -9 {phase}: held after kill {held}; resumed run equals the uninterrupted run")
    return held


def _spawn(night: Night, api_url: str, point: str) -> subprocess.Popen[str]:
    if point == "none":
        cmd = shockflow_command("run", "--config", str(night.config))
    else:
        cmd = [sys.executable, "-m", "tests.faults._child", point, "--", "run", "--config", str(night.config)]
    return subprocess.Popen(cmd, cwd=REPO, env=subprocess_env(api_url), stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)


# --------------------------------------------------------------------------------------------
# Kill at a known point
# --------------------------------------------------------------------------------------------


#: What the warehouse holds right after each known kill point (checked before the resume).
HELD = {
    "ingest": {"equities": "night 2", "rates": "night 1", "stocks": "night 1", "rates_pair": "night 1"},
    "fit": {"equities": "night 2", "rates": "night 2", "stocks": "night 1", "rates_pair": "night 1"},
    "write": {"equities": "night 2", "rates": "night 2", "stocks": "night 2", "rates_pair": "night 1"},
    "publish": {"equities": "night 2", "rates": "night 2", "stocks": "night 2", "rates_pair": "night 2"},
}


@pytest.mark.parametrize(
    "point",
    ["ingest", "fit", "write", pytest.param("publish", marks=pytest.mark.slow)],
)
def test_kill_at_a_known_point(point: str, night_two: Night, fault_night_one: Night, reference: Reference, prefect_api: str) -> None:
    def kill() -> str:
        child = _spawn(night_two, prefect_api, point)
        _out, err = child.communicate(timeout=600)
        assert child.returncode == -signal.SIGKILL, f"the child was not killed (exit {child.returncode}): {err}"
        return f"mid-{point}"

    held = _survive(night_two, fault_night_one, reference, kill)
    assert held == HELD[point]


# --------------------------------------------------------------------------------------------
# Kill at a random moment (fixed seeds)
# --------------------------------------------------------------------------------------------


def _warehouse_open(pid: int, warehouse: Path) -> bool:
    try:
        for fd in os.listdir(f"/proc/{pid}/fd"):
            try:
                if os.readlink(f"/proc/{pid}/fd/{fd}") == str(warehouse):
                    return True
            except OSError:
                continue
    except OSError:
        return False
    return False


def _classify(night: Night, before: dict[str, pl.DataFrame], finished: bool) -> str:
    if finished:
        return "after the run ended (no kill)"
    now = read_tables(night.warehouse)
    batches = new_rows(before["ingest_batches"], now["ingest_batches"])
    runs = new_rows(before["runs"], now["runs"])
    if (batches["status"] == "running").any():
        return "mid-ingest"
    if batches.height == 0:
        return "start-up"
    if runs.height == 0:
        return "between ingest and fit"
    if (runs["status"] == "failed").any():
        return "after a universe run failed"
    if (runs["status"] == "running").any():
        # the run keeps one connection open throughout, so the WAL cannot tell fit from write;
        # what was stored can: nothing yet (fitting, or writing the first universe) or some
        stored = (runs["status"] == "succeeded").sum()
        return f"mid-fit/write ({stored} of {runs.height} universes stored)"
    if any(p.name.endswith(".tmp") for p in night.folder.iterdir()):
        return "mid-publish"
    return "after the fits were stored (publish or export)"


@pytest.fixture(scope="session")
def child_work_seconds(fault_night_one: Night, reference: Reference, prefect_api: str, tmp_path_factory: pytest.TempPathFactory) -> float:
    """Seconds from a child's first warehouse open to its exit, in one uninterrupted child run.

    That child's night must also end with the tables of the in-process reference run.
    """
    from tests.faults.conftest import write_night_two

    night = fault_night_one.copy(tmp_path_factory.mktemp("faults-calibration") / "scenario")
    write_night_two(night)
    child = _spawn(night, prefect_api, "none")
    opened = _wait_until_open(child, night.warehouse)
    _out, err = child.communicate(timeout=600)
    seconds = time.monotonic() - opened
    assert child.returncode == 0, err
    tables = night.tables()
    for t in (*UNIVERSE_TABLES, "observations", "revisions"):
        assert _rows(tables[t]) == _rows(reference.tables[t]), t
    return seconds


def _wait_until_open(child: subprocess.Popen[str], warehouse: Path) -> float:
    deadline = time.monotonic() + 600
    while child.poll() is None and not _warehouse_open(child.pid, warehouse):
        assert time.monotonic() < deadline, "the child never opened the warehouse"
        time.sleep(0.002)
    return time.monotonic()


SEEDS = [pytest.param(0), *[pytest.param(s, marks=pytest.mark.slow) for s in range(1, 9)]]


@pytest.mark.parametrize("seed", SEEDS)
def test_kill_at_a_random_moment(seed: int, night_two: Night, fault_night_one: Night, reference: Reference, child_work_seconds: float, prefect_api: str) -> None:
    """The delay after the child first opens the warehouse is uniform on [0, an uninterrupted child's time)."""
    delay = float(np.random.default_rng(seed).uniform(0.0, child_work_seconds))
    before = night_two.tables()

    def kill() -> str:
        child = _spawn(night_two, prefect_api, "none")
        opened = _wait_until_open(child, night_two.warehouse)
        time.sleep(max(0.0, opened + delay - time.monotonic()))
        finished = child.poll() is not None
        if not finished:
            os.kill(child.pid, signal.SIGKILL)
        child.communicate(timeout=600)
        return f"{_classify(night_two, before, finished)} at {delay:.2f} s of {child_work_seconds:.2f} s"

    _survive(night_two, fault_night_one, reference, kill)
