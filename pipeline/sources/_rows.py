"""Turn one raw table (wide or long) into validated long rows (series, date, value).

Every adapter ends here, so every source obeys the same rules. Errors name the origin (file, URL or
query), the line (CSV) or row, the series and the fix, in one line.

Cleaning rules (documented in the README, applied silently):

- empty cells and the markers ``NA``, ``N/A``, ``#N/A``, ``NaN``, ``nan``, ``null``, ``NULL``, ``.``,
  ``-`` are missing values: the row (series × date) is simply absent;
- surrounding spaces in cells and headers are stripped;
- rows are sorted by series and date (input order does not matter);
- an exact duplicate (same series, date and value) is kept once.

Everything else that is wrong is an error: a date that does not match ``date_format`` (mixed formats),
a timestamp with a time zone or a time of day, a date after ``today``, a non-numeric value, ±inf,
a magnitude at or above ``MAX_ABS_VALUE`` (an overflow or fill-in marker such as 1e308), two different
values for the same series and date, a series column with no values at all.
"""

from __future__ import annotations

import itertools
import re
from datetime import date
from typing import TYPE_CHECKING

import polars as pl

from pipeline._polars import date_bounds, first_true
from pipeline.errors import DataError, SourceError

if TYPE_CHECKING:
    from pipeline.sources._config import SourceConfig

__all__ = ["CHUNK_CELLS", "LONG_SCHEMA", "MAX_ABS_VALUE", "MISSING_MARKERS", "LongRows", "from_table"]

#: The long frame every adapter returns. Series names are Categorical: a name is stored once, and
#: each row holds a 4-byte code (a large wide file's rows would otherwise repeat the name per cell).
LONG_SCHEMA = {"series": pl.Categorical, "date": pl.Date, "value": pl.Float64}

#: Values whose magnitude reaches this are refused as overflow or fill-in markers (e.g. 1e308).
#: Real price and macro levels stay far below (a 25-trillion GDP is 2.5e13).
MAX_ABS_VALUE = 1e15

#: Cells per part when a source that is not CSV (Parquet, a query result) is read in slices.
CHUNK_CELLS = 500_000

MISSING_MARKERS = ("", "NA", "N/A", "#N/A", "NaN", "nan", "NAN", "null", "NULL", "None", ".", "-")

_TZ_PATTERN = re.compile(r"(?:\d[T ]\d{1,2}:\d{2}(?::\d{2}(?:\.\d+)?)?)\s*(?:Z|[+-]\d{2}:?\d{2}|[A-Z]{3,4})$")
_TIME_PATTERN = re.compile(r"\d[T ]\d{1,2}:\d{2}")


def _where(origin: str, line: int | None) -> str:
    return f"{origin}, line {line}" if line is not None else origin


def _line(lines: pl.Series | None, index: int) -> int | None:
    return None if lines is None else int(lines[index])


