"""The nightly Prefect flow under the session's test harness: ordering, partial failures, no-op rerun.

Data: an invented VAR(1) scenario (tests.pipeline.helpers.simulate_prices).
"""

from __future__ import annotations

from pathlib import Path

import duckdb
import pytest

from pipeline.config import load_config
from tests.pipeline.helpers import simulate_prices, write_config

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
    assert all(r.status == "failed" for r in summary.ingest + summary.universes)  # type: ignore[operator]
    assert not summary.published and summary.exit_code == 1
    assert not cfg.warehouse.snapshot.exists()
