"""Parquet files (a path or glob), wide or long."""

from __future__ import annotations

from datetime import date
from typing import TYPE_CHECKING

import polars as pl

from pipeline.errors import SourceError
from pipeline.sources._csv import combine, resolve_glob
from pipeline.sources._frame import SourceFrame
from pipeline.sources._rows import from_table

if TYPE_CHECKING:
    from pipeline.sources._config import SourceConfig

__all__ = ["read_parquet"]


def read_parquet(source: SourceConfig, *, today: date) -> SourceFrame:
    """Read every Parquet file matching the glob. Rows are named by 1-based row number."""
    files = resolve_glob(source)
    frames = []
    for file in files:
        try:
            df = pl.read_parquet(file)
        except (pl.exceptions.PolarsError, OSError) as exc:
            first = " ".join(str(exc).split())[:300]
            msg = f"{file}: not a readable Parquet file ({first}); rewrite it or remove it from the glob"
            raise SourceError(msg) from None
        frames.append(from_table(df, origin=f"{file} (row numbers from 1)", source=source, today=today, first_line=1))
    return SourceFrame(source=source.name, frame=combine(frames, origins=files), origins=tuple(files))