def _parse_dates(
    raw: pl.Series, *, origin: str, column: str, date_format: str, lines: pl.Series | None, others: bool = False
) -> pl.Series:
    """Dates from a column of any type; errors name the first bad row.

    others: dates of earlier parts of the same file parsed (a later mismatch is a mixed format).
    """
    dtype = raw.dtype
    if dtype == pl.Date:
        out = raw
    elif isinstance(dtype, pl.Datetime):
        if dtype.time_zone is not None:
            msg = (
                f"{origin}: column {column!r} holds timestamps with time zone {dtype.time_zone!r}; "
                "shockflow stores calendar dates — convert to dates in the source (e.g. CAST(ts AS DATE))"
            )
            raise DataError(msg)
        bad = (raw.dt.truncate("1d") != raw).fill_null(False)
        if bad.any():
            i = first_true(bad)
            msg = (
                f"{_where(origin, _line(lines, i))}: {column!r} is {raw[i]} with a time of day; "
                "shockflow stores calendar dates — give one value per date"
            )
            raise DataError(msg)
        out = raw.dt.date()
    elif dtype == pl.String:
        text = raw.str.strip_chars()
        out = text.str.strptime(pl.Date, date_format, strict=False, exact=True)
        bad = out.is_null() & text.is_not_null()
        if bad.any():
            i = first_true(bad)
            value = text[i]
            where = _where(origin, _line(lines, i))
            if value == "":
                msg = f"{where}: the date in column {column!r} is empty; every row needs a date"
            elif _TZ_PATTERN.search(value):
                msg = (
                    f"{where}: date {value!r} is a timestamp with a time zone; shockflow stores "
                    f"calendar dates — write plain dates in the format {date_format!r}"
                )
            elif _TIME_PATTERN.search(value):
                msg = (
                    f"{where}: date {value!r} has a time of day; write plain dates in the format "
                    f"{date_format!r} (or set date_format to match, e.g. '%Y-%m-%d %H:%M:%S')"
                )
            elif others or out.is_not_null().any():
                msg = (
                    f"{where}: date {value!r} does not match date_format {date_format!r} that other "
                    "rows use (mixed date formats); write every date the same way"
                )
            else:
                msg = (
                    f"{where}: date {value!r} does not match date_format {date_format!r}; "
                    "set `date_format` of this source to the file's format (strftime codes)"
                )
            raise DataError(msg)
    else:
        msg = f"{origin}: date column {column!r} has type {dtype}; give it dates or text in date_format"
        raise DataError(msg)
    missing = out.is_null()
    if missing.any():
        i = first_true(missing)
        msg = f"{_where(origin, _line(lines, i))}: the date in column {column!r} is empty; every row needs a date"
        raise DataError(msg)
    return out


def _parse_values(
    raw: pl.Series, *, origin: str, series: pl.Series | str, lines: pl.Series | None
) -> pl.Series:
    """Float64 values; missing markers → null; errors for text, ±inf and overflow markers."""
    if raw.dtype == pl.String:
        stripped = raw.str.strip_chars()
        text = pl.select(
            pl.when(stripped.is_in(list(MISSING_MARKERS))).then(pl.lit(None, pl.String)).otherwise(stripped)
        ).to_series()
        values = text.cast(pl.Float64, strict=False)
        bad = values.is_null() & text.is_not_null()
        if bad.any():
            i = first_true(bad)
            name = series if isinstance(series, str) else series[i]
            msg = (
                f"{_where(origin, _line(lines, i))}: value {text[i]!r} of series {name!r} is not a "
                "number; fix the cell, or leave it empty (or NA) for a missing value"
            )
            raise DataError(msg)
    elif raw.dtype.is_numeric() or raw.dtype == pl.Null:
        values = raw.cast(pl.Float64)
        values = values.fill_nan(None)
    else:
        name = series if isinstance(series, str) else "values"
        msg = f"{origin}: column for {name!r} has type {raw.dtype}; give it numbers"
        raise DataError(msg)
    bad = (values.abs() >= MAX_ABS_VALUE).fill_null(False)
    if bad.any():
        i = first_true(bad)
        name = series if isinstance(series, str) else series[i]
        v = values[i]
        kind = "infinite" if v in (float("inf"), float("-inf")) else f"at or above ±{MAX_ABS_VALUE:g} in magnitude"
        msg = (
            f"{_where(origin, _line(lines, i))}: value {v!r} of series {name!r} is {kind} "
            "(an overflow or fill-in marker); fix the source or leave the cell empty"
        )
        raise DataError(msg)
    return values


def _require_columns(df: pl.DataFrame, names: list[str], *, origin: str, source: SourceConfig) -> None:
    import difflib

    for name in names:
        if name in df.columns:
            continue
        header = df.columns
        if len(header) == 1:
            for sep in (";", "\t", "|", ","):
                if sep != source.delimiter and sep in header[0]:
                    shown = "\\t" if sep == "\t" else sep
                    msg = (
                        f"{origin}: the header {header[0]!r} looks {shown!r}-delimited but the source "
                        f"reads {source.delimiter!r}; set `delimiter = \"{shown}\"` for source {source.name!r}"
                    )
                    raise SourceError(msg)
        close = difflib.get_close_matches(name, header, n=1)
        hint = f" (did you mean {close[0]!r}?)" if close else ""
        msg = (
            f"{origin}: no column {name!r}{hint}; columns are {', '.join(map(repr, header[:12]))}"
            f"{' …' if len(header) > 12 else ''} — set the source's column keys to match"
        )
        raise SourceError(msg)


