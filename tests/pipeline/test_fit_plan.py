"""Incremental planning: which windows are (re)fitted, reused or deleted (no engine needed)."""

from __future__ import annotations

import dataclasses
from datetime import date, timedelta

import numpy as np
import polars as pl

from pipeline.config import SeriesSpec, UniverseConfig
from pipeline.fit import StoredState, data_fingerprint, plan_windows, window_grid
from pipeline.prepare import Prepared

U = UniverseConfig(name="u", series=(SeriesSpec("A", "level"), SeriesSpec("B", "level")), window=20, step=5, lags=1)


def prepared(T: int, *, seed: int = 0, skip: int | None = None) -> Prepared:
    rng = np.random.default_rng(seed)
    dates = [date(2020, 1, 1) + timedelta(days=i) for i in range(T + 1)]
    y = rng.standard_normal((T + 1, 2))
    if skip is not None:
        del dates[skip]
        y = np.delete(y, skip, axis=0)
    else:
        dates, y = dates[:T], y[:T]
    return Prepared("u", ("A", "B"), tuple(dates), y, pl.DataFrame(schema={"date": pl.Date, "reason": pl.String}))


def stored_from(p: Prepared, u: UniverseConfig, *, ends: np.ndarray | None = None) -> StoredState:
    """What the warehouse would hold after fitting `ends` (default: the whole grid) of `p`."""
    grid_ends, grid_starts = window_grid(len(p.dates), u)
    if ends is None:
        ends = grid_ends
    starts = grid_starts[np.isin(grid_ends, ends)]
    windows = pl.DataFrame(
        {"window_end": [p.dates[e] for e in ends], "window_start": [p.dates[s] for s in starts]},
        schema={"window_end": pl.Date, "window_start": pl.Date},
    )
    return StoredState(config_hash=u.config_hash, windows=windows, prepared=p.frame)


def test_grid_is_anchored_at_the_first_row() -> None:
    ends, starts = window_grid(42, U)
    assert ends.tolist() == [19, 24, 29, 34, 39]
    assert starts.tolist() == [0, 5, 10, 15, 20]
    ends, starts = window_grid(42, dataclasses.replace(U, expanding=True))
    assert starts.tolist() == [0] * 5
    assert window_grid(19, U)[0].size == 0


def test_first_run_and_full_fit_everything() -> None:
    p = prepared(42)
    plan = plan_windows(p, U, stored=None)
    assert plan.ends.tolist() == [19, 24, 29, 34, 39] and plan.delete_ends is None and plan.reason == "first run"
    plan = plan_windows(p, U, stored=stored_from(p, U), full=True)
    assert plan.delete_ends is None and plan.ends.size == 5 and plan.reason == "full refit requested"


def test_same_data_is_a_noop() -> None:
    p = prepared(42)
    plan = plan_windows(p, U, stored=stored_from(p, U))
    assert plan.is_noop and plan.reused == 5 and plan.reason == "nothing changed"


def test_appended_rows_fit_only_new_windows() -> None:
    u1 = dataclasses.replace(U, step=1)
    old = prepared(42)
    new = prepared(43)  # same first 42 rows (same seed), one more day
    assert np.array_equal(new.y[:42], old.y)
    plan = plan_windows(new, u1, stored=stored_from(old, u1))
    assert plan.ends.tolist() == [42] and plan.delete_ends == [] and plan.reason == "1 new window(s)"
    # with step 5, one new day does not reach the next grid point: nothing to fit, new data stored
    plan5 = plan_windows(new, U, stored=stored_from(old, U))
    assert plan5.ends.size == 0 and plan5.prepared_changed and not plan5.is_noop


def test_revision_refits_exactly_the_windows_that_span_it() -> None:
    old = prepared(42)
    y = old.y.copy()
    y[22, 0] += 1.0  # a revised value on row 22
    new = dataclasses.replace(old, y=y)
    plan = plan_windows(new, U, stored=stored_from(old, U))
    # windows [5..24], [10..29], [15..34], [20..39] span row 22; [0..19] does not
    assert plan.ends.tolist() == [24, 29, 34, 39]
    assert plan.delete_ends == [old.dates[e] for e in (24, 29, 34, 39)]
    assert plan.reason == "4 window(s) refitted after data changes"


