"""Parquet files (a path or glob), wide or long."""

from __future__ import annotations

from datetime import date
from typing import TYPE_CHECKING

import polars as pl

from pipeline.errors import SourceError
from pipeline.sources._csv import combine, resolve_glob
from pipeline.sources._frame import SourceFrame
from pipeline.sources._rows import CHUNK_CELLS, LongRows, from_table

if TYPE_CHECKING:
    from pipeline.sources._config import SourceConfig

__all__ = ["read_parquet"]


def read_parquet(source: SourceConfig, *, today: date) -> SourceFrame:
    """Read every Parquet file matching the glob, a slice of rows at a time. Rows are named by 1-based row number."""
    files = resolve_glob(source)
    frames = []
    for file in files:
        frames.append(_read_one(file, source=source, today=today))
    return SourceFrame(source=source.name, frame=combine(frames, origins=files), origins=tuple(files))


def _read_one(file: str, *, source: SourceConfig, today: date) -> pl.DataFrame:
    origin = f"{file} (row numbers from 1)"
    try:
        scan = pl.scan_parquet(file)
        columns = scan.collect_schema().names()
        height = scan.select(pl.len()).collect().item()
    except (pl.exceptions.PolarsError, OSError) as exc:
        first = " ".join(str(exc).split())[:300]
        msg = f"{file}: not a readable Parquet file ({first}); rewrite it or remove it from the glob"
        raise SourceError(msg) from None
    if height == 0:
        return from_table(pl.DataFrame(schema=dict.fromkeys(columns, pl.String)), origin=origin, source=source, today=today)
    rows = LongRows(origin=origin, source=source, today=today)
    rows.check_header(columns)
    step = max(CHUNK_CELLS // max(len(columns), 1), 1)
    for start in range(0, height, step):
        try:
            part = scan.slice(start, step).collect()
        except (pl.exceptions.PolarsError, OSError) as exc:
            first = " ".join(str(exc).split())[:300]
            msg = f"{file}: not a readable Parquet file ({first}); rewrite it or remove it from the glob"
            raise SourceError(msg) from None
        rows.add(part, lines=pl.Series("line", range(start + 1, start + 1 + part.height)))
    return rows.finish()
