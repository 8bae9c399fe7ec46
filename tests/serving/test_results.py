"""Declared result tables (serving/_schema.py `fill`): the pipeline writes them from an arlib
result by their declarations alone (pipeline/_fill.py) and `Snapshot.results` reads them back.

The round trip is checked on invented arrays for every declared table: what is read equals the
result's arrays at the fitted windows (NaN where a nullable column was NULL)."""

from __future__ import annotations

import datetime as dt
from types import SimpleNamespace

import duckdb
import numpy as np
import polars as pl
import pytest

from pipeline._fill import declared_tables
from serving import SCHEMA, Column, StoredArrayError, Table, ddl
from serving._results import stored_result

DECLARED = [t for t in SCHEMA if t.fill]
W, N, D = 6, 3, 3
PERIODS = ((1.0, 5.0), (5.0, 20.0), (20.0, float("inf")))


def _invented_result(rng: np.random.Generator) -> SimpleNamespace:
    """Every source attribute the declarations name, shaped (W, [d,] *shape), some NaN."""
    attrs: dict = {"band_periods": PERIODS, "band_truncation": 100}
    for t in DECLARED:
        lead = (W, D) if t.fill == "band" else (W,)
        for c in t.columns:
            if not c.source:
                continue
            a = rng.normal(size=(*lead, *(N for _ in c.shape)))
            if c.type == "BOOLEAN":
                a = a > 0
            elif not c.not_null and not c.shape:
                a[1] = np.nan  # a nullable scalar column: NaN is stored as NULL
            attrs.setdefault(c.source, a)
    return SimpleNamespace(**attrs)


def _head(k: np.ndarray, times: int) -> dict:
    ends = [dt.date(2024, 1, 1) + dt.timedelta(days=int(i)) for i in np.repeat(k, times)]
    return {"run_id": ["r"] * len(ends), "universe": ["u"] * len(ends), "window_end": pl.Series(ends, dtype=pl.Date)}


def _store(frames: dict[str, pl.DataFrame], shuffle: bool = False) -> duckdb.DuckDBPyConnection:
    con = duckdb.connect()
    for name, df in frames.items():
        con.execute(f"CREATE TABLE {name} ({ddl(name)})")
        arrow = df.sample(fraction=1.0, shuffle=True, seed=1).to_arrow() if shuffle else df.to_arrow()
        con.register("incoming", arrow)
        con.execute(f"INSERT INTO {name} SELECT * FROM incoming")
        con.unregister("incoming")
    return con


def test_every_declared_table_round_trips() -> None:
    rng = np.random.default_rng(5)
    result = _invented_result(rng)
    k = np.array([0, 2, 3, 5])  # fitted windows
    frames = declared_tables(result, k, _head)
    assert set(frames) == {t.name for t in DECLARED}
    con = _store(frames, shuffle=True)
    for t in DECLARED:
        order = "window_end, band" if t.fill == "band" else "window_end"
        got = stored_result(t, con.sql(f"SELECT * FROM {t.name} ORDER BY {order}").to_arrow_table(), N)
        assert got is not None and len(got.ends) == k.size
        assert got.ends == [dt.date(2024, 1, 1) + dt.timedelta(days=int(i)) for i in k]
        if t.fill == "band":
            assert got.periods == PERIODS and got.truncation == 100
        for c in t.columns:
            if c.source:
                np.testing.assert_array_equal(got[c.name], np.asarray(getattr(result, c.source))[k], err_msg=f"{t.name}.{c.name}")
                assert not got[c.name].flags.writeable
        with pytest.raises(KeyError, match="has no column"):
            got["nope"]


def test_a_result_without_the_needed_attribute_writes_nothing() -> None:
    assert declared_tables(SimpleNamespace(), np.arange(2), _head) == {}


def test_a_scalar_source_is_repeated_on_every_row() -> None:
    t = next(t for t in DECLARED if t.name == "shrinkage_fits")
    result = SimpleNamespace(tightness=np.array([0.1, 0.2, 0.3]), tightness_chosen=True,
                             log_marginal_likelihood=np.zeros(3), lag_decay=2.0)
    df = declared_tables(result, np.array([0, 2]), _head)[t.name]
    assert df["tightness"].to_list() == [0.1, 0.3]
    assert df["tightness_chosen"].to_list() == [True, True] and df["lag_decay"].to_list() == [2.0, 2.0]


def test_a_band_table_missing_a_band_is_refused() -> None:
    rng = np.random.default_rng(2)
    frames = declared_tables(_invented_result(rng), np.array([0, 1]), _head)
    con = _store({"band_connectedness": frames["band_connectedness"]})
    t = next(t for t in DECLARED if t.name == "band_connectedness")
    arrow = con.sql("SELECT * FROM band_connectedness WHERE NOT (band = 1 AND window_end = DATE '2024-01-02') "
                        "ORDER BY window_end, band").to_arrow_table()
    with pytest.raises(StoredArrayError, match="not whole windows of 3 bands"):
        stored_result(t, arrow, N)


def test_a_declaration_names_every_source() -> None:
    cols = (Column("run_id", "VARCHAR", True), Column("universe", "VARCHAR", True),
            Column("window_end", "DATE", True), Column("total", "DOUBLE", True))
    with pytest.raises(ValueError, match=r"declared columns \['total'\] name no `source`"):
        Table("x", "universe × window_end", "window", cols, fill="window", needs="x")
    with pytest.raises(ValueError, match="`fill` needs kind 'window'"):
        Table("x", "universe", "universe", cols, fill="window", needs="x")
