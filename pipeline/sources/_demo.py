"""The invented demo scenario shipped in data_samples/ (no path needed).

The files are package data of the `data_samples` package (found through importlib.resources), so
an installed shockflow reads them too, not only a checkout.
"""

from __future__ import annotations

import dataclasses
from datetime import date
from pathlib import Path
from typing import TYPE_CHECKING

import data_samples
from pipeline.errors import SourceError
from pipeline.sources._csv import parse_csv_bytes
from pipeline.sources._frame import SourceFrame

if TYPE_CHECKING:
    from pipeline.sources._config import SourceConfig

__all__ = ["DEMO_DIR", "DEMO_FILES", "read_demo"]

DEMO_DIR: Path = data_samples.folder()
#: dataset name → (file in data_samples/, layout)
DEMO_FILES = {"markets": ("markets_wide.csv", "wide"), "rates": ("rates_long.csv", "long")}


def read_demo(source: SourceConfig, *, today: date) -> SourceFrame:
    """Read one of the demo files with its fixed layout and column names."""
    assert source.dataset is not None
    name, layout = DEMO_FILES[source.dataset]
    file = DEMO_DIR / name
    if not file.exists():
        msg = f"demo file {str(file)!r} is missing; rebuild it with `python data_samples/generate.py`"
        raise SourceError(msg)
    preset = dataclasses.replace(
        source, layout=layout, date_column="date", date_format="%Y-%m-%d",
        series_column="series", value_column="value", delimiter=",",
    )
    frame = parse_csv_bytes(file.read_bytes(), origin=str(file), source=preset, today=today)
    return SourceFrame(source=source.name, frame=frame, origins=(str(file),))
