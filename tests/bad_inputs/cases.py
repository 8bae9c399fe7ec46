"""The corpus: each case writes night 2's bad input into a scenario folder and says what must follow.

A case's `build(night)` writes files (and config) and returns the values its expected message
needs (`file` is filled in for every case: the path of the file the case broke). `pattern` is a
regular expression the whole one-line message must match, written with ``{name}`` placeholders
for those values (each inserted with ``re.escape``).

Outcomes:

- ``source``: the rates source is refused at ingest — nothing of tonight's rates file is stored,
  the batch is recorded `failed` with the message, everything else runs; exit code 2 (partial).
- ``universe``: the rows are stored but universe `universe` cannot be prepared — its run is
  recorded `failed` with the message, its earlier results stay; exit code 2.
- ``accepted``: a documented cleaning rule applies; the night succeeds (exit code 0) and `check`
  verifies the stored rows.
- ``skipped``: the new universe runs, and the windows that cannot be fitted are stored in
  `window_fits` with `skip_reason` matching `pattern`; exit code 0.
"""

from __future__ import annotations

import re
from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import date, timedelta
from typing import Any

import polars as pl

from tests.bad_inputs.night import NIGHT1_ROWS, Night, csv_text, rates, simulate

#: Rows of night 2's rates file (one new business day).
ROWS = NIGHT1_ROWS + 1


@dataclass(frozen=True)
class Case:
    id: str
    build: Callable[[Night], dict[str, Any]]
    outcome: str
    pattern: str
    universe: str = "rates_pair"
    check: Callable[[Night, dict[str, Any]], None] | None = None
    extra: dict[str, Any] = field(default_factory=dict)

    def regex(self, values: dict[str, Any]) -> re.Pattern[str]:
        return re.compile(self.pattern.format(**{k: re.escape(str(v)) for k, v in values.items()}))


def _lines(df: pl.DataFrame) -> list[str]:
    return csv_text(df).splitlines(keepends=True)


def _rates_lines() -> list[str]:
    """Night 2's good rates file as lines: line 1 the header, data row i on line i + 2."""
    return _lines(rates(ROWS))


def _write_rates(night: Night, content: str | bytes, **values: Any) -> dict[str, Any]:
    path = night.write("rates.csv", content)
    return {"file": path, **values}


def _set_cell(lines: list[str], line: int, column: int, text: str) -> list[str]:
    """Replace field `column` (0 = date) of 1-based `line`."""
    out = list(lines)
    cells = out[line - 1].rstrip("\n").split(",")
    cells[column] = text
    out[line - 1] = ",".join(cells) + "\n"
    return out


def _date_of(line: int) -> date:
    return rates(ROWS)["date"][line - 2]


# --------------------------------------------------------------------------------------------
# File cases (the rates file broken on night 2)
# --------------------------------------------------------------------------------------------


def empty(night: Night) -> dict[str, Any]:
    return _write_rates(night, "")


def header_only(night: Night) -> dict[str, Any]:
    return _write_rates(night, _rates_lines()[0])


def not_utf8(night: Night) -> dict[str, Any]:
    # a Latin-1 export: a no-break space as thousands separator on line 57
    text = "".join(_set_cell(_rates_lines(), 57, 1, "1\xa0001.5"))
    return _write_rates(night, text.encode("latin-1"), line=57)


def wrong_delimiter(night: Night) -> dict[str, Any]:
    return _write_rates(night, "".join(_rates_lines()).replace(",", ";"))


def non_numeric(night: Night) -> dict[str, Any]:
    return _write_rates(night, "".join(_set_cell(_rates_lines(), 30, 1, "n.a.")), line=30)


def duplicate_conflict(night: Night) -> dict[str, Any]:
    lines = _rates_lines()
    copy = _set_cell(lines, 41, 2, "123.25")[40]  # line 41's date again, RT_Y different
    return _write_rates(night, "".join([*lines, copy]), day=_date_of(41), first=41, second=len(lines) + 1)


def duplicate_same_value(night: Night) -> dict[str, Any]:
    lines = _rates_lines()
    return _write_rates(night, "".join([*lines, lines[40]]))


def unsorted(night: Night) -> dict[str, Any]:
    lines = _rates_lines()
    body = lines[1:]
    body = body[::2][::-1] + body[1::2]  # every row present once, no order left
    return _write_rates(night, "".join([lines[0], *body]))


def mixed_date_formats(night: Night) -> dict[str, Any]:
    d = _date_of(61)
    text = f"{d:%Y/%m/%d}"
    return _write_rates(night, "".join(_set_cell(_rates_lines(), 61, 0, text)), line=61, text=text)


