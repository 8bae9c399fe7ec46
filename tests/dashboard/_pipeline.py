"""A serving snapshot made by the real pipeline on a small config over the demo data.

The job's own steps (`pipeline.jobs`: ingest each source, run each universe, publish, export) run in
this process without Prefect — the same plain functions the nightly flow orders as tasks. Two
universes: a cross-market one with a fixed lag and stored bootstrap bands (generalized), and a
rates/currency one with the lag order chosen per window by BIC (Cholesky). The demo data are the
invented Veloria market of data_samples/ (not real market data).
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

ROOT = Path(__file__).resolve().parents[2]
DATA = ROOT / "data_samples"

CONFIG = """
[warehouse]
path = "warehouse.duckdb"
snapshot = "serving.duckdb"

[[sources]]
name = "veloria_exchange"
kind = "csv"
path = "{data}/markets_wide.csv"
layout = "wide"
date_column = "date"

[[sources]]
name = "veloria_rates"
kind = "csv"
path = "{data}/rates_long.csv"
layout = "long"
date_column = "date"
series_column = "series"
value_column = "value"

[[universes]]
name = "cross_market"
series = ["VLX_BROAD", "VLX_BANKS", "FX_VLR", {{ name = "VGB_10Y", transform = "diff" }}, {{ name = "VCR_SPREAD", transform = "diff" }}]
transform = "log_return"
frequency = "business_day"
max_fill_gap = 3
window = 250
step = 20
lags = 1
horizon = 10
identification = "generalized"
granger_level = 0.05
frequency_bands = [5, 20]
joint = true
[universes.bands]
method = "bootstrap"
draws = 50
seed = 1
coverage = 0.9

[[universes]]
name = "rates_fx"
series = ["FX_VLR", {{ name = "VGB_2Y", transform = "diff" }}, {{ name = "VGB_10Y", transform = "diff" }}]
frequency = "business_day"
window = 250
step = 40
horizon = 8
identification = "cholesky"
[universes.lag_selection]
criterion = "bic"
max_lags = 3

[export]
directory = "exports"
formats = ["html", "csv"]
"""


def available() -> bool:
    """True when the pipeline's job steps and arlib's rolling engine are importable."""
    try:
        import arlib
        from pipeline import jobs  # noqa: F401
        from pipeline.config import load_config  # noqa: F401
    except ImportError:
        return False
    return hasattr(arlib, "rolling_var")


def config_in(folder: Path, text: str = CONFIG) -> Any:
    """A config (`text`, with ``{data}`` standing for data_samples/), written into `folder` (its
    warehouse, snapshot and exports land there) and loaded."""
    from pipeline.config import load_config

    config_path = folder / "shockflow.toml"
    config_path.write_text(text.format(data=DATA.as_posix()), encoding="utf-8")
    return load_config(config_path)


def build(folder: Path, *, export: bool | list[str] = True, text: str = CONFIG) -> tuple[Path, Path]:
    """Run ingest → fit → publish (→ export every universe, or the ones named) into `folder` with
    the small config or `text`; returns (snapshot, export folder)."""
    from pipeline import jobs

    config = config_in(folder, text)
    for source in config.sources:
        result = jobs.ingest_source(config.warehouse.path, source)
        if result.status != "succeeded":
            msg = f"pipeline ingest of {source.name} failed: {result.message}"
            raise RuntimeError(msg)
    for universe in config.universes:
        done = jobs.run_universe(config.warehouse.path, universe)
        if done.status != "succeeded":
            msg = f"pipeline run of {universe.name} failed: {done.message}"
            raise RuntimeError(msg)
    jobs.publish_step(config)
    if export:
        names = export if isinstance(export, list) else [u.name for u in config.universes]
        jobs.export_step(config, names)
    return config.warehouse.snapshot, config.export.directory


def whole_range(snap: Any, universe: str) -> dict[str, str]:
    """The dashboard's state for `universe` over all its stored window ends."""
    lo, hi = snap.date_bounds(universe)
    return {"universe": universe, "start": lo.isoformat(), "end": hi.isoformat()}
