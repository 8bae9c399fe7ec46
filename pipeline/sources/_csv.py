"""CSV files (a path or glob), wide or long."""

from __future__ import annotations

import csv
import io
from collections.abc import Iterator
from datetime import date
from typing import TYPE_CHECKING, Any, BinaryIO

import numpy as np
import polars as pl

from pipeline.errors import DataError, SourceError
from pipeline.sources._frame import SourceFrame
from pipeline.sources._locate import files_of, open_file
from pipeline.sources._rows import MISSING_MARKERS, LongRows

if TYPE_CHECKING:
    from pipeline.sources._config import SourceConfig

__all__ = ["CHUNK_BYTES", "parse_csv_bytes", "parse_csv_stream", "read_csv", "resolve_glob"]


def resolve_glob(source: SourceConfig) -> list[str]:
    """Files matching the source's `path` (local glob, object store or HTTPS), sorted; SourceError when none match."""
    return files_of(source, suffix=".csv")[0]


#: Bytes of a CSV file parsed at a time: peak memory is the file's validated long rows plus a
#: few times this, whatever the file's size.
CHUNK_BYTES = 4 * 2**20

_BOM = b"\xef\xbb\xbf"
_NL, _CR, _QUOTE = 10, 13, 34


def parse_csv_bytes(data: bytes, *, origin: str, source: SourceConfig, today: date) -> pl.DataFrame:
    """CSV bytes (a download, a demo file) → validated long rows; see `parse_csv_stream`."""
    return parse_csv_stream(io.BytesIO(data), origin=origin, source=source, today=today)


def parse_csv_stream(
    stream: BinaryIO, *, origin: str, source: SourceConfig, today: date, chunk_bytes: int = CHUNK_BYTES
) -> pl.DataFrame:
    """A CSV byte stream → validated long rows, read `chunk_bytes` at a time.

    The header follows CSV quoting rules (``"e""f"`` is the name ``e"f``). Every record must have
    the header's number of fields: a short row (a file cut mid-write) or a long one is an error
    naming the line, never a value. Each chunk's numbers are parsed by the CSV reader (fast); if a
    cell does not parse, the chunk is read again as text so the error names the line, the series
    and the value.
    """
    records = _Records(stream, origin=origin, delimiter=source.delimiter, chunk_bytes=chunk_bytes)
    names = records.header()
    rows = LongRows(origin=origin, source=source, today=today)
    rows.check_header(names)
    for body, lines in records.chunks(len(names)):
        rows.add(_parse_chunk(body, names, source=source, origin=origin), lines=lines)
    if rows.rows == 0:
        msg = f"{origin}: has a header but no data rows; check the export that wrote it"
        raise SourceError(msg)
    return rows.finish()


class _Records:
    """Cuts a CSV stream at record boundaries (newlines outside quotes) into chunks of about `chunk_bytes`."""

    def __init__(self, stream: BinaryIO, *, origin: str, delimiter: str, chunk_bytes: int) -> None:
        self.stream, self.origin, self.size = stream, origin, max(int(chunk_bytes), 1)
        self.delimiter = delimiter.encode()
        self.buf = b""  # unread bytes, starting at a record boundary
        self.offset = 0  # file offset of buf[0]
        self.line = 1  # line number of buf[0]
        self.eof = False

    def _fill(self) -> None:
        block = self.stream.read(self.size)
        if not block:
            self.eof = True
        else:
            self.buf += block

    def _take(self, *, first: bool = False) -> bytes | None:
        """The next chunk of whole records (the first record only when `first`); None at the end."""
        while True:
            if not self.eof and (first or len(self.buf) < self.size):
                self._fill()
            cut = _first_boundary(self.buf) if first else _last_boundary(self.buf)
            if cut is None and self.eof:
                cut = len(self.buf)
            if cut is not None and cut > 0:
                break
            if self.eof:
                return None
            if not first:
                self._fill()
        out, self.buf = self.buf[:cut], self.buf[cut:]
        return out

    def _advance(self, body: bytes) -> tuple[int, int]:
        line, offset = self.line, self.offset
        self.line += body.count(b"\n")
        self.offset += len(body)
        return line, offset

    def _decode_check(self, body: bytes, line: int, offset: int) -> None:
        try:
            body.decode("utf-8")
        except UnicodeDecodeError as exc:
            at = line + body[: exc.start].count(b"\n")
            msg = (
                f"{self.origin}, line {at}: not UTF-8 (byte 0x{body[exc.start]:02x} at offset "
                f"{offset + exc.start}); re-save the file as UTF-8"
            )
            raise SourceError(msg) from None

    def header(self) -> list[str]:
        """Column names of the first record, unquoted by CSV rules."""
        while not self.eof and len(self.buf) < len(_BOM):
            self._fill()
        if self.buf.startswith(_BOM):
            self.buf, self.offset = self.buf[len(_BOM) :], len(_BOM)
        if not self.buf.strip() and self._at_end():
            msg = f"{self.origin}: the file is empty; check the export that wrote it"
            raise SourceError(msg)
        body = self._take(first=True) or b""
        line, offset = self._advance(body)
        self._decode_check(body, line, offset)
        text = body.decode("utf-8").rstrip("\r\n")
        return next(csv.reader([text], delimiter=self.delimiter.decode(), strict=False), [])

    def _at_end(self) -> bool:
        while not self.eof and not self.buf.strip():
            self._fill()
        return not self.buf.strip()

    def chunks(self, fields: int) -> Iterator[tuple[bytes, pl.Series]]:
        """(records, their line numbers) per chunk; a record without `fields` fields is an error."""
        while (body := self._take()) is not None:
            line, offset = self._advance(body)
            self._decode_check(body, line, offset)
            starts, ends, counts, lines = _record_bounds(body, self.delimiter[0])
            bad = np.flatnonzero(counts != fields)
            if bad.size:
                i = int(bad[0])
                raw = body[starts[i] : ends[i]].rstrip(b"\r")
                shown = f"({raw.decode('utf-8')[:80]!r})" if raw else "(an empty line)"
                k = int(counts[i])
                msg = (
                    f"{self.origin}, line {line + int(lines[i])}: {k} field{'' if k == 1 else 's'} where the header "
                    f"has {fields} {shown}; the row is truncated or damaged — fix the row or remove it"
                )
                raise DataError(msg)
            if starts.size:
                yield body, pl.Series("line", lines + line, dtype=pl.Int64)


