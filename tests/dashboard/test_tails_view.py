"""An estimator = "quantile" universe on the dashboard and in the report: the Tails tab (lower-tail,
median and upper-tail connectedness over time, the tables at the window end), every other tab,
and the report's section.

Built by the real pipeline (the job's own steps, no Prefect) over the invented demo data of
data_samples/ (the Veloria scenario, not real market data).
"""

from __future__ import annotations

import warnings
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import pytest

import arlib
from dashboard import views as vw
from dashboard.data import Snapshot

from ._pipeline import build, whole_range

CONFIG = """
[warehouse]
path = "warehouse.duckdb"
snapshot = "serving.duckdb"

[[sources]]
name = "veloria_exchange"
kind = "csv"
path = "{data}/markets_wide.csv"

[[universes]]
name = "eq_tails"
series = ["VLX_BROAD", "VLX_BANKS", "VOB_ORE"]
window = 250
step = 40
lags = 1
horizon = 8
estimator = "quantile"
[universes.quantile]
quantiles = [0.05, 0.5, 0.95]

[[universes]]
name = "z_eq"
series = ["VLX_BROAD", "VLX_BANKS", "VOB_ORE"]
window = 250
step = 40
lags = 1
horizon = 8

[[universes]]
name = "eq_tvp"
model = "tvp"
series = ["VLX_BROAD", "VLX_BANKS", "VOB_ORE"]
lags = 1
horizon = 8

[export]
directory = "exports"
formats = ["html"]
"""


@pytest.fixture(scope="module")
def built(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Path]:
    return build(tmp_path_factory.mktemp("tails"), text=CONFIG, export=["eq_tails"])


@pytest.fixture
def snap(built: tuple[Path, Path]) -> Iterator[Snapshot]:
    s = Snapshot(built[0])
    yield s
    s.reader.close()


def _state(snap: Snapshot, universe: str) -> dict[str, str]:
    return whole_range(snap, universe)


def test_tails_view_plots_every_level_and_the_tables(snap: Snapshot) -> None:
    state = _state(snap, "eq_tails")
    (fig, rows, note), (tfig, trows, tnote) = vw.tails_view(snap, state)
    u = snap.universe("eq_tails")
    qh = snap.quantile_history(u)
    assert qh is not None
    assert [d["name"] for d in fig["data"]] == ["τ = 0.05 (lower tail)", "τ = 0.5 (median)", "τ = 0.95 (upper tail)"]
    for q, trace in enumerate(fig["data"]):
        np.testing.assert_allclose(trace["y"], qh.total[:, q], rtol=1e-12)
    assert len(rows) == 3 * len(qh.ends) and "Ando, Greenwood-Nimmo & Shin" in note
    # the median line is the index every other tab shows (the central τ fills the usual tables)
    np.testing.assert_allclose(qh.total[:, 1], [v for _, v in snap.index_history("eq_tails")], rtol=1e-12)
    # the tables at the window end: recomputed by arlib from the window's prepared rows
    end = snap.fitted_end(snap.window(state))
    assert qh.ends[-1] == end and len(tfig["data"]) == 3 and len(trows) == 27
    rows_y = snap.prepared(u, snap.fit(u, end).window_start, end)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", arlib.UnstableProcessWarning)
        fit = arlib.quantile_var(rows_y, 1, 0.05)
    ref = arlib.connectedness(fit, 8).table
    got = np.array([r["share_percent"] for r in trows if r["quantile"] == 0.05]).reshape(3, 3)
    np.testing.assert_allclose(got, ref, atol=1e-8)
    assert "largest net transmitter" in tnote


def test_tails_view_on_a_least_squares_universe_says_how_to_get_it(snap: Snapshot) -> None:
    (_, rows, note), _ = vw.tails_view(snap, _state(snap, "z_eq"))
    assert not rows and "stores no quantile connectedness" in note and 'estimator = "quantile"' in note


def test_every_tab_answers_for_a_quantile_universe(snap: Snapshot) -> None:
    """No view fails on a quantile universe: each shows numbers, or says what it lacks."""
    state = _state(snap, "eq_tails")
    results = {
        "index": vw.index_view(snap, state, 0.9),
        "paths": vw.paths_view(snap, state, "generalized", None, [], "8", "none"),
        "shares": vw.shares_view(snap, state, None, "8"),
        "leadlag": vw.leadlag_view(snap, state, 0.05),
        "network": vw.network_view(snap, state, "mean", "from"),
        "health": vw.health_view(snap, state, 0.98),
        "cycles": vw.cycles_view(snap, state),
        "joint": vw.joint_view(snap, state),
        "models": vw.models_view(snap, state),
    }
    for name, (fig, _, note) in results.items():
        assert "could not be computed" not in note, (name, note)
        assert fig["data"] or note, name
    for name in ("index", "paths", "shares", "network", "health", "cycles"):
        assert results[name][0]["data"], (name, results[name][2])
    assert "Granger tests are least-squares F tests" in results["leadlag"][2]
    assert "level nearest the median" in results["index"][2]
    # a quantile universe has no rolling/TVP counterpart (that pairing compares least-squares fits)
    assert "has no counterpart" in results["models"][2]


def test_tvp_counterpart_is_the_least_squares_universe_not_the_quantile_one(snap: Snapshot) -> None:
    # eq_tails sorts before z_eq: without the estimator check the TVP universe would be compared
    # with the quantile fits' median index
    tails, tvp, ols = (snap.universe(n) for n in ("eq_tails", "eq_tvp", "z_eq"))
    assert snap.counterpart(tvp) == ols and snap.counterpart(ols) == tvp
    assert snap.counterpart(tails) is None


def test_report_has_the_tails_section(built: tuple[Path, Path]) -> None:
    _, exports = built
    (page,) = Path(exports).glob("*/eq_tails/eq_tails-*.html")
    text = page.read_text(encoding="utf-8")
    assert 'id="tails"' in text and "Connectedness in the tails" in text
    assert 'id="fig-tails"' in text and 'id="fig-tails-tables"' in text
    assert "Granger tests are least-squares F tests" in text
    assert "quantile regression per equation at τ = 0.05, 0.5, 0.95" in text  # at a glance
    assert "not financial advice" in text
