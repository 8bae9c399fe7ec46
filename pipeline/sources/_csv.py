"""CSV files (a path or glob), wide or long."""

from __future__ import annotations

import glob
from datetime import date
from pathlib import Path
from typing import TYPE_CHECKING

import polars as pl

from pipeline.errors import SourceError
from pipeline.sources._frame import SourceFrame
from pipeline.sources._rows import MISSING_MARKERS, from_table

if TYPE_CHECKING:
    from pipeline.sources._config import SourceConfig

__all__ = ["parse_csv_bytes", "read_csv", "resolve_glob"]


def resolve_glob(source: SourceConfig) -> list[str]:
    """Files matching the source's `path` glob, sorted; SourceError when none match."""
    assert source.path is not None
    files = sorted(f for f in glob.glob(source.path, recursive=True) if Path(f).is_file())
    if not files:
        msg = (
            f"source {source.name!r}: no file matches path {source.path!r}; check the path "
            "(relative paths start at the config file's folder)"
        )
        raise SourceError(msg)
    return files


def parse_csv_bytes(data: bytes, *, origin: str, source: SourceConfig, today: date) -> pl.DataFrame:
    """CSV bytes → validated long rows.

    Numbers are parsed by the CSV reader (fast); if any cell does not parse, the file is read again
    as text and checked cell by cell, so the error names the line, the series and the value.
    """
    if not data.strip():
        msg = f"{origin}: the file is empty; check the export that wrote it"
        raise SourceError(msg)
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = data[: exc.start].count(b"\n") + 1
        msg = (
            f"{origin}, line {line}: not UTF-8 (byte 0x{data[exc.start]:02x} at offset {exc.start}); "
            "re-save the file as UTF-8"
        )
        raise SourceError(msg) from None
    raw = text.encode() if data.startswith(b"\xef\xbb\xbf") else data
    df = _read_typed(raw, source)
    if df is None:  # some cell is not a plain number: read everything as text for exact errors
        try:
            df = pl.read_csv(raw, separator=source.delimiter, infer_schema=False, has_header=True)
        except pl.exceptions.PolarsError as exc:
            first = " ".join(str(exc).split())[:300]
            msg = f"{origin}: not a readable CSV ({first}); check the delimiter and that every row has the header's columns"
            raise SourceError(msg) from None
    return from_table(df, origin=origin, source=source, today=today)


def _read_typed(data: bytes, source: SourceConfig) -> pl.DataFrame | None:
    """Fast path: value columns parsed as Float64 by the CSV reader (missing markers → null).

    Returns None when any cell does not parse (text, padded numbers, a ragged row); the caller
    then reads every cell as text and the row checks name the exact cell.
    """
    try:
        header = pl.read_csv(data, separator=source.delimiter, n_rows=0, infer_schema=False).columns
    except pl.exceptions.PolarsError:
        return None
    if source.layout == "wide":
        numeric = [c for c in header if c.strip() != source.date_column]
    else:
        numeric = [c for c in header if c.strip() == source.value_column]
    try:
        return pl.read_csv(
            data,
            separator=source.delimiter,
            infer_schema=False,
            has_header=True,
            schema_overrides={c: pl.Float64 for c in numeric},
            null_values=list(MISSING_MARKERS),
        )
    except pl.exceptions.PolarsError:
        return None


def read_csv(source: SourceConfig, *, today: date) -> SourceFrame:
    """Read every file matching the glob; rows of all files are validated and combined."""
    frames = []
    files = resolve_glob(source)
    for file in files:
        try:
            data = Path(file).read_bytes()
        except OSError as exc:
            msg = f"{file}: cannot be read ({exc.strerror}); check permissions"
            raise SourceError(msg) from None
        frames.append(parse_csv_bytes(data, origin=file, source=source, today=today))
    return SourceFrame(source=source.name, frame=combine(frames, origins=files), origins=tuple(files))


def combine(frames: list[pl.DataFrame], *, origins: list[str]) -> pl.DataFrame:
    """Concatenate per-file frames; the same series × date with two values across files is an error."""
    if len(frames) == 1:
        return frames[0]
    tagged = pl.concat([f.with_columns(pl.lit(o).alias("_origin")) for f, o in zip(frames, origins, strict=True)])
    dup = tagged.select(pl.struct("series", "date").is_duplicated()).to_series()
    if dup.any():
        clash = (
            tagged.filter(dup)
            .group_by("series", "date")
            .agg(pl.col("value").n_unique().alias("distinct"), pl.col("_origin"), pl.col("value"))
            .filter(pl.col("distinct") > 1)
            .sort("series", "date")
        )
        if clash.height:
            row = clash.row(0, named=True)
            from pipeline.errors import DataError

            msg = (
                f"series {row['series']!r} on {row['date']} has value {row['value'][0]!r} in "
                f"{row['_origin'][0]} and {row['value'][1]!r} in {row['_origin'][1]}; keep one of the files' rows"
            )
            raise DataError(msg)
    return tagged.drop("_origin").unique(subset=["series", "date"], keep="first").sort("series", "date")
