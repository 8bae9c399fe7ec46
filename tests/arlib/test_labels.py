"""The labelled API: DataFrames in (pandas and polars), names and dates through every result,
long frames out (`to_frame` / `to_polars`), window ends as dates, one rule for seeds.

The numbers themselves are checked elsewhere against closed forms and statsmodels; here the
claim is that a labelled call gives bit for bit the numbers of the plain-array call, with the
labels attached, and that the frames hold exactly those numbers under those labels.
"""

from __future__ import annotations

import copy
import datetime as dt
import pickle
import re
from pathlib import Path

import numpy as np
import pandas as pd
import polars as pl
import pytest

import arlib

from .conftest import A1, A2, SIGMA, simulate

NAMES = ("spx", "ust10y", "oil")
T = 160


@pytest.fixture(scope="module")
def data() -> np.ndarray:
    """(160, 3) rows of the stable VAR(2) of conftest (seeded)."""
    return simulate(np.stack([A1, A2]), SIGMA, T, seed=11, c=np.array([0.1, -0.2, 0.3]))


@pytest.fixture(scope="module")
def days() -> list[dt.date]:
    """Business days from Monday 2024-01-01 (weekends skipped, so the dates are irregular)."""
    out, day = [], dt.date(2024, 1, 1)
    while len(out) < T:
        if day.weekday() < 5:
            out.append(day)
        day += dt.timedelta(days=1)
    return out


@pytest.fixture(scope="module")
def polars_frame(data: np.ndarray, days: list[dt.date]) -> pl.DataFrame:
    return pl.DataFrame({"date": days, **{name: data[:, i] for i, name in enumerate(NAMES)}})


@pytest.fixture(scope="module")
def pandas_frame(data: np.ndarray, days: list[dt.date]) -> pd.DataFrame:
    return pd.DataFrame(data, columns=list(NAMES), index=pd.DatetimeIndex(days, name="date"))


def _day(d: dt.date) -> np.datetime64:
    return np.datetime64(d, "D")


# ---------------------------------------------------------------------------------------------
# inputs
# ---------------------------------------------------------------------------------------------


def test_a_polars_date_column_is_never_fitted(
    data: np.ndarray, days: list[dt.date], polars_frame: pl.DataFrame
) -> None:
    """Before the fix the date column was fitted as a fourth series (days as integers), which
    failed with a misleading collinearity/singular-covariance error. Now it dates the rows."""
    fit = arlib.fit_var(polars_frame, 2)
    plain = arlib.fit_var(data, 2)
    assert fit.names == NAMES
    assert fit.n == 3
    np.testing.assert_array_equal(fit.params, plain.params)  # the same rows, bit for bit
    np.testing.assert_array_equal(fit.sigma_u, plain.sigma_u)
    np.testing.assert_array_equal(fit.dates, np.array(days, dtype="datetime64[D]"))
    assert fit.date == _day(days[-1])
    np.testing.assert_array_equal(fit.resid_dates, fit.dates[2:])
    # consecutive calendar days: the old code fitted them as a trend-like series and refused
    # the data with a misleading collinearity error naming 'y0.L1' (measured before the fix)
    daily = polars_frame.with_columns(
        pl.date_range(
            dt.date(2024, 1, 1), dt.date(2024, 1, 1) + dt.timedelta(days=T - 1), eager=True
        ).alias("date")
    )
    assert arlib.fit_var(daily, 2).names == NAMES


def test_a_date_column_anywhere_and_a_datetime_column_date_the_rows(
    data: np.ndarray, days: list[dt.date]
) -> None:
    stamps = [dt.datetime(d.year, d.month, d.day) for d in days]
    frame = pl.DataFrame({"spx": data[:, 0], "when": stamps, "ust10y": data[:, 1]})
    fit = arlib.fit_var(frame, 1)
    assert fit.names == ("spx", "ust10y")
    assert fit.dates is not None and fit.dates.dtype == np.dtype("datetime64[D]")  # midnight → day
    pdf = pd.DataFrame({"spx": data[:, 0], "when": pd.to_datetime(days), "ust10y": data[:, 1]})
    np.testing.assert_array_equal(arlib.fit_var(pdf, 1).dates, fit.dates)
    objects = pd.DataFrame({"day": days, "spx": data[:, 0], "ust10y": data[:, 1]})  # dt.date
    np.testing.assert_array_equal(arlib.fit_var(objects, 1).dates, fit.dates)


