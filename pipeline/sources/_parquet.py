"""Parquet files (a path, glob or folder; local, object store or HTTPS), wide or long, hive partitions.

A folder stands for every ``.parquet`` file below it. ``key=value`` folders whose key is the
source's `date_column` or `series_column` supply that column (see :mod:`pipeline.sources._locate`).
"""

from __future__ import annotations

from datetime import date
from typing import TYPE_CHECKING

import polars as pl
import pyarrow as pa
import pyarrow.parquet as pq

from pipeline.errors import SourceError
from pipeline.sources._csv import combine
from pipeline.sources._frame import SourceFrame
from pipeline.sources._locate import files_of, hive_values, open_file
from pipeline.sources._rows import CHUNK_CELLS, LongRows, from_table

if TYPE_CHECKING:
    from pipeline.sources._config import SourceConfig

__all__ = ["read_parquet"]


def read_parquet(source: SourceConfig, *, today: date) -> SourceFrame:
    """Read every Parquet file the path names, a slice of rows at a time. Rows are named by 1-based row number."""
    files, base = files_of(source, suffix=".parquet")
    frames = []
    for file in files:
        hive = hive_values(file, base, (source.date_column, source.series_column))
        with open_file(source, file) as stream:
            frames.append(_read_one(file, stream, hive=hive, source=source, today=today))
    return SourceFrame(source=source.name, frame=combine(frames, origins=files), origins=tuple(files))


def _unreadable(file: str, exc: BaseException) -> SourceError:
    first = " ".join(str(exc).split())[:300]
    return SourceError(f"{file}: not a readable Parquet file ({first}); rewrite it or remove it from the glob")


def _read_one(file: str, stream: object, *, hive: dict[str, str], source: SourceConfig, today: date) -> pl.DataFrame:
    origin = f"{file} (row numbers from 1)"
    try:
        handle = pq.ParquetFile(stream)
        columns = [*handle.schema_arrow.names, *(k for k in hive if k not in handle.schema_arrow.names)]
        height = handle.metadata.num_rows
    except (pa.ArrowException, OSError) as exc:
        raise _unreadable(file, exc) from None
    if height == 0:
        return from_table(pl.DataFrame(schema=dict.fromkeys(columns, pl.String)), origin=origin, source=source, today=today)
    rows = LongRows(origin=origin, source=source, today=today)
    rows.check_header(columns)
    step = max(CHUNK_CELLS // max(len(columns), 1), 1)
    start = 0
    try:
        for batch in handle.iter_batches(batch_size=step):  # one slice of the file at a time
            part = pl.from_arrow(batch)
            assert isinstance(part, pl.DataFrame)
            if hive:
                part = part.with_columns(pl.lit(v, pl.String).alias(k) for k, v in hive.items() if k not in part.columns)
            rows.add(part, lines=pl.Series("line", range(start + 1, start + 1 + part.height)))
            start += part.height
    except (pa.ArrowException, OSError) as exc:
        raise _unreadable(file, exc) from None
    return rows.finish()
