"""prepare: calendars, forward-fill limits, transforms, trimming, and the record of dropped dates."""

from __future__ import annotations

import dataclasses
from datetime import date, timedelta
from pathlib import Path

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
    return UniverseConfig(**base)  # type: ignore[arg-type]  # field overrides of mixed types


def obs(table: dict[str, list[tuple[date, float]]]) -> pl.DataFrame:
    rows = [(s, d, v) for s, items in table.items() for d, v in items]
    return pl.DataFrame(rows, schema={"series": pl.String, "date": pl.Date, "value": pl.Float64}, orient="row")


D = [date(2024, 1, 1) + timedelta(days=i) for i in range(40)]  # 2024-01-01 is a Monday


def test_transforms_closed_forms() -> None:
    # Monday..Friday; A log_return, B diff
    a = [100.0, 110.0, 99.0, 99.0, 120.0]
    b = [1.0, 1.5, 1.25, 2.0, 2.0]
    p = prepare_universe(obs({"A": list(zip(D[:5], a, strict=True)), "B": list(zip(D[:5], b, strict=True))}), universe())
    assert p.days.tolist() == list(p.dates)  # set from the date column by prepare_universe
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


# -- quarterly and annual calendars; aggregation of finer series; mixed frequencies (issue 14) ----


def _business_days(first: date, last: date) -> list[date]:
    return [first + timedelta(days=i) for i in range((last - first).days + 1) if (first + timedelta(days=i)).weekday() < 5]


def _daily(first: date, last: date, seed: int) -> list[tuple[date, float]]:
    """Positive business-day levels (a random walk in logs), one per weekday."""
    days = _business_days(first, last)
    rng = np.random.default_rng(seed)
    levels = 100.0 * np.exp(np.cumsum(rng.normal(0.0, 0.01, len(days))))
    return list(zip(days, levels.tolist(), strict=True))


def _direct(rows: list[tuple[date, float]], how: str, every: str) -> pl.DataFrame:
    """The reference: a plain polars group-by of the observations by calendar period (year and
    month / quarter), in date order, independent of the calendar code under test."""
    df = pl.DataFrame(rows, schema={"date": pl.Date, "value": pl.Float64}, orient="row").sort("date")
    period = pl.col("date").dt.month() if every == "month" else pl.col("date").dt.quarter()
    agg = {"last": pl.col("value").last(), "first": pl.col("value").first(),
           "mean": pl.col("value").mean(), "sum": pl.col("value").sum()}[how]  # fmt: skip
    return df.group_by(pl.col("date").dt.year().alias("y"), period.alias("p"), maintain_order=True).agg(agg).sort("y", "p")


def test_quarterly_and_annual_calendars_take_period_end_labels() -> None:
    # business days 2021-01-01 .. 2023-12-29: the data end on Friday 29 Dec 2023, so 2023Q4 and
    # the year 2023 (labelled 31 Dec) are not complete yet and wait
    a = _daily(date(2021, 1, 1), date(2023, 12, 29), seed=1)
    level = (SeriesSpec("A", "level"),)
    q = prepare_universe(obs({"A": a}), universe(series=level, frequency="quarterly"))
    ends = [(3, 31), (6, 30), (9, 30), (12, 31)]
    assert q.dates == tuple(date(y, *ends[k]) for y in (2021, 2022, 2023) for k in range(4))[:-1]
    assert dict(q.dropped.rows())[date(2023, 12, 31)] == "period not complete yet: the data end on 2023-12-29"
    ref = _direct(a, "last", "quarter")
    np.testing.assert_array_equal(q.y[:, 0], ref["value"].to_numpy()[:-1])
    yr = prepare_universe(obs({"A": a}), universe(series=level, frequency="annual"))
    assert yr.dates == (date(2021, 12, 31), date(2022, 12, 31))
    assert yr.y[:, 0].tolist() == [v for d, v in a if d in (date(2021, 12, 31), date(2022, 12, 30))]


