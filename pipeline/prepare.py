"""Prepare one universe's data for fitting (polars): calendar, fill, transform, and a record of why.

``prepare_universe(observations, universe)`` takes long observations (series, date, value) and
returns a :class:`Prepared`: the (T, n) float64 matrix `y` the fits use (rows = dates, oldest first;
columns = the universe's series in config order), its dates, and the dates that were dropped or left
as gaps, each with its reason.

Steps and rules (documented in the README):

1. **Calendar** (``CALENDARS``). ``business_day``: every Monday–Friday between the first and last
   observation (weekend observations are ignored). ``weekly``: one row per week, labelled by its
   Friday. ``monthly``, ``quarterly``, ``annual``: one row per month, quarter (Jan–Mar, Apr–Jun,
   Jul–Sep, Oct–Dec) or calendar year, labelled by its last calendar day (period-end labels: 31 Mar,
   30 Jun, 30 Sep, 31 Dec); an observation dated anywhere in the period belongs to it. A period whose
   label date lies after the last observation is not complete yet and is left out (it appears once
   data reach its end) — unless every series observed in it is sampled once per period (no two of
   its observations ever share a row, e.g. quarterly values dated on the quarter's first day).
   **Aggregation** (``AGGREGATIONS``, per series, default ``last``): when a series has several
   observations in one row (a daily series in a monthly universe), the row holds their ``last``,
   ``first``, ``mean`` or ``sum`` (in date order). A series observed less often than the universe's
   rows (a quarterly series in a monthly universe that also holds daily or monthly series: its
   median step between observed rows is 2 or more) is an error naming the frequency to use —
   it is never forward-filled into rows it was not observed in.
2. **Holidays.** A calendar date on which no series of the universe has an observation is removed.
3. **Fill.** Within each series, a missing value is forward-filled from the previous row for at most
   ``max_fill_gap`` consecutive rows; longer gaps stay missing.
4. **Transform** per series (``TRANSFORMS``; x is the filled level): ``log_return`` ln x_t − ln x_{t−1}
   (needs x > 0), ``pct_change`` x_t / x_{t−1} − 1 (needs x_{t−1} ≠ 0), ``diff`` x_t − x_{t−1},
   ``level`` x_t.
5. **Trim.** Rows before every series has a transformed value (a transform uses up the first row;
   series start on different dates) and rows after the last complete row are removed. Rows inside the
   sample with a missing value are kept as NaN rows (gaps): the rolling engine excludes every
   regression row that touches them, so lags never bridge a gap.

Every removed date and every gap row is listed in ``Prepared.dropped`` with its reason.
"""

from __future__ import annotations

import functools
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from datetime import date
from typing import Protocol

import numpy as np
import polars as pl

from pipeline._polars import date_bounds, first_true
from pipeline.errors import DataError

_EPOCH_ORDINAL = date(1970, 1, 1).toordinal()

__all__ = [
    "AGGREGATIONS",
    "CALENDARS",
    "DEFAULT_AGGREGATION",
    "TRANSFORMS",
    "Aggregation",
    "Calendar",
    "Prepared",
    "Transform",
    "UniverseLike",
    "prepare_universe",
]


class _SeriesLike(Protocol):
    @property
    def name(self) -> str: ...
    @property
    def transform(self) -> str: ...
    @property
    def aggregate(self) -> str: ...


class UniverseLike(Protocol):
    """What preparing reads of a universe; `pipeline.config.UniverseConfig` is one.

    (A protocol, not an import of the config: the config takes its transform and calendar names
    from this module, so this module does not import the config.)
    """

    @property
    def name(self) -> str: ...
    @property
    def names(self) -> tuple[str, ...]: ...
    @property
    def series(self) -> Sequence[_SeriesLike]: ...
    @property
    def frequency(self) -> str: ...
    @property
    def max_fill_gap(self) -> int: ...


@dataclass(frozen=True)
class Transform:
    """A transform: `expr` maps a level column to the transformed column; `eats` leading rows."""

    expr: Callable[[pl.Expr], pl.Expr]
    eats: int
    #: "positive": every level must be > 0; "nonzero": every level used as x_{t-1} must be ≠ 0.
    requires: str | None = None
    hint: str = ""


