"""estimator = "quantile" universes through the job steps on the US macro data statsmodels ships
(statsmodels.datasets.macrodata, written to CSV by tests.pipeline.test_cli.macro_csv): config
rules, storage per τ, the serving snapshot, and agreement with direct arlib calls on the same rows.
"""

from __future__ import annotations

import textwrap
from pathlib import Path

import numpy as np
import pytest

import arlib
from pipeline import jobs
from pipeline import warehouse as wh
from pipeline.config import Config, load_config
from pipeline.errors import ConfigError
from serving import Snapshot
from tests.pipeline.helpers import write_config
from tests.pipeline.test_cli import macro_csv

HEAD = """
[warehouse]
path = "wh.duckdb"
snapshot = "serving.duckdb"

[[sources]]
name = "us_macro"
kind = "csv"
path = "macrodata.csv"
"""

QUANTILE = """
[[universes]]
name = "us_tails"
series = ["realgdp", "realcons", "realinv"]
frequency = "monthly"   # quarter-end dates; the two months without data drop as holidays
max_fill_gap = 0
window = 80
step = 4
lags = 2
horizon = 8
estimator = "quantile"
[universes.quantile]
quantiles = [0.1, 0.5, 0.9]
"""

OLS = """
[[universes]]
name = "us_real"
series = ["realgdp", "realcons", "realinv"]
frequency = "monthly"
max_fill_gap = 0
window = 80
step = 4
lags = 2
horizon = 8
"""

NAMES = ["realgdp", "realcons", "realinv"]


def setup(folder: Path, body: str) -> tuple[Config, np.ndarray]:
    folder.mkdir(parents=True, exist_ok=True)
    df = macro_csv(folder / "macrodata.csv")
    returns = np.diff(np.log(df.select(NAMES).to_numpy()), axis=0)
    return load_config(write_config(folder, HEAD + textwrap.dedent(body))), returns


@pytest.mark.filterwarnings("ignore::arlib.UnstableProcessWarning")  # tail fits of 78 quarters
def test_quantile_universe_end_to_end_equals_direct_arlib(tmp_path: Path) -> None:
    cfg, returns = setup(tmp_path, QUANTILE + OLS)
    tails, ols = cfg.universes
    assert tails.estimator == "quantile" and tails.quantile.quantiles == (0.1, 0.5, 0.9)
    assert tails.central_quantile == 0.5 and ols.estimator == "ols"
    assert jobs.ingest_source(cfg.warehouse.path, cfg.sources[0]).status == "succeeded"
    for u in cfg.universes:
        r = jobs.run_universe(cfg.warehouse.path, u)
        assert r.status == "succeeded", r.message
    jobs.publish_step(cfg)
    con = wh.connect(cfg.warehouse.path)
    try:
        granger = wh.query(con, "SELECT count(*) AS c FROM granger WHERE universe = 'us_tails'")["c"][0]
        ends = wh.query(con, "SELECT window_end FROM window_fits WHERE universe = 'us_tails' ORDER BY window_end")
    finally:
        con.close()
    assert granger == 0  # Granger tests are least-squares F tests: none for quantile fits
    assert ends.height == 31  # 202 log returns; windows of 80 ending at rows 79, 83, ..., 199
    with Snapshot(cfg.warehouse.snapshot) as snap:
        u = snap.universe("us_tails")
        assert u.estimator == "quantile"
        hist = snap.quantile_history(u)
        assert hist is not None and hist.quantiles.tolist() == [0.1, 0.5, 0.9]
        assert len(hist.ends) == 31
        assert snap.quantile_history(snap.universe("us_real")) is None
        index = dict(snap.index_history("us_tails"))
        fit_last = snap.fit(u, hist.ends[-1])
    # direct arlib on the same rows (the newest window and one in the middle): the pipeline's
    # numbers equal them to storage precision (DOUBLE; the fits are the same computation)
    for w, row in ((30, 199), (10, 119)):
        rows = returns[row - 79 : row + 1]
        for q, tau in enumerate((0.1, 0.5, 0.9)):
            fit = arlib.quantile_var(rows, 2, tau)
            c = arlib.connectedness(fit, 8)
            assert hist.total[w, q] == pytest.approx(c.total, abs=1e-9)
            np.testing.assert_allclose(hist.table[w, q], c.table, atol=1e-9)
            np.testing.assert_allclose(hist.from_others[w, q], c.from_others, atol=1e-9)
            if tau == 0.5:  # the central τ fills the per-window tables
                assert index[hist.ends[w]] == pytest.approx(c.total, abs=1e-9)
                if w == 30:
                    np.testing.assert_allclose(fit_last.coefs, fit.coefs, atol=1e-12)
                    np.testing.assert_allclose(fit_last.sigma_u, fit.sigma_u, rtol=1e-12)


