"""estimator = "shrinkage" universes through the job steps: config rules, storage of λ, and every
stored number equal to direct arlib calls on the prepared rows.

Data: the US macro data set statsmodels ships (statsmodels.datasets.macrodata, quarterly levels,
public domain), its 203 quarters placed on consecutive business days — the pipeline's calendar
labels only; the values are the data set's. Used only as test input.
"""

from __future__ import annotations

import textwrap
import warnings
from pathlib import Path

import numpy as np
import polars as pl
import pytest

import arlib
from pipeline import jobs
from pipeline import warehouse as wh
from pipeline.config import Config, load_config
from pipeline.errors import ConfigError
from tests.pipeline.helpers import write_config

SERIES = ("realgdp", "realcons", "realinv", "realgovt", "realdpi", "cpi")

HEAD = """
[warehouse]
path = "wh.duckdb"
snapshot = "serving.duckdb"

[[sources]]
name = "macro"
kind = "csv"
path = "macro.csv"
"""

SHRINK = """
[[universes]]
name = "macro_shrink"
estimator = "shrinkage"
series = ["realgdp", "realcons", "realinv", "realgovt", "realdpi", "cpi"]
transform = "log_return"
window = 60
step = 3
lags = 2
horizon = 8
identification = "generalized"
[universes.shrinkage]
tightness = "auto"

[[universes]]
name = "macro_levels"
estimator = "shrinkage"
series = [{ name = "realgdp", transform = "level" }, "realinv"]
transform = "log_return"
window = 50
step = 7
lags = 1
horizon = 6
[universes.shrinkage]
tightness = 0.25
lag_decay = 2
"""


def macro_csv(folder: Path) -> None:
    from statsmodels.datasets import macrodata

    data = macrodata.load_pandas().data
    days = pl.date_range(pl.date(2000, 1, 3), pl.date(2010, 1, 1), "1d", eager=True)
    days = days.filter(days.dt.weekday() <= 5)[: len(data)]
    frame = {"date": days, **{s: data[s].to_numpy(dtype=float) for s in SERIES}}
    pl.DataFrame(frame).write_csv(folder / "macro.csv")


def setup(folder: Path, body: str = SHRINK) -> Config:
    folder.mkdir(parents=True, exist_ok=True)
    macro_csv(folder)
    return load_config(write_config(folder, HEAD + textwrap.dedent(body)))


def night(cfg: Config) -> list[jobs.UniverseResult]:
    for s in cfg.sources:
        assert jobs.ingest_source(cfg.warehouse.path, s).status == "succeeded"
    out = [jobs.run_universe(cfg.warehouse.path, u) for u in cfg.universes]
    for r in out:
        assert r.status == "succeeded", r.message
    return out


def read(cfg: Config, sql: str, params: list) -> pl.DataFrame:
    con = wh.connect(cfg.warehouse.path)
    try:
        return wh.query(con, sql, params)
    finally:
        con.close()


def test_shrinkage_config_and_rules(tmp_path: Path) -> None:
    cfg = setup(tmp_path)
    u, lv = cfg.universes
    assert u.estimator == "shrinkage" and u.shrinkage.tightness == "auto"
    assert lv.shrinkage.tightness == 0.25 and lv.shrinkage.lag_decay == 2.0
    assert lv.prior_means == ("random_walk", "white_noise")  # level → random walk, return → white noise
    bad = SHRINK.replace('tightness = "auto"', 'tightness = "loose"').replace("lags = 1", "lags = 1\ntrend = \"ct\"")
    with pytest.raises(ConfigError) as info:
        setup(tmp_path, bad)
    text = str(info.value)
    assert "shrinkage.tightness` is 'loose'" in text and '"auto"' in text
    assert "macro_levels'].trend` is \"ct\"" in text
    plain = SHRINK.replace('estimator = "shrinkage"\n', "", 1)
    with pytest.raises(ConfigError, match=r"macro_shrink'\]\.shrinkage` is set but estimator is not 'shrinkage'"):
        setup(tmp_path, plain)


