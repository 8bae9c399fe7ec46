"""model = "tvp" universes through the job steps: config rules, storage, and the nightly filter.

The data are an invented VAR(1) scenario (tests.pipeline.helpers.simulate_prices): the first rows
of simulate_prices(T) do not depend on T, so a longer file is the same history plus new days.
"""

from __future__ import annotations

import textwrap
from pathlib import Path

import numpy as np
import polars as pl
import pytest

import arlib
from pipeline import jobs
from pipeline import warehouse as wh
from pipeline.config import Config, load_config
from pipeline.errors import ConfigError
from tests.pipeline.helpers import simulate_prices, write_config

HEAD = """
[warehouse]
path = "wh.duckdb"
snapshot = "serving.duckdb"

[[sources]]
name = "prices"
kind = "csv"
path = "prices.csv"
"""

ROLLING = """
[[universes]]
name = "trio"
series = ["S0", "S1", "S2"]
window = 60
step = 1
lags = 2
horizon = 6
identification = "generalized"
"""

TVP = """
[[universes]]
name = "trio_tvp"
series = ["S0", "S1", "S2"]
model = "tvp"
lags = 2
horizon = 6
frequency_bands = [5, 20]
joint = true
[universes.tvp]
kappa1 = 0.98
kappa2 = 0.97
training = 40
"""

#: every table a tvp universe writes, with its sort keys (granger/responses/decompositions: none)
TABLES = {
    "window_fits": ["window_end"],
    "connectedness": ["window_end"],
    "directional": ["window_end", "series"],
    "pairwise": ["window_end", "source", "target"],
    "window_params": ["window_end"],
    "band_connectedness": ["window_end", "band"],
    "joint_connectedness": ["window_end"],
    "joint_band_connectedness": ["window_end", "band"],
    "tvp_state": ["window_end"],
}


def setup(folder: Path, T: int, body: str = TVP) -> Config:
    folder.mkdir(parents=True, exist_ok=True)
    simulate_prices(T).write_csv(folder / "prices.csv")
    return load_config(write_config(folder, HEAD + textwrap.dedent(body)))


def night(cfg: Config, *, full: bool = False) -> list[jobs.UniverseResult]:
    for s in cfg.sources:
        assert jobs.ingest_source(cfg.warehouse.path, s).status == "succeeded"
    out = [jobs.run_universe(cfg.warehouse.path, u, full=full) for u in cfg.universes]
    for r in out:
        assert r.status == "succeeded", r.message
    return out


def stored(cfg: Config, universe: str = "trio_tvp") -> dict[str, pl.DataFrame]:
    con = wh.connect(cfg.warehouse.path)
    try:
        return {
            t: wh.query(con, f"SELECT * FROM {t} WHERE universe = ? ORDER BY {', '.join(k)}", [universe]).drop("run_id")
            for t, k in TABLES.items()
        }
    finally:
        con.close()


def assert_same(a: dict[str, pl.DataFrame], b: dict[str, pl.DataFrame], *, atol: float) -> float:
    """Same rows and text in every table; floats and float lists within `atol`. Returns the max gap."""
    worst = 0.0
    for t in TABLES:
        x, y = a[t], b[t]
        assert x.columns == y.columns and x.height == y.height, t
        for c in x.columns:
            if x[c].dtype == pl.List(pl.Float64):
                u = np.array(x[c].to_list(), dtype=float)
                v = np.array(y[c].to_list(), dtype=float)
            elif x[c].dtype == pl.Float64:
                u, v = x[c].to_numpy().astype(float), y[c].to_numpy().astype(float)
            else:
                assert x[c].to_list() == y[c].to_list(), (t, c)
                continue
            assert u.shape == v.shape, (t, c)
            finite = np.isfinite(u)
            np.testing.assert_array_equal(np.where(finite, 0.0, u), np.where(finite, 0.0, v))  # NaN, inf alike
            diff = np.abs(u[finite] - v[finite])
            gap = float(diff.max()) if diff.size else 0.0
            assert gap <= atol, (t, c, gap)
            worst = max(worst, gap)
    return worst


# ---- config ---------------------------------------------------------------------------------


def test_tvp_universe_loads_with_its_settings(tmp_path: Path) -> None:
    cfg = setup(tmp_path, 10, ROLLING + TVP)
    rolling, tvp = cfg.universes
    assert rolling.model == "rolling" and tvp.model == "tvp"
    assert tvp.window is None and (tvp.tvp.kappa1, tvp.tvp.kappa2, tvp.tvp.training) == (0.98, 0.97, 40)
    assert tvp.tvp.covariance == "kronecker"
    # the keys added for tvp leave a rolling universe's fit hash as it was: this value was computed
    # by the code before `model` existed (commit f1c9a5e) for the same universe
    assert rolling.config_hash == "3ac66f213316fce5"