def test_removed_date_refits_windows_around_it() -> None:
    old = prepared(42)
    new = prepared(41, skip=30)  # the same data with the row of date index 30 deleted
    assert new.dates[29] == old.dates[29] and new.dates[30] == old.dates[31]
    plan = plan_windows(new, U, stored=stored_from(old, U))
    # new grid ends 19, 24, 29, 34, 39: rows ≤ 29 are unchanged; windows ending at 34 and 39 now
    # end on other dates (new windows) and the old ones there become stale
    assert plan.ends.tolist() == [34, 39]
    assert sorted(plan.delete_ends or []) == sorted([old.dates[34], old.dates[39]])


def test_config_change_refits_everything() -> None:
    p = prepared(42)
    stored = stored_from(p, U)
    changed = dataclasses.replace(U, horizon=5)
    plan = plan_windows(p, changed, stored=stored)
    assert plan.delete_ends is None and plan.ends.size == 5 and plan.reason.startswith("config changed")


def test_missing_stored_window_is_fitted() -> None:
    p = prepared(42)
    ends = window_grid(42, U)[0]
    stored = stored_from(p, U, ends=ends[[0, 1, 3, 4]])  # the window ending at row 29 is missing
    plan = plan_windows(p, U, stored=stored)
    assert plan.ends.tolist() == [29] and plan.delete_ends == []


def test_fingerprint_tracks_values_and_dates() -> None:
    p = prepared(42)
    assert data_fingerprint(p) == data_fingerprint(prepared(42))
    y = p.y.copy()
    y[3, 1] = np.nan
    assert data_fingerprint(dataclasses.replace(p, y=y)) != data_fingerprint(p)
    assert data_fingerprint(prepared(42, seed=1)) != data_fingerprint(p)


def _reference_plan(p: Prepared, u: UniverseConfig, stored: StoredState) -> tuple[list[int], list[date], list[date]]:
    """The window rule written plainly (the polars join of long rows, one window at a time):
    (window ends to fit, stored ends to delete, prepared dates changed or removed)."""
    from pipeline.fit import _changed_dates

    changed, removed = _changed_dates(p.frame, stored.prepared)
    ends, starts = window_grid(len(p.dates), u)
    stored_map = dict(zip(stored.windows["window_end"].to_list(), stored.windows["window_start"].to_list(), strict=True))
    fit = []
    for e, s in zip(ends.tolist(), starts.tolist(), strict=True):
        span = set(p.dates[s : e + 1])
        # a removed date lies inside the span when it falls between the span's first and last date
        gone = any(p.dates[s] < r <= p.dates[e] for r in removed)
        if stored_map.get(p.dates[e]) != p.dates[s] or span & changed or gone:
            fit.append(e)
    grid = {p.dates[e] for e in ends.tolist()}
    delete = sorted({d for d in stored_map if d not in grid} | {p.dates[e] for e in fit if p.dates[e] in stored_map})
    return fit, delete, sorted(changed | removed)