#: name → transform. The one place to add a transform; config validation reads the names here.
TRANSFORMS: dict[str, Transform] = {
    "log_return": Transform(
        lambda x: x.log() - x.log().shift(1), 1, "positive",
        "use transform 'diff' or 'pct_change' for a series that can be zero or negative",
    ),
    "pct_change": Transform(
        lambda x: x / x.shift(1) - 1.0, 1, "nonzero",
        "use transform 'diff' for a series that can be zero",
    ),
    "diff": Transform(lambda x: x - x.shift(1), 1),
    "level": Transform(lambda x: x, 0),
}


def _business_days(first: date, last: date) -> pl.Series:
    days = pl.date_range(first, last, "1d", eager=True)
    return days.filter(days.dt.weekday() <= 5)


def _label_business_day(d: pl.Expr) -> pl.Expr:
    return pl.when(d.dt.weekday() <= 5).then(d).otherwise(None)


def _label_weekly(d: pl.Expr) -> pl.Expr:
    # Friday of the Monday–Sunday week: d + (5 − weekday) days (Sat/Sun map to that week's Friday).
    return d + pl.duration(days=5 - d.dt.weekday())


def _label_monthly(d: pl.Expr) -> pl.Expr:
    return d.dt.month_end()


def _label_quarterly(d: pl.Expr) -> pl.Expr:
    # last day of the quarter's third month: month_end(first day of the quarter + 2 months)
    return d.dt.truncate("1q").dt.offset_by("2mo").dt.month_end()


def _label_annual(d: pl.Expr) -> pl.Expr:
    # 31 December of the year: month_end(1 January + 11 months)
    return d.dt.truncate("1y").dt.offset_by("11mo").dt.month_end()


def _weekly_range(first: date, last: date) -> pl.Series:
    return pl.date_range(first, last, "1w", eager=True)


def _monthly_range(first: date, last: date) -> pl.Series:
    return pl.date_range(first, last, "1mo", eager=True).dt.month_end()


def _quarterly_range(first: date, last: date) -> pl.Series:
    return pl.date_range(first, last, "3mo", eager=True).dt.month_end()


def _annual_range(first: date, last: date) -> pl.Series:
    return pl.date_range(first, last, "1y", eager=True).dt.month_end()


@dataclass(frozen=True)
class Calendar:
    """A universe frequency: how observation dates map to rows, and the rows themselves.

    label: date expression → the label date of its row (null: not on this calendar, e.g. a weekend).
    rows: (first label, last label) → every label date in between, oldest first.
    days: the typical length of one row in calendar days (to name the frequency a series is
    sampled at in an error). doc: the README's description.
    """

    label: Callable[[pl.Expr], pl.Expr]
    rows: Callable[[date, date], pl.Series]
    days: float
    doc: str


#: frequency → calendar, finest first. The one place to add a frequency; the config's `frequency`
#: choices and their documentation are these entries.
CALENDARS: dict[str, Calendar] = {
    "business_day": Calendar(_label_business_day, _business_days, 1.4, "Mon–Fri"),
    "weekly": Calendar(_label_weekly, _weekly_range, 7.0, "labelled by the week's Friday"),
    "monthly": Calendar(_label_monthly, _monthly_range, 30.44, "labelled by the month's last day"),
    "quarterly": Calendar(
        _label_quarterly, _quarterly_range, 91.31, "labelled by the quarter's last day: 31 Mar, 30 Jun, 30 Sep, 31 Dec"
    ),
    "annual": Calendar(_label_annual, _annual_range, 365.25, "labelled by 31 Dec"),
}


@dataclass(frozen=True)
class Aggregation:
    """How the observations of one series falling in one calendar row become that row's value.

    expr: maps the value column (in date order within the row) to one value; doc: the README's text.
    """

    expr: Callable[[pl.Expr], pl.Expr]
    doc: str


#: name → aggregation. The one place to add one; the config's per-series `aggregate` choices.
AGGREGATIONS: dict[str, Aggregation] = {
    "last": Aggregation(lambda x: x.last(), "the period's last observation (a price, an index, a stock)"),
    "first": Aggregation(lambda x: x.first(), "the period's first observation"),
    "mean": Aggregation(lambda x: x.mean(), "the average of the period's observations (an average rate)"),
    "sum": Aggregation(lambda x: x.sum(), "the sum of the period's observations (a flow: volumes, issuance)"),
}