def test_stored_results_equal_direct_arlib_calls(tmp_path: Path) -> None:
    """Every stored number of both universes equals arlib.shrinkage_var + arlib.connectedness on
    the window's prepared rows (1e-8: the engine sums cross-products by blocks, the single fit
    directly — rounding only), and λ per window is stored in shrinkage_fits."""
    cfg = setup(tmp_path)
    night(cfg)
    for u in cfg.universes:
        prepared = read(cfg, "SELECT date, series, value FROM prepared WHERE universe = ? ORDER BY date, series",
                        [u.name])  # fmt: skip
        wide = prepared.pivot(on="series", index="date", values="value").sort("date")
        y = wide.select(list(u.names)).to_numpy()
        dates = wide["date"].to_list()
        lam = read(cfg, "SELECT window_end, tightness, tightness_chosen, log_marginal_likelihood "
                        "FROM shrinkage_fits WHERE universe = ? ORDER BY window_end", [u.name])  # fmt: skip
        conn = read(cfg, "SELECT window_end, total FROM connectedness WHERE universe = ? ORDER BY window_end", [u.name])
        params = read(cfg, "SELECT window_end, coefs, sigma_u FROM window_params WHERE universe = ? "
                           "ORDER BY window_end", [u.name])  # fmt: skip
        assert lam.height == conn.height == params.height > 10
        assert lam["tightness_chosen"].to_list() == [u.shrinkage.tightness == "auto"] * lam.height
        assert read(cfg, "SELECT count(*) AS c FROM granger WHERE universe = ?", [u.name])["c"][0] == 0
        for w, end in enumerate(lam["window_end"].to_list()):
            e = dates.index(end)
            rows = y[e - u.window_rows + 1 : e + 1]
            with warnings.catch_warnings():  # a level series (random-walk prior) may fit a unit root
                warnings.simplefilter("ignore", arlib.UnstableProcessWarning)
                fit = arlib.shrinkage_var(rows, u.max_lag, tightness=u.shrinkage.tightness,
                                          prior_mean=list(u.prior_means), lag_decay=u.shrinkage.lag_decay,
                                          names=list(u.names))  # fmt: skip
            assert lam["tightness"][w] == pytest.approx(fit.tightness, rel=1e-8)
            assert lam["log_marginal_likelihood"][w] == pytest.approx(fit.log_marginal_likelihood, rel=1e-8)
            np.testing.assert_allclose(np.reshape(params["coefs"][w].to_list(), fit.coefs.shape), fit.coefs,
                                       rtol=0, atol=1e-8)  # fmt: skip
            np.testing.assert_allclose(np.reshape(params["sigma_u"][w].to_list(), fit.sigma_u.shape),
                                       fit.sigma_u, rtol=1e-8, atol=0)  # fmt: skip
            assert conn["total"][w] == pytest.approx(arlib.connectedness(fit, u.horizon).total, abs=1e-8)


def test_nightly_runs_reuse_windows_and_equal_a_full_run(tmp_path: Path) -> None:
    """A warehouse grown night by night (150 quarters, then all 203) stores the same λ and
    connectedness as one full run on all rows: a window's numbers depend on its own rows only
    (bit for bit, arlib's block sums), so reused and refitted windows agree exactly."""
    from statsmodels.datasets import macrodata

    n_all = len(macrodata.load_pandas().data)
    grown = setup(tmp_path / "grown")
    full = setup(tmp_path / "full")
    csv = tmp_path / "grown" / "macro.csv"
    whole = pl.read_csv(csv)
    whole.head(150).write_csv(csv)
    night(grown)
    whole.write_csv(csv)
    second = night(grown)
    assert all(r.reused > 0 and r.fitted > 0 for r in second)  # old windows kept, new ones fitted
    night(full)
    sql = ("SELECT window_end, tightness, log_marginal_likelihood FROM shrinkage_fits "
           "WHERE universe = ? ORDER BY window_end")  # fmt: skip
    for name in ("macro_shrink", "macro_levels"):
        a, b = read(grown, sql, [name]), read(full, sql, [name])
        assert a.height == b.height and a.height > 0
        assert a.equals(b), name
        ca = read(grown, "SELECT window_end, total FROM connectedness WHERE universe = ? ORDER BY window_end", [name])
        cb = read(full, "SELECT window_end, total FROM connectedness WHERE universe = ? ORDER BY window_end", [name])
        assert ca.equals(cb), name
    assert n_all > 150
