"""CSV and Parquet extracts of one universe's result tables (polars writers).

Scalar tables carry the universe's full history up to the report date, exactly as stored.
Array tables are written as long rows for the report's window only (their history can run to
millions of rows; query the snapshot for it):

- ``responses``: window_end, identification, horizon (0 = impact), response, shock, value,
  lower, upper, coverage, origin — from the (H+1, n, n) [h, response, shock] arrays;
- ``decompositions``: window_end, method, step (1..H), variable, shock, share (fraction) —
  from the (H, n, n) [step, variable, shock] arrays.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np
import polars as pl

if TYPE_CHECKING:
    from pathlib import Path

    from pipeline.export._data import ReportData

__all__ = ["EXTRACT_TABLES", "extract_frames", "write_extracts"]

#: Table names, in the order written; one `<name>.csv` / `<name>.parquet` each.
EXTRACT_TABLES = ("connectedness", "directional", "pairwise", "granger", "window_fits", "runs",
                  "responses", "decompositions")


def _responses_long(d: ReportData) -> pl.DataFrame:
    names = list(d.info.series)
    n = len(names)
    parts = []
    for rs in d.responses:
        H1 = rs.horizon + 1
        h, i, j = np.meshgrid(np.arange(H1), np.arange(n), np.arange(n), indexing="ij")
        nan = np.full(H1 * n * n, None)
        parts.append(pl.DataFrame({
            "window_end": [d.fitted_date] * (H1 * n * n),
            "identification": [rs.identification] * (H1 * n * n),
            "horizon": h.ravel().astype(np.int32),
            "response": [names[k] for k in i.ravel()],
            "shock": [names[k] for k in j.ravel()],
            "value": rs.response.ravel(),
            "lower": nan if rs.lower is None else rs.lower.ravel(),
            "upper": nan if rs.upper is None else rs.upper.ravel(),
            "coverage": [rs.coverage] * (H1 * n * n),
            "origin": [rs.origin] * (H1 * n * n),
        }, schema_overrides={"lower": pl.Float64, "upper": pl.Float64, "coverage": pl.Float64}))
    if not parts:
        return pl.DataFrame(schema={"window_end": pl.Date, "identification": pl.String,
                                    "horizon": pl.Int32, "response": pl.String,
                                    "shock": pl.String, "value": pl.Float64,
                                    "lower": pl.Float64, "upper": pl.Float64,
                                    "coverage": pl.Float64, "origin": pl.String})
    return pl.concat(parts)


def _decompositions_long(d: ReportData) -> pl.DataFrame:
    names = list(d.info.series)
    n = len(names)
    parts = []
    for ds in d.decompositions:
        H = ds.horizon
        s, i, j = np.meshgrid(np.arange(H), np.arange(n), np.arange(n), indexing="ij")
        m = H * n * n
        parts.append(pl.DataFrame({
            "window_end": [d.fitted_date] * m,
            "method": [ds.method] * m,
            "step": (s.ravel() + 1).astype(np.int32),
            "variable": [names[k] for k in i.ravel()],
            "shock": [names[k] for k in j.ravel()],
            "share": ds.share.ravel(),
            "origin": [ds.origin] * m,
        }))
    if not parts:
        return pl.DataFrame(schema={"window_end": pl.Date, "method": pl.String,
                                    "step": pl.Int32, "variable": pl.String, "shock": pl.String,
                                    "share": pl.Float64, "origin": pl.String})
    return pl.concat(parts)


def extract_frames(d: ReportData) -> dict[str, pl.DataFrame]:
    """The extract tables of one universe, keyed by `EXTRACT_TABLES` names."""
    frames = {
        "connectedness": d.connectedness,
        "directional": d.directional,
        "pairwise": d.pairwise,
        "granger": d.granger,
        "window_fits": d.fits,
        "runs": d.runs,
        "responses": _responses_long(d),
        "decompositions": _decompositions_long(d),
    }
    return {k: frames[k] for k in EXTRACT_TABLES}


def write_extracts(d: ReportData, directory: Path, *, csv: bool, parquet: bool) -> list[Path]:
    """Write each extract table as `<table>.csv` and/or `<table>.parquet` into `directory`."""
    written: list[Path] = []
    for name, frame in extract_frames(d).items():
        if csv:
            path = directory / f"{name}.csv"
            frame.write_csv(path)
            written.append(path)
        if parquet:
            path = directory / f"{name}.parquet"
            frame.write_parquet(path)
            written.append(path)
    return written
