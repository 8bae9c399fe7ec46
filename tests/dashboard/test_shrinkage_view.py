"""A shrinkage universe (estimator = "shrinkage") on screen and in the report: the Shrinkage tab
(λ per window), the Lead–lag tab's note instead of Granger tests, every other tab, the report's
sections.

Built by the real pipeline (the job's own steps, no Prefect) over the invented demo data of
data_samples/ (the Veloria scenario and its invented 40-stock panel, not real market data).
"""

from __future__ import annotations

import re
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import pytest

from dashboard import views as vw
from dashboard.data import Snapshot
from tests.charts.grids import panel_pairs

from ._pipeline import build, whole_range

CONFIG = """
[warehouse]
path = "warehouse.duckdb"
snapshot = "serving.duckdb"

[[sources]]
name = "veloria_sector"
kind = "csv"
path = "{data}/sector_wide.csv"

[[universes]]
name = "sector_12"
estimator = "shrinkage"
series = ["VSX_01", "VSX_02", "VSX_03", "VSX_04", "VSX_05", "VSX_06",
          "VSX_07", "VSX_08", "VSX_09", "VSX_10", "VSX_11", "VSX_12"]
window = 250
step = 40
lags = 2
horizon = 8

[[universes]]
name = "sector_14"
series = ["VSX_01", "VSX_02", "VSX_03", "VSX_04", "VSX_05", "VSX_06", "VSX_07",
          "VSX_08", "VSX_09", "VSX_10", "VSX_11", "VSX_12", "VSX_13", "VSX_14"]
window = 250
step = 500
lags = 1
horizon = 4

[[universes]]
name = "sector_ols"
series = ["VSX_01", "VSX_02", "VSX_03"]
window = 250
step = 80
lags = 1
horizon = 8

[export]
directory = "exports"
formats = ["html"]
"""


@pytest.fixture(scope="module")
def built(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Path]:
    return build(tmp_path_factory.mktemp("shrink"), text=CONFIG, export=["sector_12", "sector_14"])


@pytest.fixture
def snap(built: tuple[Path, Path]) -> Iterator[Snapshot]:
    s = Snapshot(built[0])
    yield s
    s.reader.close()


def _state(snap: Snapshot, universe: str) -> dict[str, str]:
    return whole_range(snap, universe)


def test_shrinkage_tab_plots_the_stored_tightness(snap: Snapshot) -> None:
    state = _state(snap, "sector_12")
    fig, rows, note = vw.tightness_view(snap, state)
    stored = snap.tightness_in(snap.window(state))
    assert len(rows) == len(stored) > 20
    np.testing.assert_allclose(fig["data"][0]["y"], [r[1] for r in stored], rtol=1e-12)
    assert all(1e-3 <= r["tightness"] <= 10 and r["chosen"] for r in rows)
    assert "marginal likelihood" in note and "median" in note
    assert fig["layout"]["yaxis"]["type"] == "log"


def test_shrinkage_tab_on_a_least_squares_universe_says_how_to_get_one(snap: Snapshot) -> None:
    result = vw.tightness_view(snap, _state(snap, "sector_ols"))
    assert 'estimator = "shrinkage"' in str(result)


def test_every_tab_answers_for_a_shrinkage_universe(snap: Snapshot) -> None:
    """No view fails on a shrinkage universe: each shows numbers, or says what it lacks — the
    Lead–lag tab says Granger tests are not defined and what to read instead."""
    state = _state(snap, "sector_12")
    results = {
        "shares": vw.shares_view(snap, state, None, "8"),
        "leadlag": vw.leadlag_view(snap, state, 0.05),
        "network": vw.network_view(snap, state, "mean", "from"),
        "health": vw.health_view(snap, state, 0.98),
        "paths": vw.paths_view(snap, state, "generalized", None, [], "8", "none"),
        "index": vw.index_view(snap, state, 0.9),
    }
    for name, (fig, _, note) in results.items():
        assert "could not be computed" not in note, (name, note)
        assert fig["data"] or note, name
    for name in ("shares", "network", "paths", "index"):
        assert results[name][0]["data"], (name, results[name][2])
    lead = results["leadlag"][2]
    assert "not defined" in lead and "Spillover network" in lead and "Shrinkage tab" in lead


def test_report_has_the_shrinkage_section_and_no_granger_table(built: tuple[Path, Path]) -> None:
    _, exports = built
    (page,) = Path(exports).glob("*/sector_12/sector_12-*.html")
    text = page.read_text(encoding="utf-8")
    assert 'id="shrinkage"' in text and "tightness λ is chosen per window" in text
    assert "Granger F tests belong to a least-squares fit and are not defined for it" in text
    assert "not financial advice" in text


def test_a_wide_universe_draws_a_grid_of_at_most_twelve_series(snap: Snapshot) -> None:
    """40 series drew 1,600 panels and kept the browser busy for over 30 s (the demo's sector_40):
    a grid shows the first 12 series of the ordering control, the CSV keeps all 14 here."""
    state = _state(snap, "sector_14")
    u = snap.universe("sector_14")
    chosen = ["VSX_14", "VSX_13"]  # chosen in the ordering control: drawn first
    fig, rows, note = vw.paths_view(snap, state, "generalized", chosen, [], 4, "none")
    drawn = panel_pairs(fig)
    expected = ["VSX_14", "VSX_13", *[s for s in u.series if s not in chosen]][: vw.GRID_SERIES_MAX]
    assert drawn == {(r, c) for r in expected for c in expected}
    assert len(rows) == 5 * 14 * 14
    assert "12 of 14 series" in note
    _, (paths, prow, pnote) = vw.compare_view(snap, state, None, None, None, None, "generalized", chosen, 4)
    assert panel_pairs(paths) == drawn
    assert len(prow) == 5 * 14 * 14 and "12 of 14 series" in pnote


def test_the_report_of_a_wide_universe_draws_responses_of_twelve_series(built: tuple[Path, Path]) -> None:
    """The report drew one column of panels per shock for every series: 40 × 40 panels took the
    demo's sector_40 report 10.7 s to open in chromium. It draws the first 12 and says so."""
    _, exports = built
    (page,) = Path(exports).glob("*/sector_14/sector_14-*.html")
    text = page.read_text(encoding="utf-8")
    per_shock = set(re.findall(r'id="(fig-irf-0-\d+)"', text))
    assert len(per_shock) == 12
    assert "shock to VSX_12" in text and "shock to VSX_13" not in text
    assert "the charts show the first 12 of the 14 series" in text