def _values_frame(vals: pl.DataFrame, *, origin: str, lines: pl.Series | None, whole: bool = True) -> pl.DataFrame:
    """All value columns of a wide table → Float64 in one pass; errors name the first bad cell."""
    markers = list(MISSING_MARKERS)
    exprs = []
    for name, dtype in vals.schema.items():
        col = pl.col(name)
        if dtype == pl.String:
            text = col.str.strip_chars()
            exprs.append(pl.when(text.is_in(markers)).then(None).otherwise(text).cast(pl.Float64, strict=False).alias(name))
        elif dtype.is_numeric() or dtype == pl.Null:
            exprs.append(col.cast(pl.Float64).fill_nan(None).alias(name))
        else:
            msg = f"{origin}: column {name!r} has type {dtype}; give it numbers"
            raise DataError(msg)
    floats = vals.select(exprs)
    # a text cell that is neither a number nor a missing marker: find the first, report it
    text_cols = [n for n, d in vals.schema.items() if d == pl.String]
    if text_cols:
        lost = vals.select(
            [(floats[n].is_null() & vals[n].is_not_null() & ~vals[n].str.strip_chars().is_in(markers)).alias(n) for n in text_cols]
        )
        if lost.select(pl.any_horizontal(pl.all()).any()).item():
            for n in text_cols:
                _parse_values(vals[n], origin=origin, series=n, lines=lines)  # raises with line and value
    huge = floats.select(pl.any_horizontal((pl.all().abs() >= MAX_ABS_VALUE).fill_null(False)).any()).item()
    if huge:
        for n in floats.columns:
            _parse_values(floats[n], origin=origin, series=n, lines=lines)  # raises with line and value
    if whole:
        counts = floats.null_count().row(0, named=True)
        for n, missing in counts.items():
            if missing == floats.height:
                _no_values(origin, n)
    return floats


def _no_values(origin: str, column: str) -> None:
    msg = f"{origin}: column {column!r} has no values (all missing); remove the column or fill it"
    raise DataError(msg)