def test_quantile_config_errors_name_key_and_fix(tmp_path: Path) -> None:
    bad = QUANTILE.replace("lags = 2\n", 'lags = 2\nexpanding = true\ntrend = "ct"\njoint = true\n')
    bad = bad.replace("[0.1, 0.5, 0.9]", "[0.5, 0.1, 1.0]")
    with pytest.raises(ConfigError) as info:
        setup(tmp_path, bad)
    text = "\n".join(info.value.problems)
    assert "universes['us_tails'].quantile.quantiles" in text and "increasing" in text
    assert "universes['us_tails'].expanding" in text and "rolling windows only" in text
    assert "universes['us_tails'].trend" in text and "universes['us_tails'].joint" in text
    stray = OLS + "[universes.quantile]\nquantiles = [0.1]\n"
    with pytest.raises(ConfigError, match="estimator is not 'quantile'"):
        setup(tmp_path, stray)


@pytest.mark.filterwarnings("ignore::arlib.UnstableProcessWarning")
def test_nightly_update_equals_a_full_refit(tmp_path: Path) -> None:
    # A run on the first 150 quarters, then on all of them (new windows fitted from a cold start
    # in their block), equals one run on all of them: the optimal vertex does not depend on the
    # start (continuous data), so the stored numbers agree to rounding (1e-10).
    import polars as pl

    cfg, _ = setup(tmp_path / "inc", QUANTILE)
    full = pl.read_csv(tmp_path / "inc" / "macrodata.csv")
    full.head(150).write_csv(tmp_path / "inc" / "macrodata.csv")
    assert jobs.ingest_source(cfg.warehouse.path, cfg.sources[0]).status == "succeeded"
    assert jobs.run_universe(cfg.warehouse.path, cfg.universes[0]).status == "succeeded"
    full.write_csv(tmp_path / "inc" / "macrodata.csv")
    assert jobs.ingest_source(cfg.warehouse.path, cfg.sources[0]).status == "succeeded"
    second = jobs.run_universe(cfg.warehouse.path, cfg.universes[0])
    assert second.status == "succeeded" and second.reused > 0 and second.fitted > 0
    ref, _ = setup(tmp_path / "ref", QUANTILE)
    assert jobs.ingest_source(ref.warehouse.path, ref.sources[0]).status == "succeeded"
    assert jobs.run_universe(ref.warehouse.path, ref.universes[0]).status == "succeeded"

    def stored(c: Config) -> pl.DataFrame:
        con = wh.connect(c.warehouse.path)
        try:
            return wh.query(con, "SELECT window_end, quantile, total, shares, coefs FROM quantile_connectedness "
                                 "ORDER BY window_end, quantile")  # fmt: skip
        finally:
            con.close()

    a, b = stored(cfg), stored(ref)
    assert a.height == b.height == 31 * 3
    assert a["window_end"].to_list() == b["window_end"].to_list()
    np.testing.assert_allclose(a["total"].to_numpy(), b["total"].to_numpy(), atol=1e-10)
    np.testing.assert_allclose(np.array(a["coefs"].to_list()), np.array(b["coefs"].to_list()), atol=1e-10)
