"""Excel workbooks (.xlsx, .xlsm): a sheet, a cell range or a named table, wide or long.

Read with openpyxl (pure Python, reads sheets, ranges, defined names and named tables, and writes
workbooks for the tests). The workbook may be local, on an object store or at an https address
(see :mod:`pipeline.sources._locate`).

What is read: `table` (a named table, or a defined name pointing at one range) or else `sheet`
(default: the first) restricted to `range` (default: the used part of the sheet). Row
`header_row` of that block (1 = its first row) holds the column names; rows above it are skipped.
Rows with no value in any cell are skipped (blank separator rows); columns with neither a name nor
any value are dropped (formatted but empty cells). Cells formatted as dates arrive as dates; text
dates follow `date_format`. Errors name the workbook, the sheet and the worksheet row (as
"line"), the series and the fix.
"""

from __future__ import annotations

import io
import zipfile
from collections.abc import Iterator
from datetime import date, datetime
from typing import TYPE_CHECKING, Any

import polars as pl

from pipeline.errors import SourceError
from pipeline.sources._csv import combine
from pipeline.sources._frame import SourceFrame
from pipeline.sources._locate import files_of, open_file
from pipeline.sources._rows import CHUNK_CELLS, LongRows

if TYPE_CHECKING:
    from pipeline.sources._config import SourceConfig

__all__ = ["read_excel"]


def read_excel(source: SourceConfig, *, today: date) -> SourceFrame:
    """Read the sheet, range or table of every workbook the path names."""
    files, _ = files_of(source, suffix=".xlsx")
    frames = [_read_book(file, source=source, today=today) for file in files]
    return SourceFrame(source=source.name, frame=combine(frames, origins=files), origins=tuple(files))


def _load(file: str, data: bytes, *, source: SourceConfig, read_only: bool) -> Any:
    import openpyxl

    try:
        return openpyxl.load_workbook(io.BytesIO(data), read_only=read_only, data_only=True)
    except (zipfile.BadZipFile, KeyError, ValueError, OSError) as exc:
        first = " ".join(str(exc).split())[:200]
        msg = f"source {source.name!r}: {file} is not a readable .xlsx workbook ({first}); save it as .xlsx (Excel 2007+) and check `path`"
        raise SourceError(msg) from None


def _block(book: Any, file: str, source: SourceConfig) -> tuple[Any, str, dict[str, int]]:
    """The worksheet, its label for messages, and iter_rows bounds of the block to read."""
    from openpyxl.utils.cell import range_boundaries

    if source.table is not None:
        for ws in book.worksheets:
            if source.table in ws.tables:
                ref = ws.tables[source.table].ref
                lo_c, lo_r, hi_c, hi_r = range_boundaries(ref)
                return ws, f"{file}, table {source.table!r} (sheet {ws.title!r})", {
                    "min_row": lo_r, "max_row": hi_r, "min_col": lo_c, "max_col": hi_c,
                }  # fmt: skip
        defined = book.defined_names.get(source.table)
        if defined is not None:
            dests = list(defined.destinations)
            if len(dests) == 1 and dests[0][0] in book.sheetnames:
                title, ref = dests[0]
                lo_c, lo_r, hi_c, hi_r = range_boundaries(ref.replace("$", ""))
                ws = book[title]
                return ws, f"{file}, name {source.table!r} (sheet {title!r})", {
                    "min_row": lo_r, "max_row": hi_r, "min_col": lo_c, "max_col": hi_c,
                }  # fmt: skip
        known = sorted({t for ws in book.worksheets for t in ws.tables} | set(book.defined_names))
        shown = ", ".join(map(repr, known)) or "none"
        msg = f"source {source.name!r}: workbook {file} has no table or defined name {source.table!r} (it has: {shown}); fix `table`"
        raise SourceError(msg)
    if source.sheet is not None and source.sheet not in book.sheetnames:
        import difflib

        close = difflib.get_close_matches(source.sheet, book.sheetnames, n=1)
        hint = f" (did you mean {close[0]!r}?)" if close else ""
        msg = (
            f"source {source.name!r}: workbook {file} has no sheet {source.sheet!r}{hint}; its sheets are "
            f"{', '.join(map(repr, book.sheetnames))} — fix `sheet`"
        )
        raise SourceError(msg)
    ws = book[source.sheet] if source.sheet is not None else book.worksheets[0]
    label = f"{file}, sheet {ws.title!r}"
    if source.range is None:
        return ws, label, {}
    lo_c, lo_r, hi_c, hi_r = range_boundaries(source.range.replace("$", "").upper())
    return ws, f"{label}, range {source.range}", {"min_row": lo_r, "max_row": hi_r, "min_col": lo_c, "max_col": hi_c}