def test_quarterly_series_dated_anywhere_in_the_quarter_take_its_end_label() -> None:
    # the statistics offices' first-day-of-quarter dates (1 Jan for Q1) and mid-quarter dates
    starts = [date(2020, m, 1) for m in (1, 4, 7, 10)] + [date(2021, m, 15) for m in (2, 5, 8, 11)]
    a = [(d, 100.0 + i * i) for i, d in enumerate(starts)] + [(date(2022, 1, 1), 200.0)]
    p = prepare_universe(obs({"A": a}), universe(series=(SeriesSpec("A", "diff"),), frequency="quarterly"))
    # a series sampled once per quarter has its newest quarter complete with its one value, though
    # the data end on 1 Jan 2022, before the label 31 Mar 2022 (it waited a quarter before)
    assert p.dates[0] == date(2020, 6, 30) and p.dates[-1] == date(2022, 3, 31)
    assert all((d.month, d.day) in {(3, 31), (6, 30), (9, 30), (12, 31)} for d in p.dates)
    np.testing.assert_array_equal(p.y[:, 0], np.diff([v for _, v in a]))
    assert p.dropped["date"].to_list() == [date(2020, 3, 31)]  # the first row, used up by `diff`
    # a daily series observed in that quarter makes it wait: its aggregate is not final yet
    b = _daily(date(2020, 1, 1), date(2022, 1, 3), seed=8)
    mixed = prepare_universe(obs({"A": a, "B": b}), universe(frequency="quarterly", series=(SeriesSpec("A", "diff"), SeriesSpec("B", "log_return"))))
    assert mixed.dates[-1] == date(2021, 12, 31)
    assert dict(mixed.dropped.rows())[date(2022, 3, 31)] == "period not complete yet: the data end on 2022-01-03"


@pytest.mark.parametrize("how", ["last", "first", "mean", "sum"])
def test_daily_series_aggregated_to_monthly_equals_a_direct_group_by(how: str) -> None:
    # 2024-01-01 .. 2024-05-31 (a Friday): five complete months of business days
    a = _daily(date(2024, 1, 1), date(2024, 5, 31), seed=2)
    u = universe(series=(SeriesSpec("A", "level", aggregate=how),), frequency="monthly")
    p = prepare_universe(obs({"A": a}), u)
    ref = _direct(a, how, "month")
    assert p.dates == (date(2024, 1, 31), date(2024, 2, 29), date(2024, 3, 31), date(2024, 4, 30), date(2024, 5, 31))
    # last/first pick a stored value: exact. mean/sum: polars adds the same ~21 doubles in both,
    # possibly in another order; 1e-14 relative is that rounding, any wrong row moves it by > 1e-3
    np.testing.assert_allclose(p.y[:, 0], ref["value"].to_numpy(), rtol=0 if how in ("last", "first") else 1e-14)


