"""Small builders shared by the pipeline tests (configs written to tmp folders)."""

from __future__ import annotations

import textwrap
from pathlib import Path

from pipeline.config import Config, load_config


def write_config(folder: Path, body: str, *, name: str = "shockflow.toml") -> Path:
    """Write a TOML config into `folder` and return its path."""
    path = folder / name
    path.write_text(textwrap.dedent(body), encoding="utf-8")
    return path


MINIMAL = """
[warehouse]
path = "wh.duckdb"
snapshot = "serving.duckdb"

[[sources]]
name = "prices"
kind = "csv"
path = "prices.csv"

[[universes]]
name = "pair"
series = ["A", "B"]
window = 40
lags = 1
"""


def minimal_config(folder: Path, extra: str = "") -> Config:
    """A valid two-series config in `folder` (the CSV itself is not written)."""
    return load_config(write_config(folder, MINIMAL + textwrap.dedent(extra)))