def test_pandas_frame_names_and_index_dates(
    data: np.ndarray, days: list[dt.date], pandas_frame: pd.DataFrame
) -> None:
    fit = arlib.fit_var(pandas_frame, 2)
    assert fit.names == NAMES
    np.testing.assert_array_equal(fit.params, arlib.fit_var(data, 2).params)
    assert fit.date == _day(days[-1])
    # a frame without a DatetimeIndex: names, no dates
    bare = arlib.fit_var(pandas_frame.reset_index(drop=True), 2)
    assert bare.names == NAMES and bare.dates is None and bare.date is None


def test_series_and_integer_columns(data: np.ndarray) -> None:
    s = pd.Series(data[:, 0], name="spx")
    assert arlib.fit_var(s, 2).names == ("spx",)
    assert arlib.fit_var(pl.Series("oil", data[:, 2]), 2).names == ("oil",)
    counts = pl.DataFrame({"a": np.arange(T) % 7, "b": (np.arange(T) * 3) % 11})
    fit = arlib.fit_var(counts, 1)
    np.testing.assert_array_equal(
        fit.y, np.column_stack([np.arange(T) % 7, (np.arange(T) * 3) % 11])
    )


@pytest.mark.parametrize(
    ("frame", "pattern"),
    [
        (pl.DataFrame({"x": [1.0, 2.0], "ticker": ["a", "b"]}), r"column 'ticker' has type String"),
        (
            pl.DataFrame({"x": [1.0, 2.0], "flag": [True, False]}),
            r"column 'flag' has type Boolean.*yes/no",
        ),
        (
            pd.DataFrame({"x": [1.0, 2.0], "ticker": ["a", "b"]}),
            r"column 'ticker' has type .*`y.drop\(columns='ticker'\)`",
        ),
        (
            pd.DataFrame({"x": [1.0, 2.0]}, index=pd.to_datetime(["2024-01-02", "2024-01-01"])),
            r"^`y` DatetimeIndex must be strictly increasing .*row 1 \(2024-01-01\)",
        ),
        (pd.DataFrame({"x": [1.0, 2.0], "flag": [True, False]}), r"column 'flag' has type bool"),
        (
            pl.DataFrame(
                {
                    "d": [dt.date(2024, 1, 1), dt.date(2024, 1, 2)],
                    "e": [dt.date(2024, 1, 1)] * 2,
                    "x": [1.0, 2.0],
                }
            ),
            r"more than one date column \('d', 'e'\)",
        ),
        (
            pd.DataFrame(
                {"d": pd.to_datetime(["2024-01-01", "2024-01-02"]), "x": [1.0, 2.0]},
                index=pd.to_datetime(["2024-01-01", "2024-01-02"]),
            ),
            r"more than one date column \('d', the DatetimeIndex\)",
        ),
        (
            pl.DataFrame({"d": [dt.date(2024, 1, 2), dt.date(2024, 1, 1)], "x": [1.0, 2.0]}),
            r"date column 'd' must be strictly increasing.*row 1 \(2024-01-01\).*row 0 \(2024-01-02\); sort",
        ),
        (
            pl.DataFrame({"d": [dt.date(2024, 1, 1), None], "x": [1.0, 2.0]}),
            r"date column 'd' is missing at row 1",
        ),
        (
            pd.DataFrame(
                {"x": [1.0, 2.0]}, index=pd.DatetimeIndex(["2024-01-01", "2024-01-02"], tz="UTC")
            ),
            r"DatetimeIndex has time zone UTC.*tz_localize\(None\)",
        ),
        (
            pl.DataFrame({"d": [dt.date(2024, 1, 1), dt.date(2024, 1, 2)]}),
            r"date column is not a series",
        ),
    ],
)
def test_bad_frames_name_the_column_and_the_fix(frame: object, pattern: str) -> None:
    with pytest.raises(arlib.InvalidInputError, match=pattern):
        arlib.fit_var(frame, 1)


