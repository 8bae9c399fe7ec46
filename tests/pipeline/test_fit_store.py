"""Fit + store through the job steps: stored numbers equal arlib's single fits; incremental runs.

The data are an invented VAR(1) scenario (tests.pipeline.helpers.simulate_prices).
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
from tests.pipeline.helpers import assert_frames_close, simulate_prices, write_config

CONFIG = """
[warehouse]
path = "wh.duckdb"
snapshot = "serving.duckdb"

[[sources]]
name = "prices"
kind = "csv"
path = "prices.csv"

[[universes]]
name = "trio"
series = ["S0", "S1", "S2"]
window = 60
step = 1
lags = 2
horizon = 6
identification = "generalized"
"""

RESULT_ORDER = {
    "window_fits": ["window_end"],
    "connectedness": ["window_end"],
    "directional": ["window_end", "series"],
    "pairwise": ["window_end", "source", "target"],
    "granger": ["window_end", "caused", "causing"],
    "window_params": ["window_end"],
    "responses": ["window_end"],
    "decompositions": ["window_end"],
}


def setup(tmp_path: Path, T: int = 90, extra: str = "") -> Config:
    simulate_prices(T).write_csv(tmp_path / "prices.csv")
    return load_config(write_config(tmp_path, CONFIG + textwrap.dedent(extra)))


def ingest(cfg: Config) -> jobs.IngestResult:
    (result,) = [jobs.ingest_source(cfg.warehouse.path, s) for s in cfg.sources]
    assert result.status == "succeeded", result.message
    return result


def results(cfg: Config, *, with_run_id: bool = True) -> dict[str, pl.DataFrame]:
    con = wh.connect(cfg.warehouse.path)
    try:
        out = {}
        for t, keys in RESULT_ORDER.items():
            df = wh.query(con, f"SELECT * FROM {t} ORDER BY {', '.join(keys)}")
            out[t] = df if with_run_id else df.drop("run_id")
        for t in ("prepared", "dropped_dates", "universe_series", "universes"):
            df = wh.query(con, f"SELECT * FROM {t} ORDER BY ALL")
            out[t] = df if with_run_id or "run_id" not in df.columns else df.drop("run_id")
        return out
    finally:
        con.close()


def runs(cfg: Config) -> pl.DataFrame:
    con = wh.connect(cfg.warehouse.path)
    try:
        return wh.query(con, "SELECT * FROM runs ORDER BY started")
    finally:
        con.close()


def test_first_run_stores_every_window(tmp_path: Path) -> None:
    cfg = setup(tmp_path)
    ingest(cfg)
    r = jobs.run_universe(cfg.warehouse.path, cfg.universes[0])
    assert (r.status, r.fitted, r.skipped, r.reason) == ("succeeded", 30, 0, "first run")
    got = results(cfg)
    # 90 prices → 89 log returns → windows ending at rows 59..88
    assert got["window_fits"].height == 30 and got["connectedness"].height == 30
    assert got["directional"].height == 30 * 3 and got["pairwise"].height == 30 * 9
    assert got["granger"].height == 30 * 6
    resp = got["responses"]["response"][0]
    assert len(resp) == (6 + 1) * 3 * 3
    assert len(got["decompositions"]["share"][0]) == 6 * 3 * 3
    assert got["window_fits"]["skip_reason"].null_count() == 30
    run = runs(cfg).row(-1, named=True)
    assert run["status"] == "succeeded" and run["windows_fitted"] == 30 and run["data_fingerprint"]


def test_stored_results_equal_arlib_single_fit(tmp_path: Path) -> None:
    """Connectedness and Granger stored for a window equal arlib's fit_var + connectedness +
    granger_test on the same prepared rows (read back from the warehouse's `prepared` table)."""
    cfg = setup(tmp_path)
    ingest(cfg)
    jobs.run_universe(cfg.warehouse.path, cfg.universes[0])
    got = results(cfg)
    names = ["S0", "S1", "S2"]
    prepared = got["prepared"].pivot(on="series", index="date", values="value").sort("date").select("date", *names)
    for end in (got["window_fits"]["window_end"][0], got["window_fits"]["window_end"][17], got["window_fits"]["window_end"][-1]):
        fit_row = got["window_fits"].filter(pl.col("window_end") == end).row(0, named=True)
        rows = prepared.filter(pl.col("date").is_between(fit_row["window_start"], end)).select(names).to_numpy()
        assert rows.shape == (60, 3)
        fit = arlib.fit_var(rows, 2, trend="c", names=names)
        conn = arlib.connectedness(fit, 6)
        stored_total = got["connectedness"].filter(pl.col("window_end") == end)["total"][0]
        # 1e-8: the engine's documented agreement with the single-fit functions
        assert stored_total == pytest.approx(conn.total, rel=1e-8, abs=1e-10)
        d = got["directional"].filter(pl.col("window_end") == end)
        for j, name in enumerate(names):
            row = d.filter(pl.col("series") == name).row(0, named=True)
            assert row["to_others"] == pytest.approx(conn.to_others[j], rel=1e-8, abs=1e-10)
            assert row["from_others"] == pytest.approx(conn.from_others[j], rel=1e-8, abs=1e-10)
            assert row["net"] == pytest.approx(conn.net[j], rel=1e-8, abs=1e-9)
        pw = got["pairwise"].filter(pl.col("window_end") == end)
        g = got["granger"].filter(pl.col("window_end") == end)
        for i, target in enumerate(names):
            for j, source in enumerate(names):
                share = pw.filter((pl.col("target") == target) & (pl.col("source") == source))["share"][0]
                assert share == pytest.approx(conn.table[i, j], rel=1e-8, abs=1e-10)
                if i == j:
                    continue
                test = arlib.granger_test(fit, caused=i, causing=j)
                row = g.filter((pl.col("caused") == target) & (pl.col("causing") == source)).row(0, named=True)
                assert row["f_stat"] == pytest.approx(test.f_stat, rel=1e-8)
                assert row["p_value"] == pytest.approx(test.p_value, rel=1e-8, abs=1e-12)
        params = got["window_params"].filter(pl.col("window_end") == end).row(0, named=True)
        np.testing.assert_allclose(np.reshape(params["coefs"], (2, 3, 3)), fit.coefs, rtol=1e-8, atol=1e-12)
        np.testing.assert_allclose(np.reshape(params["sigma_u"], (3, 3)), fit.sigma_u, rtol=1e-8, atol=1e-12)
        resp = got["responses"].filter(pl.col("window_end") == end)["response"][0]
        np.testing.assert_allclose(
            np.reshape(resp, (7, 3, 3)), arlib.impulse_responses(fit, 6, shocks="generalized"), rtol=1e-8, atol=1e-12
        )


def test_rerun_same_night_is_a_noop(tmp_path: Path) -> None:
    cfg = setup(tmp_path)
    ingest(cfg)
    jobs.run_universe(cfg.warehouse.path, cfg.universes[0])
    before = results(cfg)
    again = ingest(cfg)
    assert (again.rows_new, again.rows_revised) == (0, 0)
    r = jobs.run_universe(cfg.warehouse.path, cfg.universes[0])
    assert (r.status, r.fitted, r.reused, r.reason) == ("succeeded", 0, 30, "nothing changed")
    after = results(cfg)
    for name, frame in before.items():
        assert after[name].equals(frame), name  # identical content, run_ids included: no duplicates
    assert runs(cfg)["status"].to_list() == ["succeeded", "succeeded"]


def test_appending_a_day_fits_only_the_new_window(tmp_path: Path) -> None:
    cfg = setup(tmp_path)
    ingest(cfg)
    jobs.run_universe(cfg.warehouse.path, cfg.universes[0])
    before = results(cfg)
    simulate_prices(91).write_csv(tmp_path / "prices.csv")  # the same 90 days plus one
    assert ingest(cfg).rows_new == 3
    r = jobs.run_universe(cfg.warehouse.path, cfg.universes[0])
    assert (r.fitted, r.reused, r.reason) == (1, 30, "1 new window(s)")
    after = results(cfg)
    new_end = after["window_fits"]["window_end"].max()
    assert new_end not in before["window_fits"]["window_end"].to_list()
    for name in RESULT_ORDER:
        old_part = after[name].filter(pl.col("window_end") != new_end)
        assert old_part.equals(before[name]), name  # earlier windows untouched (same run_id too)
    # and an incremental run ends with the same numbers as refitting everything
    full = jobs.run_universe(cfg.warehouse.path, cfg.universes[0], full=True)
    assert full.fitted == 31
    refit = results(cfg, with_run_id=False)
    incremental = {k: v.drop("run_id") if "run_id" in v.columns else v for k, v in after.items()}
    for name in RESULT_ORDER:
        assert_frames_close(refit[name], incremental[name], what=name)


def test_revision_refits_the_windows_that_hold_it(tmp_path: Path) -> None:
    cfg = setup(tmp_path)
    ingest(cfg)
    jobs.run_universe(cfg.warehouse.path, cfg.universes[0])
    prices = simulate_prices(90)
    revised_day = prices["date"][70]
    prices = prices.with_columns(pl.when(pl.col("date") == revised_day).then(pl.col("S1") * 1.01).otherwise(pl.col("S1")).alias("S1"))
    prices.write_csv(tmp_path / "prices.csv")
    res = ingest(cfg)
    assert (res.rows_new, res.rows_revised) == (0, 1)
    con = wh.connect(cfg.warehouse.path)
    assert con.execute("SELECT series, date FROM revisions").fetchall() == [("S1", revised_day)]
    con.close()
    r = jobs.run_universe(cfg.warehouse.path, cfg.universes[0])
    # the price on row 70 changes the returns on prepared rows 69 and 70 (prepared row = price row − 1);
    # windows ending at rows 69..88 hold them (every window of 60 rows ending at ≥ 69 starts ≤ 29)
    assert (r.fitted, r.reused) == (20, 10)
    assert r.reason == "20 window(s) refitted after data changes"
    got = results(cfg, with_run_id=False)
    jobs.run_universe(cfg.warehouse.path, cfg.universes[0], full=True)
    refit = results(cfg, with_run_id=False)
    for name in RESULT_ORDER:
        assert_frames_close(refit[name], got[name], what=name)


def test_config_change_refits_everything(tmp_path: Path) -> None:
    cfg = setup(tmp_path)
    ingest(cfg)
    jobs.run_universe(cfg.warehouse.path, cfg.universes[0])
    cfg2 = load_config(write_config(tmp_path, CONFIG.replace("horizon = 6", "horizon = 4")))
    r = jobs.run_universe(cfg2.warehouse.path, cfg2.universes[0])
    assert (r.fitted, r.reason) == (30, "config changed: refitting every window")
    got = results(cfg2)
    assert got["responses"]["horizon"].unique().to_list() == [4]
    assert got["universes"]["config_hash"].to_list() == [cfg2.universes[0].config_hash]


def test_failing_universe_is_recorded_and_leaves_results(tmp_path: Path) -> None:
    cfg = setup(tmp_path)
    ingest(cfg)
    jobs.run_universe(cfg.warehouse.path, cfg.universes[0])
    before = results(cfg)
    bad = load_config(write_config(tmp_path, CONFIG.replace('"S2"]', '"S9"]'), name="bad.toml"))
    r = jobs.run_universe(bad.warehouse.path, bad.universes[0])
    assert r.status == "failed"
    assert r.message == "universe 'trio': series 'S9' has no observations in the warehouse; check its name or add a source that provides it"
    last = runs(cfg).row(-1, named=True)
    assert (last["status"], last["message"]) == ("failed", r.message)
    after = results(cfg)
    for name, frame in before.items():
        assert after[name].equals(frame), name


def test_windows_with_too_few_rows_are_skipped_with_reason(tmp_path: Path) -> None:
    prices = simulate_prices(90)
    # S2 missing on price rows 20..85 (far beyond max_fill_gap): early windows still hold enough
    # usable rows, late ones do not (k + n = 7 + 3 = 10 observations are needed)
    prices = prices.with_columns(pl.when(pl.int_range(pl.len()).is_between(20, 85)).then(None).otherwise(pl.col("S2")).alias("S2"))
    prices.write_csv(tmp_path / "prices.csv")
    cfg = load_config(write_config(tmp_path, CONFIG))
    ingest(cfg)
    r = jobs.run_universe(cfg.warehouse.path, cfg.universes[0])
    assert r.status == "succeeded" and r.skipped > 0 and r.fitted > 0
    fits = results(cfg)["window_fits"]
    skipped = fits.filter(pl.col("skip_reason").is_not_null())
    assert skipped.height == r.skipped
    assert skipped["spectral_radius"].null_count() == skipped.height
    assert all(isinstance(s, str) and s for s in skipped["skip_reason"].to_list())


def test_arrays_every_thins_responses_but_keeps_the_newest(tmp_path: Path) -> None:
    cfg = setup(tmp_path, extra="arrays_every = 7\n")
    ingest(cfg)
    r = jobs.run_universe(cfg.warehouse.path, cfg.universes[0], block_windows=8)  # 4 blocks
    assert r.fitted == 30
    got = results(cfg)
    ends = got["window_fits"]["window_end"].to_list()
    expected = [ends[i] for i in range(0, 30, 7)] + [ends[-1]]
    assert got["responses"]["window_end"].to_list() == expected
    assert got["decompositions"]["window_end"].to_list() == expected
    assert got["connectedness"].height == 30  # every window keeps its connectedness and Granger rows