#: every transform's default aggregation. Each transform reads levels x_t, and `last` keeps them
#: point-in-time: under `log_return`/`pct_change`/`diff` the period's change is then exactly the
#: sum (log_return, diff) or product (pct_change) of the finer changes inside it, while `mean`
#: would smooth the levels and put spurious autocorrelation into their changes (Working 1960,
#: Econometrica 28, 916–918: about 0.25 for averaged random-walk levels — recalled from memory).
#: Under `level` the value is used as is, and `last` is the same point-in-time rule; a flow
#: should be set to `sum`, an average rate or spread to `mean`.
DEFAULT_AGGREGATION = "last"


def _sampled_as(days: float) -> str:
    """The frequency whose row length is nearest (in ratio) to `days` between observations."""
    return min(CALENDARS, key=lambda f: abs(np.log(days / CALENDARS[f].days)))


@dataclass(frozen=True)
class Prepared:
    """The fitting input of one universe.

    y: (T, n) float64, rows = `dates` (oldest first), columns = `names`; NaN marks a gap row.
    dropped: frame (date: Date, reason: str), one row per removed date or gap row, sorted.
    """

    universe: str
    names: tuple[str, ...]
    dates: tuple[date, ...]
    y: np.ndarray
    dropped: pl.DataFrame

    @functools.cached_property
    def days(self) -> np.ndarray:
        """(T,) datetime64[D] of `dates` (set by `prepare_universe` from its date column; otherwise
        converted once, through ordinals: ~30x numpy's own conversion of date objects)."""
        ordinals = np.fromiter((d.toordinal() for d in self.dates), np.int64, len(self.dates))
        out = (ordinals - _EPOCH_ORDINAL).astype("datetime64[D]")
        out.flags.writeable = False
        return out

    @property
    def frame(self) -> pl.DataFrame:
        """Long form (date, series, value) of `y`, NaN as null: what the warehouse stores."""
        return self.frame_of(None)

    def frame_of(self, dates: list[date] | None) -> pl.DataFrame:
        """`frame` restricted to the rows of `dates` (None = every date; dates not held are
        ignored): equal to ``frame.filter(pl.col("date").is_in(dates))``, built from those rows only."""
        if dates is None:
            rows, kept = self.y, self.days
        else:
            mask = np.isin(self.days, np.asarray(sorted(dates), dtype="datetime64[D]"))
            rows, kept = self.y[mask], self.days[mask]
        m, n = rows.shape
        # series by series, each over every kept date: the row order of unpivoting the wide frame
        return pl.DataFrame(
            {
                "date": pl.Series(np.tile(kept, n), dtype=pl.Date),
                "series": pl.Series(np.repeat(np.asarray(self.names, dtype=object), m), dtype=pl.String),
                "value": pl.Series(np.ascontiguousarray(rows.T).ravel(), dtype=pl.Float64).fill_nan(None),
            }
        )


def _check_sampling(aligned: pl.DataFrame, obs: pl.DataFrame, universe: UniverseLike) -> None:
    """A series observed on fewer than every other row of the universe is an error (never filled).

    `aligned`: the calendar rows left after removing holidays (row, one column per series, null
    where the series has no observation). A series whose median step between its observed rows is
    2 or more is sampled less often than the universe; the message names the frequency its own
    dates suggest (median days between observations, nearest calendar in ratio).
    """
    for name in universe.names:
        where = np.flatnonzero(aligned[name].is_not_null().to_numpy())
        if where.size < 3:
            continue
        step = float(np.median(np.diff(where)))
        if step < 2:
            continue
        own = obs.filter(pl.col("series") == name)["date"].unique().sort()
        days = float(np.median(np.diff(own.to_physical().to_numpy()))) if own.len() > 1 else step
        sampled = _sampled_as(days)
        coarser = list(CALENDARS).index(sampled) > list(CALENDARS).index(universe.frequency)
        fix = (
            f"set the universe's `frequency = {sampled!r}` (finer series are aggregated per their "
            f"`aggregate`), or move {name!r} to a universe of that frequency"
            if coarser
            else "set the universe's `frequency` to a coarser calendar, or check the series' source for missing dates"
        )
        msg = (
            f"universe {universe.name!r}: series {name!r} is observed in about 1 of every {step:g} "
            f"{universe.frequency} rows (median step; its dates look {sampled}), less often than "
            f"the universe's `frequency = {universe.frequency!r}` — a coarser series is never "
            f"filled into finer rows; {fix}"
        )
        raise DataError(msg)