def time_zone(night: Night) -> dict[str, Any]:
    d = _date_of(62)
    text = f"{d:%Y-%m-%d}T17:30:00+01:00"
    return _write_rates(night, "".join(_set_cell(_rates_lines(), 62, 0, text)), line=62, text=text)


def future_date(night: Night) -> dict[str, Any]:
    lines = _rates_lines()
    day = date.today() + timedelta(days=30)
    row = _set_cell(lines, len(lines), 0, day.isoformat())[-1]
    return _write_rates(night, "".join([*lines, row]), line=len(lines) + 1, day=day, today=date.today())


def truncated_last_line(night: Night) -> dict[str, Any]:
    # the export was cut mid-write: the last line ends inside RT_X's value, no newline, no RT_Y
    lines = _rates_lines()
    last = lines[-1]
    cut = last[: last.index(",") + 4]
    return _write_rates(night, "".join([*lines[:-1], cut]), line=len(lines), text=cut)


def short_row(night: Night) -> dict[str, Any]:
    # line 50 lost its last field (and its separator) in the middle of the file
    lines = _rates_lines()
    cells = lines[49].rstrip("\n").split(",")
    lines[49] = ",".join(cells[:-1]) + "\n"
    return _write_rates(night, "".join(lines), line=50, text=",".join(cells[:-1]))


def zero_price(night: Night) -> dict[str, Any]:
    lines = _rates_lines()
    return _write_rates(night, "".join(_set_cell(lines, len(lines), 1, "0")), day=_date_of(len(lines)))


def negative_price(night: Night) -> dict[str, Any]:
    lines = _rates_lines()
    return _write_rates(night, "".join(_set_cell(lines, len(lines), 2, "-3.5")), day=_date_of(len(lines)))


def all_missing(night: Night) -> dict[str, Any]:
    lines = _rates_lines()
    for i in range(2, len(lines) + 1):
        lines = _set_cell(lines, i, 2, "NA" if i % 2 else "")
    return _write_rates(night, "".join(lines))


def huge(night: Night) -> dict[str, Any]:
    return _write_rates(night, "".join(_set_cell(_rates_lines(), 77, 1, "1e308")), line=77)


def plus_inf(night: Night) -> dict[str, Any]:
    return _write_rates(night, "".join(_set_cell(_rates_lines(), 78, 2, "inf")), line=78)


def minus_inf(night: Night) -> dict[str, Any]:
    return _write_rates(night, "".join(_set_cell(_rates_lines(), 79, 1, "-inf")), line=79)


def _rates_stored_as(night: Night, expected: pl.DataFrame) -> None:
    obs = night.tables()["observations"].filter(pl.col("source") == "rates")
    long = expected.unpivot(index="date", variable_name="series", value_name="value")
    got = obs.select("series", "date", "value").sort("series", "date")
    assert got.equals(long.select("series", "date", "value").sort("series", "date"))


def check_unsorted(night: Night, values: dict[str, Any]) -> None:
    """Accepted and sorted: the stored rows are exactly the sorted file's."""
    _rates_stored_as(night, rates(ROWS))


def check_duplicate_same(night: Night, values: dict[str, Any]) -> None:
    """An exact duplicate line is kept once."""
    _rates_stored_as(night, rates(ROWS))


