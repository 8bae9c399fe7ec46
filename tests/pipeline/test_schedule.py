"""The nightly schedule: cron/time-zone validation, the deployment `serve` registers, a nightly
run triggered on it completes (ingest → fit → publish → export, the real flow), and a Prefect
server started by us comes up and goes away.

Prefect parts run for real: the test harness's temporary server, Prefect's `Runner` polling
every second, `run_deployment`, and (in its own test) `prefect server start` as a subprocess.
The data is an invented three-series price table (tests/pipeline/helpers.simulate_prices).
"""

from __future__ import annotations

import dataclasses
import os
import queue
import threading
import time
import urllib.request
from pathlib import Path

import pytest

from pipeline.config import ScheduleConfig, load_config
from pipeline.errors import ScheduleError
from pipeline.flows import nightly_flow
from pipeline.schedule import (
    DEPLOYMENT_NAME,
    LocalPrefectServer,
    build_deployment,
    check_schedule,
    serve,
    server_home,
)
from tests.pipeline.helpers import simulate_prices
from tests.pipeline.test_export import snapshot_frame

CONFIG = """
[warehouse]
path = "./wh.duckdb"
snapshot = "./wh-serving.duckdb"

[[sources]]
name = "markets"
kind = "csv"
path = "./markets.csv"

[[universes]]
name = "core"
series = ["S0", "S1", "S2"]
window = 60
step = 20
lags = 1
horizon = 5

[schedule]
cron = "15 21 * * 1-5"
timezone = "Europe/London"

[export]
directory = "./exports"
"""


@pytest.fixture
def config_file(tmp_path: Path) -> Path:
    path = tmp_path / "shockflow.toml"
    path.write_text(CONFIG, encoding="utf-8")
    simulate_prices(160).write_csv(tmp_path / "markets.csv")
    return path


# -- without Prefect ------------------------------------------------------------------------------

@pytest.mark.parametrize(("cron", "tz", "match"), [
    ("0 22 * *", "UTC", r"\[schedule\] cron is '0 22 \* \*'; it needs 5 fields"),
    ("0 25 * * 1-5", "UTC", r"cron '0 25 \* \* 1-5' is not a valid cron expression"),
    ("0 22 * * mon-fri-sat", "UTC", r"is not a valid cron expression"),
    ("0 22 * * 1-5", "Europe/Londn", r"timezone 'Europe/Londn' is not an IANA time zone"),
    ("0 22 * * 1-5", "../etc/passwd", r"is not an IANA time zone"),
])
def test_bad_schedules_are_named(cron: str, tz: str, match: str) -> None:
    with pytest.raises(ScheduleError, match=match):
        check_schedule(cron, tz)


def test_good_schedule_is_normalised() -> None:
    assert check_schedule("  30 6  * * 1-5 ", "America/New_York") == ("30 6 * * 1-5",
                                                                       "America/New_York")


def test_deployment_carries_cron_timezone_and_config_path(config_file: Path) -> None:
    config = load_config(config_file)
    d = build_deployment(config, config_path=config_file)  # default: the nightly flow
    assert (d.flow_name, d.name) == (nightly_flow.name, DEPLOYMENT_NAME)
    (s,) = d.schedules
    assert (s.schedule.cron, s.schedule.timezone) == ("15 21 * * 1-5", "Europe/London")
    assert s.active is True
    assert d.parameters == {"config_path": str(config_file.resolve())}
    assert d.paused is False


def test_local_server_files_sit_beside_the_warehouse(config_file: Path) -> None:
    config = load_config(config_file)
    assert server_home(config) == config_file.parent / "wh.duckdb.prefect"


def test_serve_refuses_a_bad_schedule_before_starting_anything(config_file: Path) -> None:
    config = load_config(config_file)
    bad = dataclasses.replace(config, schedule=ScheduleConfig(cron="0 22 * * 8", timezone="UTC"))
    with pytest.raises(ScheduleError, match=r"\[schedule\] in .*shockflow.toml cron '0 22 \* \* 8'"):
        serve(bad, config_path=config_file, api_url=None)
    assert not server_home(config).exists()  # no Prefect server was started


# -- with Prefect (the session's one harness: `prefect_api` in tests/conftest.py) ---------------

@pytest.mark.prefect
def test_served_deployment_has_the_cron_and_a_triggered_run_completes(
        prefect_harness: None, config_file: Path) -> None:
    from prefect.client.orchestration import get_client
    from prefect.deployments import run_deployment

    config = load_config(config_file)
    full_name = f"{nightly_flow.name}/{DEPLOYMENT_NAME}"
    ready: queue.Queue = queue.Queue()
    failed: list[BaseException] = []

    def target() -> None:
        try:
            serve(config, config_path=config_file, query_seconds=1, on_ready=ready.put)
        except BaseException as exc:  # surfaced below
            failed.append(exc)
            ready.put(None)

    t0 = time.monotonic()
    thread = threading.Thread(target=target, name="schedule-serve", daemon=True)
    thread.start()
    runner = ready.get(timeout=60)
    assert runner is not None, failed
    try:
        with get_client(sync_client=True) as client:
            d = client.read_deployment_by_name(full_name)
        (s,) = d.schedules
        assert (s.schedule.cron, s.schedule.timezone) == ("15 21 * * 1-5", "Europe/London")
        assert s.active and not d.paused
        assert d.parameters == {"config_path": str(config_file.resolve())}

        run = run_deployment(full_name, timeout=90, poll_interval=1)
        assert run.state is not None and run.state.is_completed(), run.state
        # The run, in the runner's subprocess, read this config: it filled the warehouse,
        # published the snapshot and exported the report where the config says.
        snap = config.warehouse.snapshot
        counts = snapshot_frame(snap, "SELECT (SELECT count(*) FROM connectedness WHERE "
                                "universe = ?) AS fitted, (SELECT count(*) FROM window_fits WHERE "
                                "universe = ? AND skip_reason IS NULL) AS fits", ["core", "core"])
        assert counts["fitted"][0] >= 4  # window 60, step 20 over 159 return rows
        assert counts["fitted"][0] == counts["fits"][0]
        assert list(config.export.directory.glob("*/core/core-*.html"))
    finally:
        # Let the run's process exit (the runner serves one run at a time) before stopping,
        # so the stop does not race the finished run's shutdown.
        deadline = time.monotonic() + 20
        while not runner.has_slots_available() and time.monotonic() < deadline:
            time.sleep(0.2)
        runner.execute_in_background(runner.astop)
        thread.join(timeout=30)
    assert not thread.is_alive() and not failed, failed
    with get_client(sync_client=True) as client:
        assert client.read_deployment_by_name(full_name).paused is False  # left active
    print(f"schedule round trip (serve → run completed → stopped): {time.monotonic() - t0:.1f} s")


@pytest.mark.prefect
def test_local_server_starts_healthy_beside_the_warehouse_and_stops(tmp_path: Path) -> None:
    home = tmp_path / "wh.duckdb.prefect"
    with LocalPrefectServer(home) as server:
        pid = server.process.pid
        with urllib.request.urlopen(f"{server.api_url}/health", timeout=5) as resp:
            assert resp.read().strip() == b"true"
        assert server.database.is_file() and server.database.parent == home
    assert server.process is None
    with pytest.raises(ProcessLookupError):
        os.kill(pid, 0)  # the server process (and its group) is gone