def _column(values: list[Any]) -> pl.Series:
    """One column's cells → a polars Series: dates stay dates, numbers Float64; mixed cells become text."""
    kinds = {type(v) for v in values if v is not None}
    if not kinds:
        return pl.Series(values, dtype=pl.String)
    if kinds <= {int, float}:
        return pl.Series([None if v is None else float(v) for v in values], dtype=pl.Float64)
    if kinds <= {datetime}:
        return pl.Series(values, dtype=pl.Datetime("us"))
    if kinds <= {date}:
        return pl.Series(values, dtype=pl.Date)
    if kinds <= {datetime, date}:
        return pl.Series([v if v is None or isinstance(v, datetime) else datetime(v.year, v.month, v.day) for v in values], dtype=pl.Datetime("us"))
    # text among the cells: numbers as their exact repr, dates in ISO form (checked by date_format)
    return pl.Series([None if v is None else v if isinstance(v, str) else repr(v) if isinstance(v, float) else str(v) for v in values], dtype=pl.String)


def _read_book(file: str, *, source: SourceConfig, today: date) -> pl.DataFrame:
    with open_file(source, file) as stream:
        data = stream.read()
    book = _load(file, data, source=source, read_only=source.table is None)
    try:
        ws, label, bounds = _block(book, file, source)
        first_row = bounds.get("min_row", 1)
        cells = ws.iter_rows(values_only=True, **bounds)
        header: tuple[Any, ...] | None = None
        header_line = first_row + source.header_row - 1
        for offset, row in enumerate(cells):
            if offset == source.header_row - 1:
                header = row
                break
        if header is None or all(v is None for v in header):
            msg = (
                f"source {source.name!r}: {label} has no column names in row {header_line} "
                f"(header_row = {source.header_row}); set `header_row` (1 = the first row read) or `range`/`sheet`"
            )
            raise SourceError(msg)
        origin = f"{label} (line = worksheet row)"
        yield_rows = _data_rows(cells, start=header_line + 1)
        return _validate(header, yield_rows, origin=origin, source=source, today=today)
    finally:
        if hasattr(book, "close"):
            book.close()


def _data_rows(cells: Iterator[tuple[Any, ...]], *, start: int) -> Iterator[tuple[int, tuple[Any, ...]]]:
    for line, row in enumerate(cells, start=start):
        if any(v is not None and not (isinstance(v, str) and not v.strip()) for v in row):
            yield line, row


def _validate(
    header: tuple[Any, ...], data: Iterator[tuple[int, tuple[Any, ...]]], *, origin: str, source: SourceConfig, today: date
) -> pl.DataFrame:
    raw_names = ["" if v is None else str(v).strip() for v in header]
    buffer: list[tuple[int, tuple[Any, ...]]] = list(_take(data, 1))
    keep = list(range(len(raw_names)))
    rows = LongRows(origin=origin, source=source, today=today)
    step = max(CHUNK_CELLS // max(len(raw_names), 1), 1)
    # columns without a name: dropped when empty in every row, an error otherwise
    chunk = buffer + list(_take(data, step - 1))
    try:
        rows.check_header([n for n in raw_names if n != ""])
    except SourceError as exc:
        msg = f"{exc} (or set `header_row`/`range` to the row holding the column names)"
        raise SourceError(msg) from None
    while chunk:
        unnamed = [i for i in keep if raw_names[i] == "" and any(i < len(r) and r[i] is not None for _, r in chunk)]
        if unnamed:
            line, row = next((ln, r) for ln, r in chunk if unnamed[0] < len(r) and r[unnamed[0]] is not None)
            msg = (
                f"{origin}, line {line}: column {unnamed[0] + 1} holds {row[unnamed[0]]!r} but has no name in the "
                "header row; name the column or set `range`/`header_row`"
            )
            raise SourceError(msg)
        named = [i for i in keep if raw_names[i] != ""]
        frame = pl.DataFrame([_column([r[i] if i < len(r) else None for _, r in chunk]).alias(raw_names[i]) for i in named])
        rows.add(frame, lines=pl.Series("line", [ln for ln, _ in chunk], dtype=pl.Int64))
        chunk = list(_take(data, step))
    if rows.rows == 0:
        msg = f"{origin}: has a header but no data rows; check `sheet`, `range` or `header_row`"
        raise SourceError(msg)
    return rows.finish()


def _take(it: Iterator[Any], n: int) -> Iterator[Any]:
    for _ in range(n):
        try:
            yield next(it)
        except StopIteration:
            return