def test_a_universe_mixes_daily_monthly_and_quarterly_series() -> None:
    # D: daily price (last, log_return), F: daily flow (sum, level), M: monthly index dated the
    # 1st (log_return), Q: quarterly series dated at quarter end (diff); quarterly universe
    d_price = _daily(date(2022, 1, 3), date(2023, 12, 29), seed=3)
    d_flow = [(d, 1.0 + (i % 7)) for i, (d, _) in enumerate(_daily(date(2022, 1, 3), date(2023, 12, 29), seed=4))]
    monthly = [(date(y, m, 1), 50.0 + 3 * (y - 2022) * 12 + m + (m % 4) ** 2) for y in (2022, 2023) for m in range(1, 13)]
    ends = [(3, 31), (6, 30), (9, 30), (12, 31)]
    quarterly = [(date(y, *ends[k]), float(k * k + y - 2000)) for y in (2022, 2023) for k in range(4)]
    u = universe(
        series=(SeriesSpec("D", "log_return"), SeriesSpec("F", "level", aggregate="sum"),
                SeriesSpec("M", "log_return", aggregate="mean"), SeriesSpec("Q", "diff")),
        frequency="quarterly", max_fill_gap=0,
    )  # fmt: skip
    p = prepare_universe(obs({"D": d_price, "F": d_flow, "M": monthly, "Q": quarterly}), u)
    # Q is observed at 2023-12-31 (a Sunday), so 2023Q4 is complete; the first quarter is eaten
    assert p.dates == tuple(date(y, *ends[k]) for y in (2022, 2023) for k in range(4))[1:]
    last_d = _direct(d_price, "last", "quarter")["value"].to_numpy()
    sum_f = _direct(d_flow, "sum", "quarter")["value"].to_numpy()
    mean_m = _direct(monthly, "mean", "quarter")["value"].to_numpy()
    q = np.array([v for _, v in quarterly])
    np.testing.assert_allclose(p.y[:, 0], np.diff(np.log(last_d)), rtol=1e-14)
    np.testing.assert_allclose(p.y[:, 1], sum_f[1:], rtol=1e-14)
    np.testing.assert_allclose(p.y[:, 2], np.diff(np.log(mean_m)), rtol=1e-14)
    np.testing.assert_array_equal(p.y[:, 3], np.diff(q))


def test_a_series_sampled_less_often_than_its_universe_is_one_line_naming_the_frequency() -> None:
    # a monthly series in a business-day universe was forward-filled for max_fill_gap rows and
    # then left as gap rows (or "no overlap"); now one line names universe, series, key and fix
    a = _daily(date(2024, 1, 1), date(2024, 6, 28), seed=5)
    b = [(date(2024, m, 28), 10.0 + m * m) for m in range(1, 7)]
    with pytest.raises(DataError) as err:
        prepare_universe(obs({"A": a, "B": b}), universe())
    msg = str(err.value)
    assert "\n" not in msg
    assert msg.startswith("universe 'u': series 'B' is observed in about 1 of every ")
    assert "business_day rows (median step; its dates look monthly), less often than the universe's `frequency = 'business_day'`" in msg
    assert "set the universe's `frequency = 'monthly'`" in msg
    # a quarterly series among daily ones in a monthly universe
    q = [(date(2024, m, 1), 5.0 + m) for m in (1, 4)] + [(date(2023, m, 1), 3.0 + m) for m in (1, 4, 7, 10)]
    with pytest.raises(DataError, match=r"series 'B' is observed in about 1 of every 3 monthly rows \(median step; its dates look quarterly\).*`frequency = 'quarterly'`"):
        prepare_universe(obs({"A": _daily(date(2023, 1, 2), date(2024, 6, 28), seed=6), "B": q}), universe(frequency="monthly"))
    # every other business day: no coarser calendar fits its dates, so the fix says to look at them
    sparse = a[::2]
    with pytest.raises(DataError, match=r"series 'B' is observed in about 1 of every 2 business_day rows \(median step; its dates look business_day\), "
                       r".*; set the universe's `frequency` to a coarser calendar, or check the series' source for missing dates$"):  # fmt: skip
        prepare_universe(obs({"A": a, "B": sparse}), universe())


