"""Dask workers started on their own report their task runs to the run's Prefect API.

Real parts throughout: a ``dask scheduler`` and a ``dask worker`` started as separate processes on
127.0.0.1 (as a team's cluster is, not a LocalCluster inside the test), and ``shockflow run`` as a
subprocess with no ``PREFECT_API_URL`` — so the run starts Prefect's temporary server, whose
SQLite database lives in the run's ``PREFECT_HOME``. The workers get a PREFECT_HOME of their own:
had they started a temporary server of their own (what they did before the run handed them its
API settings), their task runs would be recorded there, not in the run's database, and the
worker's log would say "Starting temporary server".
"""

from __future__ import annotations

import json
import os
import sqlite3
import subprocess
import sys
import time
from collections.abc import Iterator
from pathlib import Path

import pytest

from tests.pipeline.test_dask_scaleout import reduced_demo_config

BIN = Path(sys.executable).parent


def _clean_env(home: Path) -> dict[str, str]:
    env = {k: v for k, v in os.environ.items() if not k.startswith("PREFECT_")}
    env.update({
        "PREFECT_HOME": str(home),
        "PREFECT_SERVER_ANALYTICS_ENABLED": "false",
        "DO_NOT_TRACK": "1",
        "PREFECT_SERVER_EPHEMERAL_STARTUP_TIMEOUT_SECONDS": "180",
        "PREFECT_LOGGING_LEVEL": "INFO",  # so a temporary server's start would show in the log
    })
    env.pop("SHOCKFLOW_CONFIG", None)
    return env


def _stop(proc: subprocess.Popen[bytes]) -> None:
    if proc.poll() is None:
        proc.terminate()
        try:
            proc.wait(timeout=20)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait(timeout=10)


@pytest.fixture
def cluster(tmp_path: Path) -> Iterator[tuple[str, Path]]:
    """A scheduler and one worker process (2 threads) on loopback; yields (address, worker log)."""
    env = _clean_env(tmp_path / "worker-prefect-home")
    sched_file = tmp_path / "scheduler.json"
    logs = tmp_path / "logs"
    logs.mkdir()
    with open(logs / "scheduler.log", "wb") as slog:
        scheduler = subprocess.Popen(
            [str(BIN / "dask"), "scheduler", "--host", "127.0.0.1", "--port", "0", "--dashboard-address",
             "127.0.0.1:0", "--scheduler-file", str(sched_file)],
            env=env, stdout=slog, stderr=subprocess.STDOUT, stdin=subprocess.DEVNULL, cwd=tmp_path,
        )
    worker = None
    try:
        deadline = time.monotonic() + 120
        while not sched_file.is_file() and time.monotonic() < deadline:
            assert scheduler.poll() is None, (logs / "scheduler.log").read_text()
            time.sleep(0.2)
        address = json.loads(sched_file.read_text())["address"]
        with open(logs / "worker.log", "wb") as wlog:
            worker = subprocess.Popen(
                [str(BIN / "dask"), "worker", "--scheduler-file", str(sched_file), "--host", "127.0.0.1",
                 "--nworkers", "1", "--nthreads", "2", "--no-dashboard", "--local-directory", str(tmp_path / "scratch")],
                env=env, stdout=wlog, stderr=subprocess.STDOUT, stdin=subprocess.DEVNULL, cwd=tmp_path,
            )
        from distributed import Client

        with Client(address, timeout=60) as client:
            client.wait_for_workers(1, timeout=120)
        yield address, logs / "worker.log"
    finally:
        if worker is not None:
            _stop(worker)
        _stop(scheduler)


def test_separately_started_workers_report_to_the_runs_prefect_api(cluster: tuple[str, Path], tmp_path: Path) -> None:
    address, worker_log = cluster
    config = reduced_demo_config(tmp_path / "run", f'runner = "dask"\naddress = "{address}"\n')
    run_home = tmp_path / "run-prefect-home"
    proc = subprocess.run(
        [str(BIN / "shockflow"), "run", "--config", str(config), "--universe", "rates_fx", "--no-export"],
        env=_clean_env(run_home), capture_output=True, text=True, timeout=900, check=False,
    )
    assert proc.returncode == 0, proc.stdout + proc.stderr
    log = worker_log.read_text(errors="replace")
    assert "Starting temporary server" not in log, log
    assert "fit_block_task" in log or "fit rates_fx block" in log, log  # the fits did run on the worker

    # The run's temporary server recorded the fit blocks' task runs (they ran on the worker).
    db = run_home / "prefect.db"
    assert db.is_file(), sorted(p.name for p in run_home.iterdir())
    con = sqlite3.connect(db)
    try:
        names = [r[0] for r in con.execute("SELECT name FROM task_run WHERE name LIKE 'fit rates_fx block%'")]
        states = {r[0] for r in con.execute("SELECT state_type FROM task_run WHERE name LIKE 'fit rates_fx block%'")}
    finally:
        con.close()
    assert len(names) >= 2, names  # 714 windows / step 4 → several blocks of 60
    assert states == {"COMPLETED"}, states
    assert not (tmp_path / "worker-prefect-home" / "prefect.db").exists(), "a worker started its own Prefect server"