def test_tvp_config_errors_name_key_and_fix(tmp_path: Path) -> None:
    bad = TVP.replace('model = "tvp"', 'model = "tvp"\nwindow = 60\nlag_selection = { criterion = "aic", max_lags = 2 }')
    bad = bad.replace("lags = 2\n", "", 1).replace("training = 40", "training = 5")
    with pytest.raises(ConfigError) as info:
        setup(tmp_path, 10, bad)
    text = str(info.value)
    assert "trio_tvp'].window` is not used by a model = \"tvp\" universe" in text
    assert "lag_selection` cannot choose p per date" in text
    no_window = ROLLING.replace("window = 60\n", "") + "[universes.tvp]\nkappa1 = 0.9\n"
    with pytest.raises(ConfigError) as info:
        setup(tmp_path, 10, no_window)
    text = str(info.value)
    assert "trio'].window` is required but missing" in text
    assert "trio'].tvp` is set but model is not 'tvp'" in text
    with pytest.raises(ConfigError, match=r"tvp\.training` = 5 rows cannot give a least-squares prior.*training >= 12"):
        setup(tmp_path, 10, TVP.replace("training = 40", "training = 5"))
    with pytest.raises(ConfigError, match=r"kappa1` is 1.5.*\(0, 1\]"):
        setup(tmp_path, 10, TVP.replace("kappa1 = 0.98", "kappa1 = 1.5"))


# ---- storage --------------------------------------------------------------------------------


def test_tvp_results_are_arlibs_filter_stored_per_date(tmp_path: Path) -> None:
    cfg = setup(tmp_path, 120)
    night(cfg)
    got = stored(cfg)
    con = wh.connect(cfg.warehouse.path)
    try:
        prepared = wh.query(con, "SELECT date, series, value FROM prepared WHERE universe = 'trio_tvp' ORDER BY date, series")
    finally:
        con.close()
    wide = prepared.pivot(on="series", index="date", values="value").sort("date")
    y = wide.select("S0", "S1", "S2").to_numpy()
    ref = arlib.tvp_var(
        y, 2, 6, kappa1=0.98, kappa2=0.97, training=40, bands=[(1, 5), (5, 20), (20, np.inf)], joint=True,
        names=["S0", "S1", "S2"],
    )
    dates = wide["date"].to_list()
    assert got["connectedness"]["window_end"].to_list() == dates[40:]
    assert set(got["window_fits"]["window_start"].to_list()) == {dates[40]}
    np.testing.assert_allclose(got["connectedness"]["total"].to_numpy(), ref.total_connectedness, rtol=0, atol=1e-12)
    np.testing.assert_allclose(
        np.array(got["window_params"]["coefs"].to_list()).reshape(ref.coefs.shape), ref.coefs, rtol=0, atol=1e-12
    )
    np.testing.assert_allclose(
        np.array(got["joint_connectedness"]["total"].to_list()), ref.joint_total, rtol=0, atol=1e-12
    )
    bands = got["band_connectedness"]["total"].to_numpy().reshape(-1, 3)
    np.testing.assert_allclose(bands, ref.band_total, rtol=0, atol=1e-12)
    # joint connectedness by band reaches its declared table with no TVP-specific writer
    joint_bands = got["joint_band_connectedness"]["total"].to_numpy().reshape(-1, 3)
    np.testing.assert_allclose(joint_bands, ref.joint_band_total, rtol=0, atol=1e-12)
    (state,) = got["tvp_state"].iter_rows(named=True)
    assert state["window_end"] == dates[-1] and state["row"] == len(dates)
    np.testing.assert_allclose(np.reshape(state["cov"], (7, 7)), ref.state.cov, rtol=1e-10, atol=0)
    np.testing.assert_array_equal(state["centre"], ref.state.centre)  # V's coordinates travel with it
    # no Granger tests, stored responses or decompositions for a filtered date
    con = wh.connect(cfg.warehouse.path)
    try:
        for t in ("granger", "responses", "decompositions"):
            assert con.execute(f"SELECT count(*) FROM {t}").fetchone() == (0,)
    finally:
        con.close()


# ---- the nightly filter ---------------------------------------------------------------------


