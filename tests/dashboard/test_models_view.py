"""A series set configured both ways (rolling windows and the TVP-VAR filter): the side-by-side view,
the model in the index chart, the other views on a filtered date, and the report's section.

Built by the real pipeline (the job's own steps, no Prefect) over the invented demo data of
data_samples/ (the Veloria scenario, not real market data).
"""

from __future__ import annotations

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
name = "veloria_rates"
kind = "csv"
path = "{data}/rates_long.csv"
layout = "long"
series_column = "series"
value_column = "value"

[[sources]]
name = "veloria_exchange"
kind = "csv"
path = "{data}/markets_wide.csv"

[[universes]]
name = "rates"
series = ["FX_VLR", {{ name = "VGB_2Y", transform = "diff" }}, {{ name = "VGB_10Y", transform = "diff" }}]
window = 250
step = 20
lags = 1
horizon = 8

[[universes]]
name = "rates_tvp"
model = "tvp"
series = ["FX_VLR", {{ name = "VGB_2Y", transform = "diff" }}, {{ name = "VGB_10Y", transform = "diff" }}]
lags = 1
horizon = 8
[universes.tvp]
training = 100

[[universes]]
name = "equity_tvp"
model = "tvp"
series = ["VLX_BROAD", "VLX_BANKS"]
lags = 1
horizon = 8

[export]
directory = "exports"
formats = ["html"]
"""


@pytest.fixture(scope="module")
def built(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Path]:
    return build(tmp_path_factory.mktemp("models"), text=CONFIG, export=["rates", "rates_tvp"])


@pytest.fixture
def snap(built: tuple[Path, Path]) -> Iterator[Snapshot]:
    s = Snapshot(built[0])
    yield s
    s.reader.close()


def _state(snap: Snapshot, universe: str) -> dict[str, str]:
    return whole_range(snap, universe)


def test_counterpart_is_the_other_model_on_the_same_series(snap: Snapshot) -> None:
    rates, tvp, equity = (snap.universe(n) for n in ("rates", "rates_tvp", "equity_tvp"))
    assert (rates.model, tvp.model) == ("rolling", "tvp")
    assert snap.counterpart(rates) == tvp and snap.counterpart(tvp) == rates
    assert snap.counterpart(equity) is None


@pytest.mark.parametrize("chosen", ["rates", "rates_tvp"])
def test_models_view_plots_both_stored_indexes(snap: Snapshot, chosen: str) -> None:
    fig, rows, note = vw.models_view(snap, _state(snap, chosen))
    rolling, tvp = fig["data"]
    assert "rates)" in rolling["name"] and "rates_tvp" in tvp["name"]
    np.testing.assert_allclose(rolling["y"], [v for _, v in snap.index_history("rates")], rtol=1e-12)
    np.testing.assert_allclose(tvp["y"], [v for _, v in snap.index_history("rates_tvp")], rtol=1e-12)
    # the TVP line has a value per business day after the training rows, the rolling one per window
    assert len(tvp["y"]) > 15 * len(rolling["y"])
    assert len(rows) == len(rolling["y"]) + len(tvp["y"])
    assert "dates both store: TVP − rolling mean" in note


def test_models_view_without_counterpart_says_how_to_add_one(snap: Snapshot) -> None:
    result = vw.models_view(snap, _state(snap, "equity_tvp"))
    assert 'model = "rolling"' in str(result) and "same series" in str(result)


def test_index_chart_names_the_model(snap: Snapshot) -> None:
    fig, _, note = vw.index_view(snap, _state(snap, "rates_tvp"))
    assert "time-varying-parameter VAR" in fig["layout"]["title"]["text"]
    assert "one value per filtered date" in note
    fig, _, _ = vw.index_view(snap, _state(snap, "rates"))
    assert "rolling-window VAR" in fig["layout"]["title"]["text"]


def test_window_views_work_on_a_filtered_date(snap: Snapshot) -> None:
    """Responses are derived from the stored B_t and Σ_t of the date (no stored arrays)."""
    state = _state(snap, "rates_tvp")
    u = snap.universe("rates_tvp")
    end = snap.fitted_end(snap.window(state))
    fig, rows, note = vw.paths_view(snap, state, "generalized", None, [], "8", "none")
    fit = snap.fit(u, end)
    proc = arlib.var_process(fit.coefs, fit.sigma_u, names=u.series)
    ref = arlib.impulse_responses(proc, 8, shocks="generalized")
    assert rows and fig["data"]
    pos = {s: i for i, s in enumerate(u.series)}
    got = np.zeros((9, 3, 3))
    for r in rows:
        got[r["horizon"], pos[r["response"]], pos[r["shock"]]] = r["value"]
    np.testing.assert_allclose(got, np.asarray(ref), rtol=1e-9, atol=1e-12)
    assert "derived" in note
    fig, _, _ = vw.network_view(snap, state, "end", "to")
    assert fig["data"]


def test_report_has_the_rolling_vs_tvp_section(built: tuple[Path, Path], snap: Snapshot) -> None:
    _, exports = built
    (page,) = Path(exports).glob("*/rates_tvp/rates_tvp-*.html")
    text = page.read_text(encoding="utf-8")
    assert 'id="models"' in text and "Rolling windows vs time-varying parameters" in text
    assert "time-varying-parameter VAR (filtered per date)" in text  # the model, at a glance
    assert "one point per date of the time-varying-parameter VAR filter" in text
    assert "Granger tests belong to a least-squares fit per window" in text
    (page,) = Path(exports).glob("*/rates/rates-*.html")
    assert 'id="models"' in page.read_text(encoding="utf-8")


def test_every_tab_answers_for_a_tvp_universe(snap: Snapshot) -> None:
    """No view fails on a filtered date: each shows numbers, or says what a tvp universe lacks."""
    state = _state(snap, "rates_tvp")
    results = {
        "shares": vw.shares_view(snap, state, None, "8"),
        "leadlag": vw.leadlag_view(snap, state, 0.05),
        "network": vw.network_view(snap, state, "mean", "from"),
        "health": vw.health_view(snap, state, 0.98),
        "cycles": vw.cycles_view(snap, state),
        "joint": vw.joint_view(snap, state),
    }
    for triples in [vw.compare_view(snap, state, "", "", "", "", "generalized", None, "8"), vw.bands_view(snap, state)]:
        for t in triples:
            results[f"pair {t[2][:20]}"] = t
    for name, (fig, _, note) in results.items():
        assert "could not be computed" not in note, (name, note)
        assert fig["data"] or note, name
    for name in ("shares", "network", "health", "cycles"):
        assert results[name][0]["data"], (name, results[name][2])
    assert "Granger tests belong to a least-squares fit per window" in results["leadlag"][2]
    assert "rolling counterpart 'rates'" in results["leadlag"][2]
