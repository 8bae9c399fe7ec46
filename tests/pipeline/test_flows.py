"""The nightly Prefect flow under the session's test harness: ordering, partial failures, no-op rerun.

Data: an invented VAR(1) scenario (tests.pipeline.helpers.simulate_prices).
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

import duckdb
import pytest

from pipeline.config import load_config
from tests.pipeline.helpers import simulate_prices, write_config

if TYPE_CHECKING:  # Prefect is imported by the tests that use it, not at collection
    from prefect.client.schemas.objects import Artifact, Log, State

    from pipeline._summary import NightlySummary

pytestmark = pytest.mark.prefect

CONFIG = """
[warehouse]
path = "out/wh.duckdb"
snapshot = "out/serving.duckdb"

[[sources]]
name = "prices"
kind = "csv"
path = "prices.csv"

[[sources]]
name = "absent"
kind = "csv"
path = "nowhere/*.csv"

[[universes]]
name = "trio"
series = ["S0", "S1", "S2"]
window = 60
step = 5
lags = 1
horizon = 5

[[universes]]
name = "broken"
series = ["S0", "S9"]
window = 60
lags = 1

[export]
directory = "out/exports"
formats = ["csv"]
"""


def prefect_record(summary: NightlySummary) -> tuple[State, list[Artifact], list[Log]]:
    """(final state, artifacts, log records) of a nightly run, read back from the Prefect API.

    Logs travel to the API in batches; the read waits for the INFO line of the run's first
    stored source or failed source (or gives up after 60 s and returns what is there).
    """
    import time
    import uuid

    from prefect.client.orchestration import get_client
    from prefect.client.schemas.filters import (
        ArtifactFilter,
        ArtifactFilterFlowRunId,
        LogFilter,
        LogFilterFlowRunId,
    )
    from prefect.logging.handlers import APILogWorker

    ids = [uuid.UUID(i) for i in summary.flow_run_ids]
    APILogWorker.drain_all(timeout=30)
    with get_client(sync_client=True) as client:
        state = client.read_flow_run(ids[0]).state
        artifacts = client.read_artifacts(artifact_filter=ArtifactFilter(flow_run_id=ArtifactFilterFlowRunId(any_=ids)))
        deadline = time.monotonic() + 60
        while True:
            logs = client.read_logs(log_filter=LogFilter(flow_run_id=LogFilterFlowRunId(any_=ids)))
            if any(lg.name.startswith("shockflow.") for lg in logs) or time.monotonic() > deadline:
                break
            time.sleep(0.5)
    assert state is not None, f"flow run {ids[0]} has no state in the Prefect API"
    return state, artifacts, logs


def test_nightly_flow_runs_what_it_can_and_reports_partial(prefect_harness: None, tmp_path: Path) -> None:
    from pipeline.flows import nightly

    simulate_prices(120).write_csv(tmp_path / "prices.csv")
    cfg = load_config(write_config(tmp_path, CONFIG))
    summary = nightly(cfg)
    assert [(r.source, r.status) for r in summary.ingest] == [("prices", "succeeded"), ("absent", "failed")]
    assert "no file matches path" in (summary.ingest[1].message or "")
    assert [(r.universe, r.status) for r in summary.universes] == [("trio", "succeeded"), ("broken", "failed")]
    assert summary.universes[0].fitted == 12  # 119 returns, window 60, step 5 → ends 59, 64, ..., 114
    assert "series 'S9' has no observations" in (summary.universes[1].message or "")
    assert summary.published and summary.exit_code == 2
    assert len(summary.failures) == 2
    # each failure names what failed once (was "source 'absent': source 'absent': ...")
    assert all(f.count("source 'absent'") + f.count("universe 'broken'") == 1 for f in summary.failures), summary.failures

    # Prefect's record: the flow run Failed naming both failures, the summary as a table artifact,
    # the pipeline's INFO lines among the run's logs
    state, artifacts, logs = prefect_record(summary)
    assert state.type.value == "FAILED", state
    message = state.message or ""
    assert "source 'absent'" in message and "universe 'broken'" in message, state
    (artifact,) = [a for a in artifacts if a.key == "shockflow-nightly-summary"]
    assert artifact.type == "table"
    data = artifact.data
    table = data if isinstance(data, list) else __import__("json").loads(data)
    assert [(r["kind"], r["name"], r["status"]) for r in table][:4] == [
        ("source", "prices", "succeeded"), ("source", "absent", "failed"),
        ("universe", "trio", "succeeded"), ("universe", "broken", "failed"),
    ]
    info = [lg.message for lg in logs if lg.level == 20 and lg.name.startswith("shockflow.")]
    assert any(m.startswith("source prices:") and "rows read" in m for m in info), info
    assert any(m.startswith("universe trio: 12 fitted") for m in info), info
    # the snapshot holds the succeeded universe; the failure is in `runs` and `ingest_batches`
    snap = duckdb.connect(str(cfg.warehouse.snapshot), read_only=True)
    try:
        assert snap.execute("SELECT count(*) FROM connectedness WHERE universe = 'trio'").fetchall() == [(12,)]
        assert snap.execute("SELECT universe, status FROM runs ORDER BY universe").fetchall() == [("broken", "failed"), ("trio", "succeeded")]
        assert snap.execute("SELECT source, status FROM ingest_batches ORDER BY source").fetchall() == [("absent", "failed"), ("prices", "succeeded")]
    finally:
        snap.close()
    exported = summary.exported["trio"]
    assert exported and all(Path(p).exists() and Path(p).is_relative_to(cfg.export.directory) for p in exported)

    # the same night again: nothing new is fitted, the published numbers are unchanged
    again = nightly(cfg)
    assert [(r.universe, r.fitted, r.reused) for r in again.universes if r.status == "succeeded"] == [("trio", 0, 12)]
    assert again.revisions == 0 and again.exit_code == 2
    assert not again.published and again.publish_message == "nothing changed; the served snapshot is already current"
    assert again.exported == {}


def test_nothing_runs_gives_exit_code_1(prefect_harness: None, tmp_path: Path) -> None:
    from pipeline.flows import nightly

    text = CONFIG.replace('path = "prices.csv"', 'path = "missing.csv"')
    cfg = load_config(write_config(tmp_path, text))
    summary = nightly(cfg)
    assert all(r.status == "failed" for r in summary.ingest + summary.universes)
    assert not summary.published and summary.exit_code == 1
    assert not cfg.warehouse.snapshot.exists()
    state, _artifacts, _logs = prefect_record(summary)
    assert state.type.value == "FAILED" and (state.message or "").startswith("nothing ran"), state


CATCH_UP = """
[warehouse]
path = "out/wh.duckdb"
snapshot = "out/serving.duckdb"

