"""The report's access to the serving snapshot: `serving`'s one reader, opened with export errors.

Every query runs through `serving.Snapshot` (read-only, parameterised; table and column names from
the schema declarations). This module only opens it, checks the tables a report needs, turns the
reader's Arrow results into polars frames and its errors into `ExportError`.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import polars as pl

from pipeline.errors import ExportError
from serving import ServingError, Snapshot, Universe

__all__ = ["REQUIRED_TABLES", "Snapshot", "UniverseInfo", "frame", "open_snapshot"]

#: Tables a report needs; the others are used when present.
REQUIRED_TABLES = ("universes", "universe_series", "window_fits", "connectedness", "directional",
                   "pairwise", "granger", "runs")

#: What the snapshot says about one universe (kept under the report's old name).
UniverseInfo = Universe


def frame(table: Any) -> pl.DataFrame:
    """A `pyarrow.Table` from the reader as a polars frame (an empty frame for None)."""
    if table is None:
        return pl.DataFrame()
    df = pl.from_arrow(table)
    assert isinstance(df, pl.DataFrame)
    return df


def open_snapshot(path: str | Path) -> Snapshot:
    """Open the serving snapshot read-only; raises `ExportError` naming the file and the fix."""
    p = Path(path)
    if not p.is_file():
        msg = (
            f"serving snapshot {p} does not exist; run `shockflow run --config FILE` "
            "first (it publishes the snapshot), or pass the snapshot path from `[warehouse] snapshot`"
        )
        raise ExportError(msg)
    snap = Snapshot(p)
    try:
        snap.require(REQUIRED_TABLES)
    except ServingError as exc:
        snap.close()
        raise ExportError(str(exc)) from None
    return snap
