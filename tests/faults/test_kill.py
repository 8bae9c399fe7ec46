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
from collections.abc import Callable
from pathlib import Path
from typing import Any

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


def _survive(
    night: Night, night1: Night, ref: Reference, kill: Callable[[], str]
) -> dict[str, str]:
    """Run the kill, check consistency, resume, compare; returns what the warehouse held after the kill."""
    before = night.tables()
    phase = kill()
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


# --------------------------------------------------------------------------------------------
# What a killed run leaves outside the warehouse: Prefect's temporary server, export temp files
# --------------------------------------------------------------------------------------------

SERVER_MARK = "prefect.server.api.server:create_app"


def _own_server_env(tmp: Path) -> dict[str, str]:
    """A child environment with no PREFECT_API_URL (the run starts Prefect's temporary server
    itself, as a lone `shockflow run` does) and its own temp folder (state files, profiles)."""
    env = subprocess_env("unused", TMPDIR=str(tmp), PREFECT_SERVER_EPHEMERAL_STARTUP_TIMEOUT_SECONDS="120")
    del env["PREFECT_API_URL"]
    return env


def _wait_for_server(child: subprocess.Popen[str], warehouse: Path) -> Any:
    """The child's temporary Prefect server process, once the run is under way (warehouse open)."""
    import psutil

    deadline = time.monotonic() + 600
    while True:
        assert child.poll() is None, f"the run ended before the test could kill it: {child.communicate()}"
        assert time.monotonic() < deadline, "the child never started its server and opened the warehouse"
        servers = [p for p in psutil.Process(child.pid).children(recursive=True) if SERVER_MARK in " ".join(_cmdline(p))]
        if servers and _warehouse_open(child.pid, warehouse):
            (server,) = servers
            return server
        time.sleep(0.05)


def _cmdline(proc: Any) -> list[str]:
    import psutil

    try:
        return list(proc.cmdline())
    except psutil.Error:
        return []


def _assert_gone(procs: list[Any], what: str) -> None:
    import psutil

    _gone, alive = psutil.wait_procs(procs, timeout=60)  # a bound on waiting, not a timing claim
    assert not alive, f"{what}: still running after the run died: {[(p.pid, _cmdline(p)) for p in alive]}"


@pytest.mark.parametrize("sig", [signal.SIGKILL, signal.SIGTERM], ids=["kill-9", "sigterm"])
def test_a_killed_run_leaves_no_prefect_server_behind(sig: int, night_two: Night, prefect_api: str, tmp_path: Path) -> None:
    """Issue 10 item 12: kill -9 or SIGTERM of `shockflow run` left Prefect's temporary server
    listening (188 MB) for minutes. Now it dies with the run; SIGTERM stops the run cleanly."""
    import psutil

    del prefect_api  # this child starts its own temporary server, as a lone run does
    tmp = tmp_path / "tmp"
    tmp.mkdir()
    child = subprocess.Popen(
        shockflow_command("run", "--config", str(night_two.config), "--no-export"),
        cwd=REPO, env=_own_server_env(tmp), stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
    )  # fmt: skip
    try:
        server = _wait_for_server(child, night_two.warehouse)
        family = psutil.Process(child.pid).children(recursive=True)
        assert list((tmp / f"shockflow-{os.getuid()}" / "prefect-servers").glob("*.json"))  # recorded
        os.kill(child.pid, sig)
        _out, err = child.communicate(timeout=120)
    finally:
        if child.poll() is None:
            child.kill()
            child.communicate()
    if sig == signal.SIGKILL:
        assert child.returncode == -signal.SIGKILL
    else:
        assert child.returncode == 143, err  # a clean stop: exit 143, "terminated"
        assert "terminated (SIGTERM)" in err
    _assert_gone([server, *family], f"after {signal.Signals(sig).name}")
    assert not any(SERVER_MARK in " ".join(_cmdline(p)) and p.pid == server.pid for p in psutil.process_iter())


def test_the_next_run_reaps_a_recorded_server_whose_run_died(tmp_path: Path) -> None:
    """Where the kernel's parent-death signal is missing or was ignored, the next run stops a
    recorded temporary server whose run is gone (a real process carrying the server's mark stands
    in for the server; its recorded parent is a real process that has exited)."""
    import json

    import psutil

    from pipeline._tempserver import _start_time, reap_orphans

    folder = tmp_path / "servers"
    folder.mkdir()
    server = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(600)", SERVER_MARK])
    parent = subprocess.Popen([sys.executable, "-c", "pass"])
    parent_started = _start_time(parent.pid)
    parent.wait()
    live = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(600)", SERVER_MARK])
    try:
        for proc, owner, owner_started in ((server, parent.pid, parent_started), (live, os.getpid(), _start_time(os.getpid()))):
            (folder / f"{proc.pid}.json").write_text(json.dumps({
                "server_pid": proc.pid, "server_started": _start_time(proc.pid), "parent_pid": owner,
                "parent_started": owner_started, "port": 8123,
            }))
        assert reap_orphans(folder) == [server.pid]
        assert server.wait(timeout=60) is not None
        assert live.poll() is None and psutil.pid_exists(live.pid)  # its run (this test) is alive
        assert sorted(p.name for p in folder.iterdir()) == [f"{live.pid}.json"]
    finally:
        for p in (server, live):
            if p.poll() is None:
                p.kill()
            p.wait()


def test_a_run_killed_while_exporting_leaves_temp_files_the_next_run_removes(night_two: Night, prefect_api: str) -> None:
    """Issue 10 item 12: a kill during export left the report's temporary file (about 4 MB, the
    HTML with plotly inlined) for good. The next run removes it and writes the report."""
    night_two.write_config(night_two.config_text().replace('formats = ["csv"]', 'formats = ["html", "csv"]'))
    child = _spawn(night_two, prefect_api, "export")
    _out, err = child.communicate(timeout=600)
    assert child.returncode == -signal.SIGKILL, f"the child was not killed (exit {child.returncode}): {err}"
    exports = night_two.folder / "exports"
    left = [p for p in exports.rglob(".*.tmp") if p.is_file()]
    assert len(left) == 1 and left[0].stat().st_size > 1_000_000, left  # the whole report, unrenamed
    resumed = night_two.run()
    assert resumed.exit_code == 0, resumed.stderr
    assert not [p for p in exports.rglob("*.tmp")], "temporary export files left behind"
    assert len(list(exports.rglob("*.html"))) == 2  # both universes' reports written
    assert "removed 1 temporary export file(s) left by a killed run" in resumed.stderr
