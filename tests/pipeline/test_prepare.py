"""prepare: calendars, forward-fill limits, transforms, trimming, and the record of dropped dates."""

from __future__ import annotations

import dataclasses
from datetime import date, timedelta

import numpy as np
import polars as pl
import pytest

from pipeline.config import SeriesSpec, UniverseConfig
from pipeline.errors import DataError
from pipeline.prepare import TRANSFORMS, prepare_universe


def universe(**kw: object) -> UniverseConfig:
    base: dict[str, object] = {
        "name": "u",
        "series": (SeriesSpec("A", "log_return"), SeriesSpec("B", "diff")),
        "window": 30,
        "lags": 1,
        "max_fill_gap": 1,
    }
    base.update(kw)
    return UniverseConfig(**base)  # type: ignore[arg-type]


def obs(table: dict[str, list[tuple[date, float]]]) -> pl.DataFrame:
    rows = [(s, d, v) for s, items in table.items() for d, v in items]
    return pl.DataFrame(rows, schema={"series": pl.String, "date": pl.Date, "value": pl.Float64}, orient="row")


D = [date(2024, 1, 1) + timedelta(days=i) for i in range(40)]  # 2024-01-01 is a Monday


def test_transforms_closed_forms() -> None:
    # Monday..Friday; A log_return, B diff
    a = [100.0, 110.0, 99.0, 99.0, 120.0]
    b = [1.0, 1.5, 1.25, 2.0, 2.0]
    p = prepare_universe(obs({"A": list(zip(D[:5], a, strict=True)), "B": list(zip(D[:5], b, strict=True))}), universe())
    assert p.dates == tuple(D[1:5])
    np.testing.assert_allclose(p.y[:, 0], np.diff(np.log(a)), rtol=0, atol=1e-15)
    np.testing.assert_allclose(p.y[:, 1], np.diff(b), rtol=0, atol=1e-15)
    assert p.dropped.rows() == [(D[0], "removed: A: log_return needs the previous value; B: diff needs the previous value")]
    pct = prepare_universe(obs({"A": list(zip(D[:5], a, strict=True))}), universe(series=(SeriesSpec("A", "pct_change"),)))
    np.testing.assert_allclose(pct.y[:, 0], np.array(a[1:]) / np.array(a[:-1]) - 1, rtol=1e-15)
    lvl = prepare_universe(obs({"A": list(zip(D[:5], a, strict=True))}), universe(series=(SeriesSpec("A", "level"),)))
    assert lvl.y[:, 0].tolist() == a and lvl.dropped.height == 0
    assert set(TRANSFORMS) == {"log_return", "pct_change", "diff", "level"}


def test_business_days_fill_gaps_and_holidays() -> None:
    # 2 weeks of business days; A misses Wed 3rd (filled, gap 1), B misses Thu 11th and Fri 12th
    # (gap 2 > max_fill_gap 1 → one filled, one missing); nobody trades Mon 8th (holiday);
    # a Saturday observation is ignored.
    days = [d for d in D[:14] if d.weekday() < 5]
    a = [(d, 100.0 + i) for i, d in enumerate(days) if d not in (date(2024, 1, 3), date(2024, 1, 8))]
    a.append((date(2024, 1, 6), 999.0))  # Saturday
    b = [(d, 10.0 + i * i) for i, d in enumerate(days) if d not in (date(2024, 1, 8), date(2024, 1, 11), date(2024, 1, 12))]
    p = prepare_universe(obs({"A": a, "B": b}), universe())
    assert date(2024, 1, 8) not in p.dates and date(2024, 1, 6) not in p.dates
    reasons = dict(p.dropped.rows())
    assert reasons[date(2024, 1, 8)] == "no series observed (holiday or a day without data)"
    i3 = p.dates.index(date(2024, 1, 3))
    assert p.y[i3, 0] == 0.0  # A forward-filled: zero return
    i4 = p.dates.index(date(2024, 1, 4))
    assert p.y[i4, 0] == pytest.approx(np.log(103.0 / 101.0))
    # Thu 11th: B filled from Wed (diff 0); Fri 12th: B missing → last row incomplete → removed
    assert p.dates[-1] == date(2024, 1, 11)
    assert p.y[-1, 1] == 0.0
    assert reasons[date(2024, 1, 12)] == "removed: B: after its last observation (beyond max_fill_gap=1)"