S = r"'RT_[XY]'"
FILE_CASES = [
    Case("empty-file", empty, "source", r"{file}: the file is empty; check the export that wrote it"),
    Case("header-only", header_only, "source", r"{file}: has a header but no data rows; check the export that wrote it"),
    Case("not-utf8", not_utf8, "source", r"{file}, line {line}: not UTF-8 \(byte 0xa0 at offset \d+\); re-save the file as UTF-8"),
    Case(
        "wrong-delimiter", wrong_delimiter, "source",
        r"{file}: the header 'date;RT_X;RT_Y' looks ';'-delimited but the source reads ','; "
        r"set `delimiter = \";\"` for source 'rates'",
    ),
    Case(
        "non-numeric", non_numeric, "source",
        r"{file}, line {line}: value 'n\.a\.' of series 'RT_X' is not a number; fix the cell, or leave it empty \(or NA\) for a missing value",
    ),
    Case(
        "duplicate-date-conflict", duplicate_conflict, "source",
        r"{file}: series 'RT_Y' has 2 different values for {day} \(lines {first}, {second}\): .*123\.25.*; keep one row per series and date",
    ),
    Case(
        "truncated-last-line", truncated_last_line, "source",
        r"{file}, line {line}: 2 fields where the header has 3 \('{text}'\); the row is truncated or damaged — "
        r"fix the row or remove it",
    ),
    Case(
        "short-row", short_row, "source",
        r"{file}, line {line}: 2 fields where the header has 3 \('{text}'\); the row is truncated or damaged — "
        r"fix the row or remove it",
    ),
    Case("duplicate-date-same-value", duplicate_same_value, "accepted", "", check=check_duplicate_same),
    Case("unsorted-dates", unsorted, "accepted", "", check=check_unsorted),
    Case(
        "mixed-date-formats", mixed_date_formats, "source",
        r"{file}, line {line}: date '{text}' does not match date_format '%Y-%m-%d' that other rows use "
        r"\(mixed date formats\); write every date the same way",
    ),
    Case(
        "timestamp-with-time-zone", time_zone, "source",
        r"{file}, line {line}: date '{text}' is a timestamp with a time zone; shockflow stores calendar "
        r"dates — write plain dates in the format '%Y-%m-%d'",
    ),
    Case(
        "future-date", future_date, "source",
        r"{file}, line {line}: date {day} of series " + S + r" is after today \({today}\); fix the date \(a typo or a forecast in the source\)",
    ),
    Case(
        "zero-price-log", zero_price, "universe",
        r"universe 'rates_pair': series 'RT_X' is 0\.0 on {day}; transform 'log_return' needs positive levels — "
        r"use transform 'diff' or 'pct_change' for a series that can be zero or negative",
    ),
    Case(
        "negative-price-log", negative_price, "universe",
        r"universe 'rates_pair': series 'RT_Y' is -3\.5 on {day}; transform 'log_return' needs positive levels — "
        r"use transform 'diff' or 'pct_change' for a series that can be zero or negative",
    ),
    Case("all-missing", all_missing, "source", r"{file}: column 'RT_Y' has no values \(all missing\); remove the column or fill it"),
    Case(
        "1e308", huge, "source",
        r"{file}, line {line}: value 1e\+308 of series 'RT_X' is at or above ±1e\+15 in magnitude \(an overflow or fill-in marker\); "
        r"fix the source or leave the cell empty",
    ),
    Case(
        "inf", plus_inf, "source",
        r"{file}, line {line}: value inf of series 'RT_Y' is infinite \(an overflow or fill-in marker\); fix the source or leave the cell empty",
    ),
    Case(
        "minus-inf", minus_inf, "source",
        r"{file}, line {line}: value -inf of series 'RT_X' is infinite \(an overflow or fill-in marker\); fix the source or leave the cell empty",
    ),
]


# --------------------------------------------------------------------------------------------
# Data-shape cases: a new source and universe added on night 2 (ingest never deletes rows, so a
# gap or a flat stretch can only enter with new data)
# --------------------------------------------------------------------------------------------

EXTRA_ROWS = 160
EXTRA = ("EX_A", "EX_B", "EX_C")


def _extra(night: Night, df: pl.DataFrame, *, max_fill_gap: int = 3, lags: int = 1) -> dict[str, Any]:
    path = night.write("extra.csv", csv_text(df))
    night.add_to_config(
        f"""
        [[sources]]
        name = "extra"
        kind = "csv"
        path = "extra.csv"

        [[universes]]
        name = "extra_trio"
        series = ["EX_A", "EX_B", "EX_C"]
        window = 40
        lags = {lags}
        horizon = 4
        max_fill_gap = {max_fill_gap}
        """
    )
    return {"file": path}


def _extra_frame() -> pl.DataFrame:
    return simulate(EXTRA, EXTRA_ROWS, seed=47)


def _rows(df: pl.DataFrame, lo: int, hi: int) -> pl.Expr:
    return pl.int_range(pl.len()).is_between(lo, hi)


def constant_series(night: Night) -> dict[str, Any]:
    df = _extra_frame().with_columns(pl.lit(50.0).alias("EX_B"))
    return _extra(night, df)


def constant_stretch(night: Night) -> dict[str, Any]:
    # EX_B is quoted at one price on rows 60..119: zero log returns on rows 61..119
    df = _extra_frame()
    flat = float(df["EX_B"][60])
    df = df.with_columns(pl.when(_rows(df, 60, 119)).then(flat).otherwise(pl.col("EX_B")).alias("EX_B"))
    return _extra(night, df)


def collinear(night: Night) -> dict[str, Any]:
    # on rows 60..119 the file repeats EX_A's quotes under EX_C: equal log returns there
    df = _extra_frame()
    df = df.with_columns(pl.when(_rows(df, 60, 119)).then(pl.col("EX_A")).otherwise(pl.col("EX_C")).alias("EX_C"))
    return _extra(night, df)


def long_gap(night: Night) -> dict[str, Any]:
    # EX_B missing on rows 60..104 (45 business days), far beyond max_fill_gap = 3
    df = _extra_frame()
    df = df.with_columns(pl.when(_rows(df, 60, 104)).then(None).otherwise(pl.col("EX_B")).alias("EX_B"))
    return _extra(night, df)