def test_frame_with_names_or_dates_twice_is_refused(
    data: np.ndarray, days: list[dt.date], polars_frame: pl.DataFrame
) -> None:
    with pytest.raises(
        arlib.InvalidInputError, match=r"`names` was given together with a DataFrame"
    ):
        arlib.fit_var(polars_frame, 1, names=["a", "b", "c"])
    with pytest.raises(arlib.InvalidInputError, match=r"`dates` was given together with"):
        arlib.fit_var(polars_frame, 1, dates=days)
    with pytest.raises(arlib.InvalidInputError, match=r"`dates` has 3 dates for 160 rows"):
        arlib.fit_var(data, 1, dates=days[:3])


def test_gaps_in_a_frame_name_the_date(data: np.ndarray, days: list[dt.date]) -> None:
    values = data[:, 0].copy()
    values[7] = np.nan
    frame = pl.DataFrame({"date": days, "spx": values, "ust10y": data[:, 1]})
    with pytest.raises(
        arlib.InvalidInputError, match=r"NaN at row 7 \(2024-01-10\) of series 'spx'"
    ):
        arlib.fit_var(frame, 1)
    nulls = frame.with_columns(
        pl.when(pl.int_range(pl.len()) == 7).then(None).otherwise(pl.col("spx")).alias("spx")
    )
    with pytest.raises(arlib.InvalidInputError, match=r"NaN at row 7 \(2024-01-10\)"):
        arlib.fit_var(nulls, 1)
    # rolling windows treat the null as a gap, as a NaN in an array
    roll = arlib.rolling_var(nulls, 40, 1, 4, granger=False)
    np.testing.assert_array_equal(
        roll.ok,
        arlib.rolling_var(np.column_stack([values, data[:, 1]]), 40, 1, 4, granger=False).ok,
    )


def test_numpy_arrays_with_dates(data: np.ndarray, days: list[dt.date]) -> None:
    fit = arlib.fit_var(data, 2, names=NAMES, dates=[d.isoformat() for d in days])
    assert fit.date == _day(days[-1])
    assert arlib.fit_var(data, 2).dates is None  # arrays without dates: as before


# ---------------------------------------------------------------------------------------------
# names and dates through every result
# ---------------------------------------------------------------------------------------------


def test_names_and_dates_survive_every_result(
    data: np.ndarray, days: list[dt.date], polars_frame: pl.DataFrame, pandas_frame: pd.DataFrame
) -> None:
    last = _day(days[-1])
    for frame in (polars_frame, pandas_frame):
        fit = arlib.fit_var(frame, 2)
        plain = arlib.fit_var(data, 2)
        irf = arlib.impulse_responses(fit, 6, shocks="generalized")
        assert irf.names == NAMES and irf.date == last and irf.kind == "generalized"
        assert irf.axes == ("horizon", "response", "shock")
        np.testing.assert_array_equal(irf, arlib.impulse_responses(plain, 6, shocks="generalized"))
        cum = arlib.impulse_responses(fit, 6, cumulative=True)
        assert cum.kind == "cholesky cumulative"
        ma = arlib.ma_coefficients(fit, 4)
        assert ma.names == NAMES and ma.axes == ("horizon", "response", "innovation")
        fevd = arlib.variance_decomposition(fit, 5)
        assert (
            fevd.names == NAMES and fevd.date == last and fevd.axes == ("step", "variable", "shock")
        )
        np.testing.assert_array_equal(fevd, arlib.variance_decomposition(plain, 5))
        conn = arlib.connectedness(fit, 10)
        assert conn.names == NAMES and conn.date == last
        assert conn.total == arlib.connectedness(plain, 10).total
        test = arlib.granger_test(fit, "spx", ["ust10y", "oil"])
        assert test.caused == ("spx",) and test.causing == ("ust10y", "oil") and test.date == last
        assert test.p_value == arlib.granger_test(plain, 0, [1, 2]).p_value
        fc = arlib.forecast(fit, steps=3)
        assert fc.names == NAMES and fc.origin == last
        np.testing.assert_array_equal(fc.mean, arlib.forecast(plain, steps=3).mean)
        roll = arlib.rolling_var(frame, 60, 2, 8, step=10, responses="generalized")
        plain_roll = arlib.rolling_var(data, 60, 2, 8, step=10, responses="generalized")
        assert roll.names == NAMES
        np.testing.assert_array_equal(roll.dates, np.array(days, dtype="datetime64[D]")[roll.ends])
        np.testing.assert_array_equal(roll.total_connectedness, plain_roll.total_connectedness)
        assert plain_roll.dates is None
        assert arlib.select_lags(frame, 4).best == arlib.select_lags(data, 4).best


