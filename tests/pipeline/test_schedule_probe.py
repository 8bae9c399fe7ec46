"""A small flow the schedule test deploys while it checks the serving machinery itself.

Prefect's runner starts each flow run in a subprocess that imports the flow from this file, so
the flow lives in a module of its own (it holds no tests).
"""

from __future__ import annotations

from pathlib import Path

from prefect import flow

from pipeline.config import load_config


@flow(name="shockflow-schedule-probe", log_prints=False)
def probe_nightly(config_path: str) -> str:
    """Load the configuration the deployment passes and leave a marker beside it."""
    config = load_config(config_path)
    marker = Path(config.path).parent / "probe-ran.txt"
    marker.write_text(str(config.path), encoding="utf-8")
    return str(marker)