def too_few_rows(night: Night) -> dict[str, Any]:
    # EX_A missing on every third row of 70..129 and no forward fill: with 2 lags no regression row
    # there has its lags, so windows mostly inside that stretch keep fewer rows than a fit needs
    df = _extra_frame()
    holes = pl.int_range(pl.len()).is_between(70, 129) & (pl.int_range(pl.len()) % 3 == 0)
    df = df.with_columns(pl.when(holes).then(None).otherwise(pl.col("EX_A")).alias("EX_A"))
    return _extra(night, df, max_fill_gap=0, lags=2)


def monthly_series(night: Night) -> dict[str, Any]:
    # EX_B quoted only on each month's last row, in a business-day universe: it was forward-filled
    # for max_fill_gap rows, then left as gaps (and reported as a constant series); now one line
    df = _extra_frame()
    month_end = pl.col("date").dt.month() != pl.col("date").shift(-1).dt.month()
    df = df.with_columns(pl.when(month_end).then(pl.col("EX_B")).otherwise(None).alias("EX_B"))
    return _extra(night, df)


def check_long_gap(night: Night, values: dict[str, Any]) -> None:
    """The dates of the gap are recorded in dropped_dates with their reason."""
    dropped = night.tables()["dropped_dates"].filter(pl.col("universe") == "extra_trio")
    gap_days = set(_extra_frame()["date"][60:105].to_list())
    reasons = dict(zip(dropped["date"].to_list(), dropped["reason"].to_list(), strict=True))
    # the returns of rows 60..105 need EX_B on both days; row 60..63 are filled (max_fill_gap 3)
    for d in sorted(gap_days)[3:]:
        assert d in reasons, f"{d} of the gap is not in dropped_dates"
        assert reasons[d] == "gap row, kept as NaN: EX_B: missing longer than max_fill_gap=3", reasons[d]


SHAPE_CASES = [
    Case(
        "monthly-series-in-a-daily-universe", monthly_series, "universe",
        r"universe 'extra_trio': series 'EX_B' is observed in about 1 of every 2\d(\.5)? business_day rows \(median step; "
        r"its dates look monthly\), less often than the universe's `frequency = 'business_day'` — a coarser series "
        r"is never filled into finer rows; set the universe's `frequency = 'monthly'` \(finer series are aggregated "
        r"per their `aggregate`\), or move 'EX_B' to a universe of that frequency",
        universe="extra_trio",
    ),
    Case(
        "constant-series", constant_series, "universe",
        r"universe 'extra_trio': series 'EX_B' is constant after transform 'log_return' \(0\.0 on every date\); "
        r"remove it from the universe or check the source",
        universe="extra_trio",
    ),
    Case(
        "constant-stretch", constant_stretch, "skipped",
        # inside the flat stretch: constant; where the stretch starts at the window's first row:
        # EX_B's lag (or EX_B itself) is the only thing moving, named as such
        r"series 'EX_B' is constant in this window; a VAR needs series that vary"
        r"|not fitted: the window gives \(nearly\) perfectly collinear regressors \['EX_B\.L1'\] .*"
        r"|not fitted: the window has series 'EX_B' fitted exactly \(residual variance [-+.e\d]+ times its own variance\), so the residual covariance is singular: it is an exact function of the lagged series \(and constant/trend\) — drop it or use fewer lags",
        universe="extra_trio", extra={"min_skipped": 20},
    ),
    Case(
        "collinear-series", collinear, "skipped",
        r"not fitted: the window gives \(nearly\) perfectly collinear regressors \['EX_A\.L1', 'EX_C\.L1'\] \(reciprocal condition number [-+.e\d]+ < 1e-10 after scaling columns\); "
        r"a series is a linear combination of others, or of the constant/trend — drop one of the series involved or use fewer lags"
        # where the copy starts inside the window's presample row, the lags still differ there
        r"|not fitted: the window has series 'EX_[AC]' fitted exactly \(residual variance [-+.e\d]+ times its own variance\), so the residual covariance is singular: it is an exact function of the lagged series \(and constant/trend\) — drop it or use fewer lags"
        r"|not fitted: the window gives residuals of \['EX_A', 'EX_C'\] that are exactly linearly dependent .* — drop one of them",
        universe="extra_trio", extra={"min_skipped": 20},
    ),
    Case(
        "long-gap", long_gap, "skipped",
        r"\d usable observations after gaps, fewer than the 7 needed for 4 coefficients per equation and a nonsingular residual covariance",
        universe="extra_trio", check=check_long_gap, extra={"min_skipped": 5},
    ),
    Case(
        "too-few-rows-in-window", too_few_rows, "skipped",
        r"\d+ usable observations after gaps, fewer than the 10 needed for 7 coefficients per equation and a nonsingular residual covariance",
        universe="extra_trio", extra={"min_skipped": 5},
    ),
]