def test_forecast_history_frame_sets_origin_and_column_order(
    data: np.ndarray, days: list[dt.date], polars_frame: pl.DataFrame
) -> None:
    fit = arlib.fit_var(polars_frame, 2)
    head = polars_frame.head(100).select("oil", "date", "spx", "ust10y")  # columns shuffled
    fc = arlib.forecast(fit, head, steps=2)
    assert fc.origin == _day(days[99])
    np.testing.assert_array_equal(fc.mean, arlib.forecast(fit, data[:100], steps=2).mean)
    with pytest.raises(arlib.InvalidInputError, match=r"missing: \['oil'\]"):
        arlib.forecast(fit, polars_frame.drop("oil"), steps=2)


def test_labelled_arrays_stay_numpy_and_shed_labels_when_changed(
    polars_frame: pl.DataFrame,
) -> None:
    irf = arlib.impulse_responses(arlib.fit_var(polars_frame, 2), 4)
    assert isinstance(irf, np.ndarray) and not irf.flags.writeable
    for derived in (irf * 2, irf[1], irf.sum(axis=0), np.cumsum(irf, axis=0), irf - irf):
        assert type(derived) is np.ndarray  # arithmetic, slicing, numpy functions: plain arrays
    with pytest.raises(arlib.InvalidInputError, match="labels no longer apply"):
        irf.transpose(0, 2, 1).to_frame()  # a transposed view would mislabel response/shock
    kept = copy.deepcopy(irf)
    assert kept.names == NAMES and kept.date == irf.date
    back = pickle.loads(pickle.dumps(irf))
    assert back.names == NAMES and back.kind == "cholesky"
    np.testing.assert_array_equal(back, irf)


# ---------------------------------------------------------------------------------------------
# frames out, and back
# ---------------------------------------------------------------------------------------------


def _array_from_long(
    frame: pd.DataFrame, axes: tuple[str, ...], shape: tuple[int, ...]
) -> np.ndarray:
    """Rebuild the array from a long frame by its label columns (not by row order)."""
    out = np.full(shape, np.nan)
    for row in frame.itertuples(index=False):
        idx = []
        for axis, size in zip(axes, shape, strict=True):
            label = getattr(row, axis)
            idx.append(
                NAMES.index(label)
                if isinstance(label, str)
                else int(label) - (1 if axis in ("step", "lag") else 0)
            )
            assert 0 <= idx[-1] < size
        out[tuple(idx)] = row.value
    return out


def test_response_and_decomposition_frames_round_trip(
    days: list[dt.date], polars_frame: pl.DataFrame
) -> None:
    fit = arlib.fit_var(polars_frame, 2)
    for result in (
        arlib.impulse_responses(fit, 5, shocks="generalized"),
        arlib.variance_decomposition(fit, 5, method="generalized"),
        arlib.ma_coefficients(fit, 3),
    ):
        frame = result.to_frame()
        assert list(frame.columns) == ["date", *result.axes, "value"]
        assert len(frame) == result.size
        assert (frame["date"] == pd.Timestamp(days[-1])).all()
        np.testing.assert_array_equal(_array_from_long(frame, result.axes, result.shape), result)
        # the same table from polars (its dates in ms, pandas' in s: values compared)
        pd.testing.assert_frame_equal(frame, result.to_polars().to_pandas(), check_dtype=False)
    fevd = arlib.variance_decomposition(fit, 5)
    assert fevd.to_frame()["step"].min() == 1  # steps count from 1, horizons from 0
    assert arlib.impulse_responses(fit, 5).to_frame()["horizon"].min() == 0


