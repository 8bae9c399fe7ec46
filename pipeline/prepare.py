"""Prepare one universe's data for fitting (polars): calendar, fill, transform, and a record of why.

``prepare_universe(observations, universe)`` takes long observations (series, date, value) and
returns a :class:`Prepared`: the (T, n) float64 matrix `y` the fits use (rows = dates, oldest first;
columns = the universe's series in config order), its dates, and the dates that were dropped or left
as gaps, each with its reason.

Steps and rules (documented in the README):

1. **Calendar.** ``business_day``: every Monday–Friday between the first and last observation
   (weekend observations are ignored). ``weekly``: one row per week, labelled by its Friday, holding
   each series' last observation of that week. ``monthly``: one row per month, labelled by its last
   calendar day, holding the month's last observation. A week or month whose label date lies after
   the last observation is not complete yet and is left out (it appears once data reach its end).
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

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from datetime import date
from typing import Protocol

import numpy as np
import polars as pl

from pipeline._polars import date_bounds, first_true
from pipeline.errors import DataError

__all__ = ["CALENDARS", "TRANSFORMS", "Prepared", "Transform", "UniverseLike", "prepare_universe"]


class _SeriesLike(Protocol):
    @property
    def name(self) -> str: ...
    @property
    def transform(self) -> str: ...


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


def _weekly_range(first: date, last: date) -> pl.Series:
    return pl.date_range(first, last, "1w", eager=True)


def _monthly_range(first: date, last: date) -> pl.Series:
    return pl.date_range(first, last, "1mo", eager=True).dt.month_end()


#: frequency → (label each observation date with its calendar row or null, all rows first..last).
#: The one place to add a frequency; the config's `frequency` choices are these names.
CALENDARS: dict[str, tuple[Callable[[pl.Expr], pl.Expr], Callable[[date, date], pl.Series]]] = {
    "business_day": (_label_business_day, _business_days),
    "weekly": (_label_weekly, _weekly_range),
    "monthly": (_label_monthly, _monthly_range),
}


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

    @property
    def frame(self) -> pl.DataFrame:
        """Long form (date, series, value) of `y`, NaN as null: what the warehouse stores."""
        wide = pl.DataFrame({"date": pl.Series(self.dates, dtype=pl.Date)})
        for j, name in enumerate(self.names):
            wide = wide.with_columns(pl.Series(name, self.y[:, j]).fill_nan(None))
        return wide.unpivot(index="date", variable_name="series", value_name="value").select(
            "date", "series", pl.col("value").cast(pl.Float64)
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
    label, calendar = CALENDARS[universe.frequency]
    labelled = (
        obs.with_columns(label(pl.col("date")).alias("row"))
        .drop_nulls("row")
        .sort("series", "date")
        .group_by("series", "row", maintain_order=True)
        .agg(pl.col("value").last())
    )
    if labelled.height == 0:
        msg = f"universe {universe.name!r}: no observation falls on the {universe.frequency} calendar; check the dates"
        raise DataError(msg)
    levels = labelled.pivot(on="series", index="row", values="value").sort("row")
    rows = calendar(*date_bounds(levels["row"])).alias("row")
    aligned = pl.DataFrame(rows).join(levels, on="row", how="left").select("row", *names)

    # the current week/month is left out until it is complete (its label date is in the data)
    last_seen = date_bounds(obs["date"])[1]
    incomplete = aligned.filter(pl.col("row") > last_seen)["row"].to_list()
    aligned = aligned.filter(pl.col("row") <= last_seen)

    # 2. holidays: no series observed
    observed_any = aligned.select(pl.any_horizontal(pl.col(names).is_not_null())).to_series()
    holidays = aligned.filter(~observed_any)["row"]
    aligned = aligned.filter(observed_any)

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
    return Prepared(universe=universe.name, names=tuple(names), dates=kept_dates, y=np.ascontiguousarray(y), dropped=dropped)