class LongRows:
    """Validated long rows of one table that arrives in parts (chunks of a file, in file order).

    `add` checks one part — dates, values, future dates and duplicates inside the part — and keeps
    its long rows; `finish` runs the checks that need the whole table (a column or series without
    any value, a series and date repeated in two parts) and returns the rows sorted by series and
    date. A large file is thus never held whole, only its validated long rows. `from_table` is the
    one-part case, so every source obeys the same checks and messages.
    """

    def __init__(self, *, origin: str, source: SourceConfig, today: date) -> None:
        self.origin, self.source, self.today = origin, source, today
        self.wide = source.layout == "wide"
        self.columns: list[str] | None = None  # stripped header
        self.parts: list[pl.DataFrame] = []  # wide: validated long rows; long: checked rows with _line
        self.keys: list[pl.DataFrame] = []  # wide: each part's (date, _line), for repeats across parts
        self.named: set[str] = set()  # long: every series name seen
        self.with_values: set[str] = set()  # columns (wide) / series (long) with at least one value
        self.rows = 0  # input rows added

    def check_header(self, columns: list[str]) -> None:
        """The required columns are present (before any row is read)."""
        names = [c.strip() for c in columns]
        seen: set[str] = set()
        for name in names:
            if name in seen:
                msg = f"{self.origin}: column {name!r} appears twice in the header; give every column its own name"
                raise SourceError(msg)
            seen.add(name)
        src = self.source
        required = [src.date_column] if self.wide else [src.date_column, src.series_column, src.value_column]
        _require_columns(pl.DataFrame(schema=dict.fromkeys(names, pl.String)), required, origin=self.origin, source=src)
        if self.wide and len(names) < 2:
            msg = f"{self.origin}: only the date column {src.date_column!r} is present; add one column per series"
            raise SourceError(msg)
        self.columns = names

    def add(self, df: pl.DataFrame, *, lines: pl.Series | None) -> None:
        """Check one part; `lines` numbers its rows in the file (None: no line numbers)."""
        if self.columns is None:
            self.check_header(df.columns)
        df = df.rename({c: c.strip() for c in df.columns})
        if df.height == 0:
            return
        (self._add_wide if self.wide else self._add_long)(df, lines)
        self.rows += df.height

    def _add_wide(self, df: pl.DataFrame, lines: pl.Series | None) -> None:
        src = self.source
        value_columns = [c for c in df.columns if c != src.date_column]
        dates = _parse_dates(
            df[src.date_column], origin=self.origin, column=src.date_column, date_format=src.date_format,
            lines=lines, others=self.rows > 0,
        )  # fmt: skip
        floats = _values_frame(df.select(value_columns), origin=self.origin, lines=lines, whole=False)
        missing = floats.null_count().row(0, named=True)
        self.with_values.update(n for n, m in missing.items() if m < floats.height)
        wide = floats.with_columns(dates.alias("date"))
        if lines is not None:
            wide = wide.with_columns(lines.alias("_line"))
        repeated = bool(dates.is_duplicated().any())
        wide = wide.sort("date")
        index = ["date", *(["_line"] if lines is not None else [])]
        long = wide.unpivot(on=value_columns, index=index, variable_name="series", value_name="value").drop_nulls("value")
        del wide, floats
        # one column per series: duplicates inside the part can only come from a repeated date
        self.parts.append(_finish(long, origin=self.origin, today=self.today, check_duplicates=repeated, presorted=True))
        self.keys.append(pl.DataFrame({"date": dates, "_line": lines if lines is not None else pl.Series([None] * len(dates), dtype=pl.Int64)}))

    def _add_long(self, df: pl.DataFrame, lines: pl.Series | None) -> None:
        src, origin = self.source, self.origin
        series = df[src.series_column].cast(pl.String).str.strip_chars()
        empty = series.is_null() | (series == "")
        if empty.any():
            i = first_true(empty)
            msg = f"{_where(origin, _line(lines, i))}: the series name in column {src.series_column!r} is empty; name every row's series"
            raise DataError(msg)
        dates = _parse_dates(
            df[src.date_column], origin=origin, column=src.date_column, date_format=src.date_format,
            lines=lines, others=self.rows > 0,
        )  # fmt: skip
        values = _parse_values(df[src.value_column], origin=origin, series=series, lines=lines)
        long = pl.DataFrame({"date": dates, "series": series.cast(pl.Categorical), "value": values})
        if lines is not None:
            long = long.with_columns(lines.cast(pl.Int32).alias("_line"))
        present = long.group_by("series").agg(pl.col("value").is_not_null().any().alias("any"))
        self.named.update(present["series"].to_list())
        self.with_values.update(present.filter(pl.col("any"))["series"].to_list())
        self.parts.append(long.drop_nulls("value"))

    def finish(self) -> pl.DataFrame:
        """The whole table's checks; long rows (series, date, value) sorted by series and date."""
        origin = self.origin
        if not self.wide:
            if self.named - self.with_values:
                name = sorted(self.named - self.with_values)[0]
                msg = f"{origin}: series {name!r} has no values (all missing); remove its rows or fill them"
                raise DataError(msg)
            long = self.parts[0] if len(self.parts) == 1 else pl.concat(self.parts)
            self.parts.clear()
            return _finish(long, origin=origin, today=self.today)
        assert self.columns is not None
        for name in self.columns:
            if name != self.source.date_column and name not in self.with_values:
                _no_values(origin, name)
        parts, self.parts = self.parts, []
        if len(parts) > 1:
            parts = self._merge_repeated_dates(parts)
        return _series_major(parts)

    def _merge_repeated_dates(self, parts: list[pl.DataFrame]) -> list[pl.DataFrame]:
        """A date in two parts: its rows are checked together (conflicts named with both lines)."""
        keys = pl.concat([k.with_columns(pl.lit(i, pl.UInt32).alias("_part")) for i, k in enumerate(self.keys)])
        counts = keys.group_by("date").agg(pl.col("_part").n_unique().alias("parts"))
        repeated = counts.filter(pl.col("parts") > 1)["date"]
        if repeated.is_empty():
            return parts
        candidates = []
        for i, part in enumerate(parts):
            hit = pl.col("date").is_in(repeated.implode())
            first_line = self.keys[i].filter(hit).unique("date", keep="first", maintain_order=True)
            candidates.append(part.filter(hit).join(first_line, on="date", how="left"))
            parts[i] = part.filter(~hit)
        merged = _finish(pl.concat(candidates), origin=self.origin, today=self.today)
        return [*parts, merged]