def test_fit_connectedness_granger_forecast_frames(
    days: list[dt.date], polars_frame: pl.DataFrame
) -> None:
    fit = arlib.fit_var(polars_frame, 2)
    coef = fit.to_polars()
    assert coef.columns == ["date", "equation", "regressor", "estimate", "stderr"]
    assert coef.schema["date"] == pl.Date
    # back to B (k, n): pivot the long table by regressor × equation
    wide = coef.pivot(on="equation", index="regressor", values="estimate")
    B = wide.select(list(NAMES)).to_numpy()
    assert wide["regressor"].to_list() == list(fit.regressor_names)
    np.testing.assert_array_equal(B, fit.params)
    one = coef.filter((pl.col("equation") == "ust10y") & (pl.col("regressor") == "oil.L2"))
    assert (
        one["estimate"].item() == fit.coefs[1, 1, 2]
        and one["stderr"].item() == fit.coefs_stderr[1, 1, 2]
    )

    conn = arlib.connectedness(fit, 10)
    table = conn.to_frame()
    assert list(table.columns) == ["date", "variable", "shock", "value"]
    np.testing.assert_array_equal(
        _array_from_long(table, ("variable", "shock"), (3, 3)), conn.table
    )
    received = table[table.variable != table.shock].groupby("variable")["value"].sum()
    np.testing.assert_allclose(received[list(NAMES)].to_numpy(), conn.from_others, rtol=1e-13)

    test = arlib.granger_test(fit, ["spx", "oil"], "ust10y")
    row = test.to_polars().row(0, named=True)
    assert row["caused"] == ["spx", "oil"] and row["causing"] == ["ust10y"]
    assert row["p_value"] == test.p_value and (row["df_num"], row["df_den"]) == test.df
    assert row["date"] == days[-1] and row["null_hypothesis"] == test.null_hypothesis
    assert test.to_frame().loc[0, "caused"] == ["spx", "oil"]

    fc = arlib.forecast(fit, steps=4)
    ff = fc.to_frame()
    assert list(ff.columns) == ["origin", "step", "series", "mean", "lower", "upper"]
    for col in ("mean", "lower", "upper"):
        wide_fc = ff.pivot(index="step", columns="series", values=col)[list(NAMES)].to_numpy()
        np.testing.assert_array_equal(wide_fc, getattr(fc, col))


def test_frames_without_dates_have_no_date_column(data: np.ndarray) -> None:
    fit = arlib.fit_var(data, 1)
    assert list(arlib.impulse_responses(fit, 2).to_frame().columns) == [
        "horizon",
        "response",
        "shock",
        "value",
    ]
    assert "date" not in fit.to_frame().columns
    assert "origin" not in arlib.forecast(fit, steps=1).to_polars().columns
    assert arlib.impulse_responses(fit, 2).to_frame()["response"].iloc[0] == "y0"


def test_rolling_frames(days: list[dt.date], polars_frame: pl.DataFrame) -> None:
    roll = arlib.rolling_var(polars_frame, 60, 2, 6, step=15, responses="cholesky")
    summary = roll.to_polars()
    assert summary.columns[:3] == ["date", "end", "start"]
    assert summary["date"].to_list() == [days[e] for e in roll.ends]
    np.testing.assert_array_equal(
        summary["total_connectedness"].to_numpy(), roll.total_connectedness
    )
    pair = roll.to_frame("pairwise")
    assert list(pair.columns) == ["date", "end", "variable", "shock", "value"]
    assert len(pair) == len(roll) * 9
    w = 2
    at = pair[pair.end == roll.ends[w]]
    np.testing.assert_array_equal(
        _array_from_long(at, ("variable", "shock"), (3, 3)), roll.pairwise[w]
    )
    resp = roll.to_polars("responses").filter(pl.col("end") == roll.ends[w]).to_pandas()
    np.testing.assert_array_equal(
        _array_from_long(resp, ("horizon", "response", "shock"), (7, 3, 3)), roll.responses[w]
    )
    coefs = roll.to_frame("coefs")
    assert list(coefs.columns) == ["date", "end", "lag", "equation", "series", "value"]
    with pytest.raises(arlib.InvalidInputError, match="no `decomposition`"):
        roll.to_frame("decomposition")
    with pytest.raises(arlib.InvalidInputError, match="`field` must be one of"):
        roll.to_frame("nonsense")