def test_nightly_tvp_updates_continue_the_stored_filter_like_a_full_refilter(tmp_path: Path) -> None:
    """Five nightly runs continue the stored state; the warehouse then equals one full re-filter."""
    nightly = setup(tmp_path / "nightly", 150, ROLLING + TVP)
    night(nightly)
    messages = []
    for T in (151, 152, 154, 155, 155):
        simulate_prices(T).write_csv(tmp_path / "nightly" / "prices.csv")
        results = night(nightly)
        messages.append(results[1].reason)
    assert messages[:4] == [
        "1 new date(s) filtered from the stored state",
        "1 new date(s) filtered from the stored state",
        "2 new date(s) filtered from the stored state",
        "1 new date(s) filtered from the stored state",
    ]
    assert messages[4] == "nothing changed"
    fresh = setup(tmp_path / "fresh", 155, ROLLING + TVP)
    night(fresh)
    gap = assert_same(stored(nightly), stored(fresh), atol=1e-10)
    assert gap < 1e-10  # measured: 0 (arlib continues with the same operations in the same order)
    # --full on the nightly warehouse gives the same again
    (_, full) = night(nightly, full=True)
    assert full.reason == "full re-filter requested"
    assert_same(stored(nightly), stored(fresh), atol=1e-10)


def test_revised_past_value_refilters_from_scratch(tmp_path: Path) -> None:
    cfg = setup(tmp_path / "a", 130)
    night(cfg)
    prices = simulate_prices(131)
    revised = prices.with_columns(pl.when(pl.int_range(pl.len()) == 100).then(pl.col("S1") * 1.01).otherwise(pl.col("S1")).alias("S1"))
    revised.write_csv(tmp_path / "a" / "prices.csv")
    (result,) = night(cfg)
    assert result.reason.startswith("data changed on or before the filter's last date")
    fresh = setup(tmp_path / "b", 131)
    revised.write_csv(tmp_path / "b" / "prices.csv")
    night(fresh)
    assert_same(stored(cfg), stored(fresh), atol=1e-10)
    # a config change re-filters too (and the new settings are used)
    changed = load_config(write_config(tmp_path / "a", HEAD + textwrap.dedent(TVP.replace("0.98", "0.95"))))
    (result,) = night(changed)
    assert result.reason == "config changed: re-filtering every date"
    assert stored(changed)["tvp_state"]["kappa1"].to_list() == [0.95]


def test_gap_rows_get_no_date_and_the_nightly_filter_steps_over_them(tmp_path: Path) -> None:
    """A series missing longer than max_fill_gap leaves gap rows: the filter skips them, and a night
    that adds a gap row and then complete rows still equals one full pass."""
    def prices(T: int) -> pl.DataFrame:
        df = simulate_prices(T)
        gap = pl.int_range(pl.len()).is_between(90, 94) | pl.int_range(pl.len()).is_between(121, 124)
        return df.with_columns(pl.when(gap).then(None).otherwise(pl.col("S1")).alias("S1"))

    cfg = setup(tmp_path / "a", 120)
    prices(120).write_csv(tmp_path / "a" / "prices.csv")
    night(cfg, full=True)
    prices(130).write_csv(tmp_path / "a" / "prices.csv")
    (result,) = night(cfg)
    got = stored(cfg)
    con = wh.connect(cfg.warehouse.path)
    try:
        prepared = wh.query(con, "SELECT date, bool_and(value IS NOT NULL) AS complete FROM prepared "
                                 "WHERE universe = 'trio_tvp' GROUP BY date ORDER BY date")
    finally:
        con.close()
    complete = prepared.filter(pl.col("complete"))["date"].to_list()
    gaps = prepared.filter(~pl.col("complete"))["date"].to_list()
    first_night = simulate_prices(120)["date"][-1]
    new = [d for d in complete if d > first_night]
    assert any(d > first_night for d in gaps) and any(d < first_night for d in gaps)
    assert result.reason == f"{len(new)} new date(s) filtered from the stored state"
    assert got["connectedness"]["window_end"].to_list() == complete[40:]
    fresh = setup(tmp_path / "b", 130)
    prices(130).write_csv(tmp_path / "b" / "prices.csv")
    night(fresh)
    assert_same(got, stored(fresh), atol=1e-10)


def test_too_few_rows_for_the_training_sample_is_a_clear_failure(tmp_path: Path) -> None:
    cfg = setup(tmp_path, 35)
    (universe,) = cfg.universes
    for s in cfg.sources:
        jobs.ingest_source(cfg.warehouse.path, s)
    result = jobs.run_universe(cfg.warehouse.path, universe)
    assert result.status == "failed"
    assert "training sample takes 40, so no date can be filtered; lower [universes.tvp] training" in (result.message or "")
    con = wh.connect(cfg.warehouse.path)
    try:
        obs = wh.read_observations(con, universe.names)
    finally:
        con.close()
    from pipeline.prepare import prepare_universe

    problem = jobs.window_problem(prepare_universe(obs, universe), universe)
    assert problem is not None and "34 prepared row(s) with a value in every series" in problem