def _series_major(parts: list[pl.DataFrame]) -> pl.DataFrame:
    """Parts whose rows are grouped by series (dates ascending in each) → one frame sorted by series, date.

    When the parts cover disjoint date ranges (any file sorted by date, either way), the result is
    assembled from slices of the parts without copying them; otherwise it is sorted whole.
    """
    parts = [p for p in parts if p.height]
    if not parts:
        return pl.DataFrame(schema=LONG_SCHEMA)
    spans = sorted((*date_bounds(p["date"]), i) for i, p in enumerate(parts))
    disjoint = all(a[1] < b[0] for a, b in itertools.pairwise(spans))
    if not disjoint:
        return pl.concat(parts).sort("series", "date")
    slices: dict[str, list[pl.DataFrame]] = {}
    for _, _, i in spans:
        part = parts[i]
        runs = part.group_by("series", maintain_order=True).len()
        offset = 0
        for name, n in runs.iter_rows():
            slices.setdefault(name, []).append(part.slice(offset, n))
            offset += n
    return pl.concat([s for name in sorted(slices) for s in slices[name]], rechunk=False)


def from_table(
    df: pl.DataFrame, *, origin: str, source: SourceConfig, today: date, first_line: int | None = 2
) -> pl.DataFrame:
    """A whole table (wide or long, per the source's layout) → validated long rows."""
    if df.height == 0:
        msg = f"{origin}: has a header but no data rows; check the export that wrote it"
        raise SourceError(msg)
    rows = LongRows(origin=origin, source=source, today=today)
    lines = pl.Series("line", range(first_line, first_line + df.height)) if first_line is not None else None
    rows.add(df, lines=lines)
    return rows.finish()


def _finish(
    long: pl.DataFrame, *, origin: str, today: date, check_duplicates: bool = True, presorted: bool = False
) -> pl.DataFrame:
    """Future dates, conflicting duplicates, exact duplicates, sorting.

    presorted: rows are already grouped by series with dates ascending (wide input), so the final
    sort is skipped.
    """
    has_line = "_line" in long.columns
    future = long.filter(pl.col("date") > today)
    if future.height:
        row = future.sort("date", descending=True).row(0, named=True)
        where = _where(origin, row["_line"] if has_line else None)
        msg = (
            f"{where}: date {row['date']} of series {row['series']!r} is after today ({today}); "
            "fix the date (a typo or a forecast in the source)"
        )
        raise DataError(msg)
    duplicated = long.select(pl.struct("series", "date").is_duplicated()).to_series() if check_duplicates else None
    if duplicated is not None and duplicated.any():
        dupes = long.filter(duplicated)
        counts = dupes.group_by("series", "date").agg(
            pl.col("value").n_unique().alias("distinct"),
            pl.col("value").alias("values"),
            *([pl.col("_line").alias("lines")] if has_line else []),
        )
        conflicts = counts.filter(pl.col("distinct") > 1)
        if conflicts.height:
            row = conflicts.sort("series", "date").row(0, named=True)
            vals = ", ".join(repr(v) for v in row["values"][:3])
            lines = f" (lines {', '.join(str(x) for x in sorted(row['lines'])[:3])})" if has_line else ""
            msg = (
                f"{origin}: series {row['series']!r} has {len(row['values'])} different values for "
                f"{row['date']}{lines}: {vals}; keep one row per series and date"
            )
            raise DataError(msg)
        long = long.unique(subset=["series", "date"], keep="first", maintain_order=True)
    out = long.select(pl.col("series").cast(pl.Categorical), pl.col("date").cast(pl.Date), pl.col("value").cast(pl.Float64))
    return out if presorted else out.sort("series", "date")