def test_inner_gap_kept_as_nan_row() -> None:
    days = [d for d in D if d.weekday() < 5][:12]
    a = [(d, 100.0 + i) for i, d in enumerate(days)]
    b = [(d, 10.0 + i * i) for i, d in enumerate(days) if i not in (4, 5, 6)]
    p = prepare_universe(obs({"A": a, "B": b}), universe())
    nan_rows = [p.dates[i] for i in np.flatnonzero(np.isnan(p.y).any(axis=1))]
    # days[4] filled; days[5], days[6] missing; days[7] diff needs the previous (missing) value
    assert nan_rows == [days[5], days[6], days[7]]
    reasons = dict(p.dropped.rows())
    assert reasons[days[5]] == "gap row, kept as NaN: B: missing longer than max_fill_gap=1"
    assert reasons[days[7]] == "gap row, kept as NaN: B: diff needs the previous value"
    long = p.frame
    assert long.columns == ["date", "series", "value"] and long.height == 2 * len(p.dates)
    assert long["value"].null_count() == 3


def test_series_starting_later_trims_the_start() -> None:
    days = [d for d in D if d.weekday() < 5][:10]
    a = [(d, 100.0 + i) for i, d in enumerate(days)]
    b = [(d, 10.0 + i * i) for i, d in enumerate(days) if i >= 3]
    p = prepare_universe(obs({"A": a, "B": b}), universe())
    assert p.dates[0] == days[4]
    reasons = dict(p.dropped.rows())
    assert reasons[days[1]] == "removed: B: before its first observation"
    assert reasons[days[3]] == "removed: B: diff needs the previous value"


def test_weekly_and_monthly_take_last_observation() -> None:
    days = [date(2024, 1, 1) + timedelta(days=i) for i in range(120)]
    a = [(d, 100.0 + i) for i, d in enumerate(days) if d.weekday() < 5]
    w = prepare_universe(obs({"A": a}), universe(series=(SeriesSpec("A", "level"),), frequency="weekly"))
    assert all(d.weekday() == 4 for d in w.dates)
    assert w.y[0, 0] == 104.0  # Friday 5 Jan 2024 is day index 4
    m = prepare_universe(obs({"A": a}), universe(series=(SeriesSpec("A", "level"),), frequency="monthly"))
    assert m.dates[:3] == (date(2024, 1, 31), date(2024, 2, 29), date(2024, 3, 31))
    assert m.y[0, 0] == 130.0  # Wed 31 Jan 2024 is day index 30
    assert m.y[2, 0] == 100.0 + 88  # Fri 29 Mar 2024 (day index 88) is the last business day of March
    # the data end on Mon 29 Apr 2024 (day index 119): April is not complete, nor that week
    assert m.dates[-1] == date(2024, 3, 31)
    assert dict(m.dropped.rows())[date(2024, 4, 30)] == "period not complete yet: the data end on 2024-04-29"
    assert w.dates[-1] <= date(2024, 4, 29)


def test_zero_or_negative_price_under_log() -> None:
    a = [(D[0], 100.0), (D[1], 0.0), (D[2], 101.0)]
    with pytest.raises(DataError, match=r"universe 'u': series 'A' is 0.0 on 2024-01-02; transform 'log_return' needs positive levels — use transform 'diff'"):
        prepare_universe(obs({"A": a, "B": a}), universe())
    b = [(D[0], 100.0), (D[1], -3.0), (D[2], 101.0)]
    with pytest.raises(DataError, match=r"series 'A' is -3.0 on 2024-01-02"):
        prepare_universe(obs({"A": b}), universe(series=(SeriesSpec("A", "log_return"),)))
    with pytest.raises(DataError, match=r"series 'A' is 0.0 on 2024-01-02; transform 'pct_change' needs non-zero"):
        prepare_universe(obs({"A": a}), universe(series=(SeriesSpec("A", "pct_change"),)))


def test_constant_series_and_missing_series() -> None:
    days = [d for d in D if d.weekday() < 5][:10]
    a = [(d, 100.0 + i * i) for i, d in enumerate(days)]
    b = [(d, 5.0) for d in days]
    with pytest.raises(DataError, match=r"series 'B' is constant after transform 'diff' \(0.0 on every date\)"):
        prepare_universe(obs({"A": a, "B": b}), universe())
    with pytest.raises(DataError, match=r"series 'B' has no observations in the warehouse"):
        prepare_universe(obs({"A": a}), universe())


def test_long_gap_everywhere_means_no_overlap() -> None:
    a = [(D[0], 1.0), (D[1], 2.0)]
    b = [(D[14], 1.0), (D[15], 2.0)]
    with pytest.raises(DataError, match="the series do not overlap"):
        prepare_universe(obs({"A": a, "B": b}), dataclasses.replace(universe(), max_fill_gap=0))