def _aggregate(on_rows: pl.DataFrame, how: str) -> pl.DataFrame:
    """One row per (series, row): the `how` aggregate of the values in it and their count, in
    (series, row) order.

    When no row holds two observations of a series (a daily series on the business-day calendar),
    `last` and `first` are the value itself: it is taken as it is, without the group-by (the
    same frame, values and order; the nightly job prepares 6,000 rows × 12 series per universe).
    """
    ordered = on_rows.sort("series", "date")
    if how in ("last", "first") and ordered.schema["value"] == pl.Float64:
        same_series = pl.col("series") == pl.col("series").shift(1)
        clash = ordered.select((same_series & (pl.col("row") <= pl.col("row").shift(1))).any()).item()
        if not clash:
            return ordered.select("series", "row", "value", pl.lit(1, dtype=pl.UInt32).alias("count"))
    return ordered.group_by("series", "row", maintain_order=True).agg(
        AGGREGATIONS[how].expr(pl.col("value")).alias("value"), pl.len().alias("count")
    )


def prepare_universe(observations: pl.DataFrame, universe: UniverseLike) -> Prepared:
    """Align, fill, transform and trim `observations` (series, date, value) for `universe`."""
    names = list(universe.names)
    obs = observations.filter(pl.col("series").is_in(names))
    present = set(obs["series"].unique().to_list())
    missing = [s for s in names if s not in present]
    if missing:
        msg = (
            f"universe {universe.name!r}: series {missing[0]!r} has no observations in the warehouse; "
            "check its name or add a source that provides it"
        )
        raise DataError(msg)
    cal = CALENDARS[universe.frequency]
    on_rows = obs.with_columns(cal.label(pl.col("date")).alias("row")).drop_nulls("row")
    by_aggregation: dict[str, list[str]] = {}
    for s in universe.series:
        by_aggregation.setdefault(s.aggregate, []).append(s.name)
    labelled = pl.concat([_aggregate(on_rows.filter(pl.col("series").is_in(members)), how) for how, members in by_aggregation.items()])
    if labelled.height == 0:
        msg = f"universe {universe.name!r}: no observation falls on the {universe.frequency} calendar; check the dates"
        raise DataError(msg)
    levels = labelled.pivot(on="series", index="row", values="value").sort("row")
    rows = cal.rows(*date_bounds(levels["row"])).alias("row")
    aligned = pl.DataFrame(rows).join(levels, on="row", how="left").select("row", *names)

    # the current period is left out until it is complete (its label date is in the data) — unless
    # every series observed in it is sampled once per period (its observations never share a row),
    # like quarterly data dated on the quarter's first day: its one value is the period's
    last_seen = date_bounds(obs["date"])[1]
    once = labelled.group_by("series").agg(pl.col("count").max()).filter(pl.col("count") <= 1)["series"]
    waiting = labelled.filter((pl.col("row") > last_seen) & ~pl.col("series").is_in(once.implode()))["row"]
    wait = (pl.col("row") > last_seen) & (pl.col("row").is_in(waiting.implode()) | ~pl.col("row").is_in(labelled["row"].implode()))
    incomplete = aligned.filter(wait)["row"].to_list()
    aligned = aligned.filter(~wait)

    # 2. holidays: no series observed
    observed_any = aligned.select(pl.any_horizontal(pl.col(names).is_not_null())).to_series()
    holidays = aligned.filter(~observed_any)["row"]
    aligned = aligned.filter(observed_any)
    _check_sampling(aligned, obs, universe)

    # 3. fill within the allowed gap (limit counts consecutive filled rows)
    raw = aligned
    filled = aligned.with_columns(
        [pl.col(s).fill_null(strategy="forward", limit=universe.max_fill_gap) if universe.max_fill_gap > 0 else pl.col(s) for s in names]
    )

    # 4. transforms, with their domain checks
    specs = {s.name: s.transform for s in universe.series}
    for name in names:
        t = TRANSFORMS[specs[name]]
        if t.requires is None:
            continue
        col = filled[name]
        bad = (col <= 0) if t.requires == "positive" else (col.shift(-1).is_not_null() & (col == 0))
        bad = bad.fill_null(False)
        if bad.any():
            i = first_true(bad)
            msg = (
                f"universe {universe.name!r}: series {name!r} is {col[i]!r} on {filled['row'][i]}; "
                f"transform {specs[name]!r} needs {'positive levels' if t.requires == 'positive' else 'non-zero levels'} — {t.hint}"
            )
            raise DataError(msg)
    transformed = filled.select("row", *[TRANSFORMS[specs[s]].expr(pl.col(s)).alias(s) for s in names])
    values = transformed.select(names).to_numpy().astype(np.float64, copy=True)
    values[~np.isfinite(values)] = np.nan
    dates = transformed["row"].to_list()

    # 5. trim leading/trailing incomplete rows; keep inner gaps as NaN rows
    complete = ~np.isnan(values).any(axis=1)
    reasons: list[tuple[date, str]] = [(d, "no series observed (holiday or a day without data)") for d in holidays.to_list()]
    reasons += [(d, f"period not complete yet: the data end on {last_seen}") for d in incomplete]
    if not complete.any():
        msg = (
            f"universe {universe.name!r}: no date has a value for every series after filling and "
            "transforming; the series do not overlap — check their date ranges"
        )
        raise DataError(msg)
    first = int(np.argmax(complete))
    last = len(complete) - 1 - int(np.argmax(complete[::-1]))
    raw_ok = np.isfinite(raw.select(names).to_numpy().astype(np.float64))
    filled_np = filled.select(names).to_numpy().astype(np.float64)
    n_rows = raw_ok.shape[0]
    first_obs = np.where(raw_ok.any(axis=0), raw_ok.argmax(axis=0), n_rows)
    last_obs = np.where(raw_ok.any(axis=0), n_rows - 1 - raw_ok[::-1].argmax(axis=0), -1)
    for i in np.flatnonzero(~complete).tolist():
        why = []
        for j, name in enumerate(names):
            if not np.isnan(values[i, j]):
                continue
            seen_before = i >= first_obs[j]
            seen_after = i <= last_obs[j]
            if not seen_before:
                why.append(f"{name}: before its first observation")
            elif np.isnan(filled_np[i, j]) and not seen_after:
                why.append(f"{name}: after its last observation (beyond max_fill_gap={universe.max_fill_gap})")
            elif np.isnan(filled_np[i, j]):
                why.append(f"{name}: missing longer than max_fill_gap={universe.max_fill_gap}")
            else:
                why.append(f"{name}: {specs[name]} needs the previous value")
        where = "removed" if i < first or i > last else "gap row, kept as NaN"
        reasons.append((dates[i], f"{where}: " + "; ".join(why)))
    y = values[first : last + 1]
    kept_dates = tuple(dates[first : last + 1])

    # constant series over the whole sample: no window could use it
    for j, name in enumerate(names):
        kept = y[:, j]
        kept = kept[np.isfinite(kept)]
        if kept.size > 1 and np.ptp(kept) == 0.0:
            msg = (
                f"universe {universe.name!r}: series {name!r} is constant after transform "
                f"{specs[name]!r} ({float(kept[0])!r} on every date); remove it from the universe or check the source"
            )
            raise DataError(msg)
    dropped = pl.DataFrame(reasons, schema={"date": pl.Date, "reason": pl.String}, orient="row").sort("date")
    prepared = Prepared(universe=universe.name, names=tuple(names), dates=kept_dates, y=np.ascontiguousarray(y), dropped=dropped)
    days = transformed["row"].to_numpy()[first : last + 1].astype("datetime64[D]")
    days.flags.writeable = False
    prepared.__dict__["days"] = days  # the cached `days`, from the date column itself
    return prepared