def test_quarterly_series_alone_in_a_monthly_universe_still_drop_empty_months() -> None:
    # the rule for a calendar row no series is observed in (a holiday) comes first: a universe of
    # quarterly series on a monthly calendar keeps working as before (rows = the quarter ends)
    ends = [(3, 31), (6, 30), (9, 30), (12, 31)]
    a = [(date(2020 + i // 4, *ends[i % 4]), 100.0 + i * i) for i in range(8)]
    p = prepare_universe(obs({"A": a}), universe(series=(SeriesSpec("A", "diff"),), frequency="monthly"))
    assert len(p.dates) == 7 and p.dates[0] == date(2020, 6, 30)


def test_the_readme_macro_universe_prepares_quarterly_rows_from_quarterly_and_daily_sources(tmp_path: Path) -> None:
    """The README's macro example, as written there: US quarterly macro data (statsmodels'
    macrodata, public domain, dated on each quarter's FIRST day as statistics offices publish
    them) with an invented daily policy rate averaged per quarter."""
    import re

    from statsmodels.datasets import macrodata

    from pipeline.config import load_config_text

    readme = (Path(__file__).resolve().parents[2] / "README.md").read_text(encoding="utf-8")
    (block,) = [b for b in re.findall(r"```toml\n(.*?)```", readme, flags=re.S) if 'name = "us_macro"' in b]
    u = load_config_text(block, tmp_path / "macro.toml").universe("us_macro")
    assert u.frequency == "quarterly" and [s.aggregate for s in u.series] == ["last", "last", "last", "mean"]

    raw = macrodata.load_pandas().data
    starts = [date(int(y), 3 * int(q) - 2, 1) for y, q in zip(raw["year"], raw["quarter"], strict=True)]
    table = {s: list(zip(starts, raw[s].to_numpy(dtype=float).tolist(), strict=True)) for s in ("realgdp", "realcons", "realinv")}
    # the invented daily rate: business days from 1959-01-01 to 2009-09-30
    days = _business_days(date(1959, 1, 1), date(2009, 9, 30))
    rate = 4.0 + np.cumsum(np.random.default_rng(9).normal(0.0, 0.02, len(days)))
    table["policy_rate"] = list(zip(days, rate.tolist(), strict=True))
    p = prepare_universe(obs(table), u)

    ends = {1: (3, 31), 2: (6, 30), 3: (9, 30), 4: (12, 31)}
    assert p.dates == tuple(date(y, *ends[q]) for y in range(1959, 2010) for q in (1, 2, 3, 4))[1:-1]
    assert p.y.shape == (202, 4)
    growth = np.diff(np.log(raw[["realgdp", "realcons", "realinv"]].to_numpy(dtype=float)), axis=0)
    np.testing.assert_array_equal(p.y[:, :3], growth)  # the same floating-point operations
    quarterly_mean = _direct(table["policy_rate"], "mean", "quarter")["value"].to_numpy()
    np.testing.assert_allclose(p.y[:, 3], np.diff(quarterly_mean), rtol=1e-12, atol=1e-14)  # ~63 doubles summed in another order


def test_aggregate_without_shared_rows_equals_the_group_by() -> None:
    """`_aggregate` takes the value as it is when no row holds two observations of a series
    (`last`/`first`); it equals the group-by it skips — values (a -0.0 and a NaN too), counts,
    dtypes and order — and a calendar that puts several observations in a row still groups."""
    from pipeline.prepare import AGGREGATIONS, CALENDARS, _aggregate

    rng = np.random.default_rng(5)
    days = [date(2024, 1, 1) + timedelta(days=i) for i in range(60)]
    values = rng.standard_normal(120)
    values[[3, 70]] = [-0.0, np.nan]
    frame = pl.DataFrame({
        "series": ["B"] * 60 + ["A"] * 60, "date": days + days, "value": values,
    }).sample(fraction=1.0, shuffle=True, seed=1)  # fmt: skip
    for frequency in ("business_day", "weekly", "monthly"):
        on_rows = frame.with_columns(CALENDARS[frequency].label(pl.col("date")).alias("row")).drop_nulls("row")
        for how in AGGREGATIONS:
            grouped = (
                on_rows.sort("series", "date").group_by("series", "row", maintain_order=True)
                .agg(AGGREGATIONS[how].expr(pl.col("value")).alias("value"), pl.len().alias("count"))
            )  # fmt: skip
            got = _aggregate(on_rows, how)
            assert got.schema == grouped.schema and got.equals(grouped), (frequency, how)
            signs = np.signbit(got["value"].to_numpy()) == np.signbit(grouped["value"].to_numpy())
            assert signs.all(), (frequency, how)