# ---------------------------------------------------------------------------------------------
# window ends as dates
# ---------------------------------------------------------------------------------------------


def test_rolling_ends_and_after_as_dates(
    data: np.ndarray, days: list[dt.date], polars_frame: pl.DataFrame
) -> None:
    rows = np.array([70, 100, 159])
    by_row = arlib.rolling_var(data, 60, 2, 5, ends=rows)
    by_date = arlib.rolling_var(polars_frame, 60, 2, 5, ends=[days[r] for r in rows])
    np.testing.assert_array_equal(by_date.ends, rows)
    np.testing.assert_array_equal(by_date.pairwise, by_row.pairwise)
    by_str = arlib.rolling_var(
        data, 60, 2, 5, dates=days, ends=np.array([days[r].isoformat() for r in rows])
    )
    np.testing.assert_array_equal(by_str.ends, rows)
    # `after` a date: windows ending after it (a date need not be a row: a Saturday works)
    saturday = days[120] + dt.timedelta(days=(5 - days[120].weekday()) % 7)
    after = arlib.rolling_var(polars_frame, 60, 2, 5, after=saturday)
    expect = arlib.rolling_var(
        data, 60, 2, 5, after=int(np.searchsorted(np.array(days), saturday)) - 1
    )
    np.testing.assert_array_equal(after.ends, expect.ends)
    assert after.dates is not None and after.dates[0] > np.datetime64(saturday)
    assert np.array_equal(
        arlib.rolling_var(polars_frame, 60, 2, 5, after=days[120]).ends,
        arlib.rolling_var(data, 60, 2, 5, after=120).ends,
    )


def test_rolling_dates_errors(
    data: np.ndarray, days: list[dt.date], polars_frame: pl.DataFrame
) -> None:
    with pytest.raises(
        arlib.InvalidInputError,
        match=r"`ends` names the date 2024-01-06, which is not a date of the data",
    ):
        arlib.rolling_var(polars_frame, 60, 2, 5, ends=[dt.date(2024, 1, 6)])  # a Saturday
    with pytest.raises(
        arlib.InvalidInputError, match=r"`ends` is given as dates, but the data has none"
    ):
        arlib.rolling_var(data, 60, 2, 5, ends=[days[100]])
    with pytest.raises(
        arlib.InvalidInputError, match=r"`after`=.* is a date, but the data has none"
    ):
        arlib.rolling_var(data, 60, 2, 5, after=days[100])
    with pytest.raises(
        arlib.InvalidInputError, match=r"`after` must be an integer row index \(or a date"
    ):
        arlib.rolling_var(polars_frame, 60, 2, 5, after="next week")
    with pytest.raises(arlib.InvalidInputError, match=r"`ends` contains row 10, outside"):
        arlib.rolling_var(polars_frame, 60, 2, 5, ends=[days[10]])


def test_concat_keeps_dates(polars_frame: pl.DataFrame, days: list[dt.date]) -> None:
    whole = arlib.rolling_var(polars_frame, 60, 1, 4, granger=False)
    late = arlib.rolling_var(polars_frame, 60, 1, 4, granger=False, after=days[110])
    early = arlib.rolling_var(
        polars_frame, 60, 1, 4, granger=False, ends=[days[r] for r in range(59, 111)]
    )
    joined = arlib.RollingVAR.concat([late, early])
    np.testing.assert_array_equal(joined.dates, whole.dates)
    undated = arlib.rolling_var(polars_frame.drop("date"), 60, 1, 4, granger=False, after=110)
    with pytest.raises(arlib.InvalidInputError, match="only some have `dates`"):
        arlib.RollingVAR.concat([early, undated])


# ---------------------------------------------------------------------------------------------
# seeds
# ---------------------------------------------------------------------------------------------