def test_plan_equals_the_plain_rule_on_random_histories() -> None:
    """plan_windows compares stored and new prepared rows as matrices and tests every window at
    once; on random revisions, appended, inserted and removed dates, gap rows (NaN / null),
    stored windows missing, stale or with another start, rolling and expanding windows, and stored
    rows in either order, it
    decides exactly as the plain rule does."""
    rng = np.random.default_rng(20261205)
    for case in range(120):
        T = int(rng.integers(25, 70))
        u = dataclasses.replace(U, step=int(rng.integers(1, 6)), window=int(rng.integers(8, 22)), expanding=rng.random() < 0.3)
        old = prepared(T, seed=case)
        y_old = old.y.copy()
        if rng.random() < 0.4:  # a gap row in the stored data
            y_old[int(rng.integers(0, T)), int(rng.integers(0, 2))] = np.nan
        old = dataclasses.replace(old, y=y_old)
        dates, y = list(old.dates), y_old.copy()
        for _ in range(int(rng.integers(0, 4))):  # revisions (a gap filled or opened too)
            i, j = int(rng.integers(0, len(dates))), int(rng.integers(0, 2))
            y[i, j] = np.nan if rng.random() < 0.2 else y[i, j] + 0.5
        if rng.random() < 0.3:  # a date removed
            k = int(rng.integers(1, len(dates) - 1))
            del dates[k]
            y = np.delete(y, k, axis=0)
        if rng.random() < 0.3:  # a date inserted between two stored ones (stored dates are daily: use a later year)
            dates = [d if i < len(dates) // 2 else d + timedelta(days=3650) for i, d in enumerate(dates)]
            k = len(dates) // 2
            dates.insert(k, dates[k] - timedelta(days=1))
            y = np.insert(y, k, rng.standard_normal(2), axis=0)
        add = int(rng.integers(0, 8))  # appended days
        for _ in range(add):
            dates.append(dates[-1] + timedelta(days=1))
        y = np.vstack([y, rng.standard_normal((add, 2))])
        new = Prepared("u", ("A", "B"), tuple(dates), y, old.dropped)
        ends = window_grid(len(old.dates), u)[0]
        keep = ends[rng.random(ends.size) < 0.85] if ends.size else ends
        stored = stored_from(old, u, ends=keep)
        if stored.windows.height and rng.random() < 0.3:  # a stored window with another start
            stored = dataclasses.replace(stored, windows=stored.windows.with_columns(
                pl.when(pl.int_range(pl.len()) == 0).then(pl.col("window_start") - timedelta(days=1))
                .otherwise(pl.col("window_start")).alias("window_start")))  # fmt: skip
        if rng.random() < 0.5:  # as the warehouse returns them
            stored = dataclasses.replace(stored, prepared=stored.prepared.sort("date", "series"))
        plan = plan_windows(new, u, stored=stored)
        fit, delete, dates_changed = _reference_plan(new, u, stored)
        assert plan.ends.tolist() == fit, case
        assert plan.delete_ends == delete, case
        assert plan.prepared_dates == dates_changed and plan.prepared_changed == bool(dates_changed), case


def test_frame_of_dates_equals_the_filtered_frame() -> None:
    """The store writes `Prepared.frame_of(plan.prepared_dates)`: the long rows of those dates
    only, equal to filtering the whole frame (gap rows as null, dates not held ignored)."""
    p = prepared(30, seed=3)
    y = p.y.copy()
    y[4, 1] = np.nan
    p = dataclasses.replace(p, y=y)
    for dates in ([], [p.dates[4]], [p.dates[0], p.dates[4], p.dates[-1], date(1999, 1, 1)], list(p.dates)):
        assert p.frame_of(dates).equals(p.frame.filter(pl.col("date").is_in(dates))), dates
    assert p.frame_of(None).equals(p.frame)


def test_the_long_rows_are_the_wide_table_unpivoted_and_days_are_the_dates() -> None:
    """`Prepared.frame` (built from numpy columns) equals its definition, the wide table of `y`
    with NaN as null unpivoted series by series (the earlier construction, written out here), and
    `days` equals `dates` whether set by `prepare_universe` or converted from the date objects."""
    p = prepared(40, seed=5)
    y = p.y.copy()
    y[7, 0] = y[8, 1] = np.nan
    p = dataclasses.replace(p, y=y)
    wide = pl.DataFrame({"date": pl.Series(p.dates, dtype=pl.Date)})
    for j, name in enumerate(p.names):
        wide = wide.with_columns(pl.Series(name, y[:, j]).fill_nan(None))
    want = wide.unpivot(index="date", variable_name="series", value_name="value").select(
        "date", "series", pl.col("value").cast(pl.Float64)
    )
    assert p.frame.equals(want)
    assert p.days.tolist() == list(p.dates) and p.days.dtype == np.dtype("datetime64[D]")