def _inside_quotes(arr: np.ndarray) -> np.ndarray:
    """True where a byte lies inside a quoted field (after an odd number of quote characters)."""
    return np.logical_xor.accumulate(arr == _QUOTE)


def _first_boundary(buf: bytes) -> int | None:
    """End (just past the newline) of the first record, None when it is not complete."""
    if b'"' not in buf:
        at = buf.find(b"\n")
        return None if at < 0 else at + 1
    arr = np.frombuffer(buf, np.uint8)
    nl = np.flatnonzero((arr == _NL) & ~_inside_quotes(arr))
    return int(nl[0]) + 1 if nl.size else None


def _last_boundary(buf: bytes) -> int | None:
    """End (just past the newline) of the last complete record, None when there is none."""
    if b'"' not in buf:
        at = buf.rfind(b"\n")
        return None if at < 0 else at + 1
    arr = np.frombuffer(buf, np.uint8)
    nl = np.flatnonzero((arr == _NL) & ~_inside_quotes(arr))
    return int(nl[-1]) + 1 if nl.size else None


def _record_bounds(body: bytes, delimiter: int) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Per record of `body`: start, end (exclusive, before the newline), number of fields, and the
    number of line breaks before it (its line, counted from the chunk's first)."""
    arr = np.frombuffer(body, np.uint8)
    newlines = np.flatnonzero(arr == _NL)
    if b'"' in body:
        inside = _inside_quotes(arr)
        ends = newlines[~inside[newlines]]
        delims = np.flatnonzero((arr == delimiter) & ~inside)
        del inside
    else:
        ends = newlines
        delims = np.flatnonzero(arr == delimiter)
    starts = np.concatenate(([0], ends + 1))
    ends = np.concatenate((ends, [arr.size]))
    if starts[-1] == arr.size:  # the body ends with a newline: no record after it
        starts, ends = starts[:-1], ends[:-1]
    counts = np.searchsorted(delims, ends) - np.searchsorted(delims, starts) + 1
    return starts, ends, counts, np.searchsorted(newlines, starts)


def _parse_chunk(body: bytes, names: list[str], *, source: SourceConfig, origin: str) -> pl.DataFrame:
    """One chunk of records (no header) → a table with the header's names.

    Fast path: value columns parsed as Float64 by the CSV reader (missing markers → null). When a
    cell does not parse (text, padded numbers), every cell is read as text and the row checks name
    the exact cell.
    """
    if source.layout == "wide":
        numeric = {c for c in names if c.strip() != source.date_column}
    else:
        numeric = {c for c in names if c.strip() == source.value_column}
    common: dict[str, Any] = {"separator": source.delimiter, "has_header": False, "quote_char": '"'}
    try:
        return pl.read_csv(
            body, schema={c: pl.Float64 if c in numeric else pl.String for c in names},
            null_values=list(MISSING_MARKERS), **common,
        )  # fmt: skip
    except pl.exceptions.PolarsError:
        pass
    try:
        return pl.read_csv(body, schema=dict.fromkeys(names, pl.String), **common)
    except pl.exceptions.PolarsError as exc:
        first = " ".join(str(exc).split())[:300]
        msg = f"{origin}: not a readable CSV ({first}); check the delimiter and that every row has the header's columns"
        raise SourceError(msg) from None


def read_csv(source: SourceConfig, *, today: date) -> SourceFrame:
    """Read every file matching the path (local, object store or HTTPS); rows of all files are validated and combined."""
    frames = []
    files = resolve_glob(source)
    for file in files:
        with open_file(source, file) as stream:
            frames.append(parse_csv_stream(stream, origin=file, source=source, today=today))
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
            msg = (
                f"series {row['series']!r} on {row['date']} has value {row['value'][0]!r} in "
                f"{row['_origin'][0]} and {row['value'][1]!r} in {row['_origin'][1]}; keep one of the files' rows"
            )
            raise DataError(msg)
    return tagged.drop("_origin").unique(subset=["series", "date"], keep="first").sort("series", "date")