def test_seeds_are_accepted_the_same_way_everywhere(polars_frame: pl.DataFrame) -> None:
    """Before the fix simulate_var refused the integer seed that irf_bands accepts."""
    fit = arlib.fit_var(polars_frame, 1)
    by_int = arlib.simulate_var(fit, 20, 7)
    by_gen = arlib.simulate_var(fit, 20, np.random.default_rng(7))
    np.testing.assert_array_equal(by_int, by_gen)  # an int seed is default_rng(seed)
    np.testing.assert_array_equal(by_int, arlib.simulate_var(fit, 20, rng=np.int64(7)))
    assert arlib.simulate_var(fit, 5).shape == (5, 3)  # None: fresh entropy
    bands_int = arlib.irf_bands(fit, 3, draws=20, rng=7)
    bands_gen = arlib.irf_bands(fit, 3, draws=20, rng=np.random.default_rng(7))
    np.testing.assert_array_equal(bands_int.lower, bands_gen.lower)
    for bad in (True, 1.5, "7", np.random.RandomState(7), -1):
        with pytest.raises(arlib.InvalidInputError, match=r"`rng`"):
            arlib.simulate_var(fit, 5, bad)  # type: ignore[arg-type]  # refused on purpose
        with pytest.raises(arlib.InvalidInputError, match=r"`rng`"):
            arlib.irf_bands(fit, 3, draws=20, rng=bad)  # type: ignore[arg-type]  # refused on purpose


def test_to_frame_without_pandas_says_what_to_install(
    polars_frame: pl.DataFrame, monkeypatch: pytest.MonkeyPatch
) -> None:
    irf = arlib.impulse_responses(arlib.fit_var(polars_frame, 1), 2)
    monkeypatch.setitem(__import__("sys").modules, "pandas", None)  # import pandas now fails
    with pytest.raises(ImportError, match=r"needs pandas, which is not installed.*to_polars\(\)"):
        irf.to_frame()
    assert irf.to_polars().height == irf.size