[[sources]]
name = "prices"
kind = "csv"
path = "prices.csv"

[[universes]]
name = "trio"
series = ["S0", "S1", "S2"]
window = 60
step = 20
lags = 1
horizon = 5

[export]
directory = "out/exports"
formats = ["html", "csv"]
"""


def _files(folder: Path) -> dict[str, int]:
    """Every file under `folder` (relative path → modification time in ns)."""
    return {str(p.relative_to(folder)): p.stat().st_mtime_ns for p in sorted(folder.rglob("*")) if p.is_file()}


def test_a_missing_report_is_exported_again_and_a_present_one_is_left_alone(prefect_harness: None, tmp_path: Path) -> None:
    """A run killed after publishing but before exporting leaves the night's report unwritten; the
    next run has no new results, yet writes the report for the universe's latest window date."""
    import shutil

    from pipeline.flows import nightly

    simulate_prices(120).write_csv(tmp_path / "prices.csv")
    cfg = load_config(write_config(tmp_path, CATCH_UP))
    first = nightly(cfg)
    assert first.published and first.exit_code == 0
    assert prefect_record(first)[0].type.value == "COMPLETED"
    (folder,) = {Path(p).parent for p in first.exported["trio"]}
    # the folder is named by the universe's latest window end in the snapshot (pipeline.export)
    snap = duckdb.connect(str(cfg.warehouse.snapshot), read_only=True)
    try:
        ((day,),) = snap.execute("SELECT max(window_end) FROM window_fits WHERE universe = 'trio'").fetchall()
    finally:
        snap.close()
    assert folder == cfg.export.directory / day.isoformat() / "trio"
    assert (folder / f"trio-{day.isoformat()}.html").is_file() and (folder / "pairwise.csv").is_file()
    exported = _files(cfg.export.directory)

    # the folder is gone (as after a kill between publish and export): the next run writes it again
    shutil.rmtree(folder)
    again = nightly(cfg)
    assert [(r.universe, r.fitted, r.changed) for r in again.universes] == [("trio", 0, False)]
    assert not again.published and again.exit_code == 0
    assert sorted(again.exported) == ["trio"]
    assert set(_files(cfg.export.directory)) == set(exported)

    # a partial folder (one extract lost) counts as missing too
    (folder / "pairwise.csv").unlink()
    assert sorted(nightly(cfg).exported) == ["trio"]
    assert (folder / "pairwise.csv").is_file()

    # every report present: a rerun writes nothing
    before = _files(cfg.export.directory)
    last = nightly(cfg)
    assert last.exported == {} and last.export_message is None
    assert _files(cfg.export.directory) == before