def test_readme_python_api_example_runs(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """The README's data-frame example, run as written on a prices.csv of business days."""
    readme = (Path(__file__).resolve().parents[2] / "README.md").read_text(encoding="utf-8")
    section = readme.split("### The Python API with your own data frames", 1)[1]
    code = re.search(r"```python\n(.*?)```", section, re.S)
    assert code is not None
    days = pl.date_range(dt.date(2023, 1, 2), dt.date(2024, 12, 31), eager=True)
    days = days.filter(days.dt.weekday() <= 5)
    y = simulate(np.stack([A1, A2]), SIGMA, days.len(), seed=3)
    prices = pl.DataFrame({"date": days, "equity": y[:, 0], "rates": y[:, 1], "oil": y[:, 2]})
    prices.write_csv(tmp_path / "prices.csv")
    monkeypatch.chdir(tmp_path)
    scope: dict[str, object] = {}
    exec(compile(code.group(1), "README.md", "exec"), scope)
    roll = scope["roll"]
    assert isinstance(roll, arlib.RollingVAR)
    assert [str(d) for d in roll.dates] == ["2024-06-28", "2024-12-31"]  # type: ignore[union-attr]  # dates are known here
    assert scope["fit"].names == ("equity", "rates", "oil")  # type: ignore[attr-defined]  # a VARFit


def test_a_period_index_dates_rows_by_the_period_end(data: np.ndarray) -> None:
    quarters = pd.period_range("1990Q1", periods=T, freq="Q")
    fit = arlib.fit_var(pd.DataFrame(data, columns=list(NAMES), index=quarters), 1)
    assert fit.dates is not None
    assert str(fit.dates[0]) == "1990-03-31" and str(fit.dates[1]) == "1990-06-30"
    assert fit.date == np.datetime64(quarters[-1].end_time.date(), "D")


def test_tvp_takes_frames_and_checks_their_series_against_the_state(
    data: np.ndarray, days: list[dt.date], polars_frame: pl.DataFrame
) -> None:
    first = arlib.tvp_var(polars_frame.head(100), 1, 4, training=40)
    assert first.names == NAMES
    all_days = np.array(days, dtype="datetime64[D]")
    np.testing.assert_array_equal(first.dates, all_days[first.ends])  # ends count rows of y
    more = arlib.tvp_var(polars_frame.slice(100), horizon=4, state=first.state)
    np.testing.assert_array_equal(more.dates, all_days[100:])
    np.testing.assert_array_equal(more.ends, np.arange(100, T))
    np.testing.assert_array_equal(
        more.pairwise,
        arlib.tvp_var(data[100:], horizon=4, state=first.state).pairwise,
    )
    with pytest.raises(
        arlib.InvalidInputError, match=r"series \['oil', 'spx', 'ust10y'\] but the state"
    ):
        arlib.tvp_var(
            polars_frame.slice(100).select("date", "oil", "spx", "ust10y"),
            horizon=4,
            state=first.state,
        )


def test_decimal_and_nullable_columns_are_series(data: np.ndarray) -> None:
    """Prices read from a database often arrive as decimals; they are numbers like any other."""
    from decimal import Decimal

    text = [f"{v:.6f}" for v in data[:, 0]]
    expect = np.column_stack([np.array(text, dtype=float), data[:, 1]])
    frame = pl.DataFrame({"px": [Decimal(t) for t in text], "ust10y": data[:, 1]})
    assert frame.schema["px"].is_decimal()
    fit = arlib.fit_var(frame, 1)
    np.testing.assert_array_equal(fit.y, expect)
    pdf = pd.DataFrame(
        {"px": [Decimal(t) for t in text], "ust10y": pd.array(data[:, 1], dtype="Float64")}
    )
    np.testing.assert_array_equal(arlib.fit_var(pdf, 1).y, expect)


def test_bands_carry_labels_and_frames(days: list[dt.date], polars_frame: pl.DataFrame) -> None:
    fit = arlib.fit_var(polars_frame, 1)
    irf = arlib.irf_bands(fit, 4, draws=20, rng=1)
    assert irf.names == NAMES and irf.date == _day(days[-1])
    assert irf.axes == ("horizon", "response", "shock")
    frame = irf.to_frame()
    assert list(frame.columns) == [
        "date",
        "horizon",
        "response",
        "shock",
        "point",
        "lower",
        "upper",
        "median",
        "std",
    ]
    row = frame[(frame.horizon == 2) & (frame.response == "oil") & (frame.shock == "spx")]
    assert row["lower"].item() == irf.lower[2, 2, 0] and row["point"].item() == irf.point[2, 2, 0]
    asym = arlib.irf_bands(fit, 4, kind="asymptotic")
    assert asym.to_polars().height == 5 * 9
    fevd = arlib.fevd_bands(fit, 3, draws=20, rng=1)
    assert fevd.axes == ("step", "variable", "shock") and fevd.to_frame()["step"].min() == 1
    conn = arlib.connectedness_bands(fit, 5, draws=20, rng=1)
    assert conn.date == _day(days[-1])
    total = conn.total.to_frame()
    assert (
        list(total.columns) == ["date", "point", "lower", "upper", "median", "std"]
        and len(total) == 1
    )
    assert conn.to_others.to_polars()["series"].to_list() == list(NAMES)
    assert conn.table.axes == ("variable", "shock")


def test_readme_lists_every_rolling_field_layout() -> None:
    """README's list of `RollingVAR.to_frame(field)` axes is the code's (each field's `_axes`)."""
    import dataclasses

    left = {f.name: f.metadata["axes"] for f in dataclasses.fields(arlib.RollingVAR) if "axes" in f.metadata}
    readme = (Path(__file__).resolve().parents[2] / "README.md").read_text(encoding="utf-8")
    text = readme.split("The axes of `RollingVAR.to_frame(field)`:", 1)[1].split("\n\n", 1)[0]
    text = " ".join(text.split())
    for clause in text.rstrip(".").split(";"):
        fields, axes = clause.split("→")
        names = re.findall(r"`(\w+)`", fields)
        listed = tuple(re.findall(r"`(\w+)`", axes))
        for name in names:
            assert left.pop(name) == listed, name
    assert not left, f"README does not list {sorted(left)}"
