"""One window on screen and in the report: the same series colours, the same plotted values.

The real pipeline (tests/dashboard/_pipeline.py: ingest, rolling fits, publish and export over
the invented demo data) writes a serving snapshot and the HTML reports; the dashboard's views are
called on that snapshot as the browser would call them, and the report's charts are read back
from the HTML. Both go through `charts`, so a series has one style and a stored number one value.
"""

from __future__ import annotations

import json
import re
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import numpy as np
import pytest

import charts
from dashboard import views as cb
from dashboard.data import Snapshot
from tests.charts.grids import response_panels, trace_array
from tests.dashboard import _pipeline
from tests.pipeline.test_export import plotly_traces

UNIVERSE = "cross_market"  # generalized shocks, stored bootstrap bands (tests/dashboard/_pipeline.py)


@pytest.fixture(scope="module")
def made(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, str]:
    snapshot, exports = _pipeline.build(tmp_path_factory.mktemp("screen-report"))
    (report,) = sorted(Path(exports).rglob(f"{UNIVERSE}-*.html"))
    return snapshot, report.read_text(encoding="utf-8")


@pytest.fixture
def snap(made: tuple[Path, str]) -> Iterator[Snapshot]:
    s = Snapshot(made[0])
    yield s
    s.reader.close()


def plotly_layout(html: str, div_id: str) -> dict[str, Any]:
    """The layout handed to `Plotly.newPlot` for `div_id` (the JSON value after its traces)."""
    m = re.search(r'Plotly\.newPlot\(\s*"' + re.escape(div_id) + r'",\s*', html)
    assert m
    decoder = json.JSONDecoder()
    _, end = decoder.raw_decode(html, m.end())
    rest = re.match(r"\s*,\s*", html[end:])
    assert rest
    layout, _ = decoder.raw_decode(html, end + rest.end())
    return layout


def latest_state(snap: Snapshot) -> dict[str, Any]:
    return {"universe": UNIVERSE, "start": None, "end": None}


def test_shock_paths_same_values_and_colours(snap: Snapshot, made: tuple[Path, str]) -> None:
    html = made[1]
    u = snap.universe(UNIVERSE)
    screen, rows, note = cb.paths_view(snap, latest_state(snap), "generalized", None, [], u.horizon, "stored")
    assert "stored band" in note and rows
    report = plotly_traces(html, "fig-irf-0-0")
    on_screen = response_panels(screen["data"], list(u.series))
    in_report = response_panels(report, list(u.series))
    assert on_screen.keys() == in_report.keys() and len(on_screen) == len(u.series) ** 2
    for key, shown in on_screen.items():
        for part in ("response", "lower", "upper"):
            np.testing.assert_array_equal(np.asarray(shown[part], dtype=float), in_report[key][part])

    # the screen draws every panel's response in one trace and every band in one (on one pair of
    # axes); the report one trace of each per panel: the same two looks
    def looks(traces: list[dict[str, Any]]) -> set[tuple[Any, ...]]:
        return {(t.get("fill"), t["line"].get("color"), t.get("fillcolor")) for t in traces
                if t.get("legendgroup") in ("response", "band")}  # fmt: skip

    assert looks(screen["data"]) == looks(report) and len(looks(report)) == 2  # band, line
    assert [t["legendgroup"] for t in screen["data"] if t.get("showlegend", True)] == ["band", "response"]
    # the same fonts and the same column headers (the shocked series' names)
    layout = plotly_layout(html, "fig-irf-0-0")
    assert layout["font"] == screen["layout"]["font"] == charts.FONT
    top = max(a["y"] for a in layout["annotations"])
    assert [a["text"] for a in layout["annotations"] if a["y"] == top] == list(u.series)


def test_series_colours_and_shares_agree(snap: Snapshot, made: tuple[Path, str]) -> None:
    html = made[1]
    u = snap.universe(UNIVERSE)
    screen, _, _ = cb.shares_view(snap, latest_state(snap), None, u.horizon)
    methods = re.findall(r'data-method="(\w+)"', html)
    k = methods.index("generalized")
    report = plotly_traces(html, f"fig-fevd-{k}")
    screen_gen = [t for t in screen["data"] if t["xaxis"] == "x"]  # the generalized panel
    assert [t["meta"] for t in screen_gen] == [t["meta"] for t in report] == [[s] for s in u.series]
    for a, b in zip(screen_gen, report, strict=True):
        assert a["marker"]["color"] == b["marker"]["color"]
        assert a["marker"]["pattern"] == b["marker"]["pattern"]
        np.testing.assert_allclose(a["x"], trace_array(b["x"]), rtol=1e-12, atol=1e-12)
    # the report's net-spillover lines wear each series' colour too
    net = {t["meta"][0]: t["line"] for t in plotly_traces(html, "fig-net")}
    for t in screen_gen:
        assert net[t["meta"][0]]["color"] == t["marker"]["color"]


def test_index_and_significance_mark_agree(snap: Snapshot, made: tuple[Path, str]) -> None:
    html = made[1]
    screen, _, _ = cb.index_view(snap, latest_state(snap), 0.9)
    (report,) = plotly_traces(html, "fig-connectedness")
    line = next(t for t in screen["data"] if t["name"] == "total connectedness")
    assert line["x"] == report["x"]
    np.testing.assert_array_equal(np.asarray(line["y"], dtype=float), trace_array(report["y"]))
    assert line["line"]["color"] == report["line"]["color"]
    # significant Granger p-values: one mark on screen and in the report
    u = snap.universe(UNIVERSE)
    granger, rows, _ = cb.leadlag_view(snap, latest_state(snap), u.granger_level)
    significant = sum(r["p_value"] is not None and r["p_value"] < u.granger_level for r in rows)
    assert significant > 0
    marked = sum(cell.endswith(charts.SIGNIFICANCE_MARK) for row in granger["data"][0]["text"] for cell in row)
    assert marked == significant
    flagged = re.findall(r'<td class="flag"[^>]*>([^<]*)</td>', html)
    assert len(flagged) == significant
    assert all(cell.endswith(charts.SIGNIFICANCE_MARK) for cell in flagged)
    assert "●" not in html


def test_cycle_lengths_and_joint_index_same_on_screen_and_in_report(snap: Snapshot, made: tuple[Path, str]) -> None:
    """The new results (Baruník–Křehlík bands, Lastrapes–Wiesen joint index) reach the report with
    the numbers the screen shows: the same stacked band values and the same joint series."""
    html = made[1]
    assert 'id="cycles"' in html and 'id="joint"' in html
    (screen, _, _), (bars, _, _), (pairs, _, _) = cb.bands_view(snap, latest_state(snap))
    printed = plotly_traces(html, "fig-cycles")
    on_screen = [t for t in screen["data"] if t.get("stackgroup") == "bands"]
    assert [t["name"] for t in printed] == [t["name"] for t in on_screen]
    for a, b in zip(printed, on_screen, strict=True):
        np.testing.assert_allclose(np.asarray(a["y"], dtype=float), np.asarray(b["y"], dtype=float), rtol=1e-12)
        assert a["line"]["color"] == b["line"]["color"]
    printed_bars = plotly_traces(html, "fig-cycles-net")
    for a, b in zip(printed_bars, bars["data"], strict=True):
        np.testing.assert_allclose(a["y"], b["y"], rtol=1e-12)
    # the pairwise table of each band at the window end: the same heatmap cells
    printed_pairs = plotly_traces(html, "fig-cycles-pairs")
    assert len(printed_pairs) == len(pairs["data"]) > 1
    for a, b in zip(printed_pairs, pairs["data"], strict=True):
        np.testing.assert_allclose(np.asarray(a["z"], dtype=float), np.asarray(b["z"], dtype=float), rtol=1e-12)
    joint_screen, _, _ = cb.joint_view(snap, latest_state(snap))
    joint_printed = plotly_traces(html, "fig-joint")
    for a, b in zip(joint_printed, joint_screen["data"], strict=True):
        np.testing.assert_allclose(np.asarray(a["y"], dtype=float), np.asarray(b["y"], dtype=float), rtol=1e-12)


def test_joint_by_cycle_length_from_arlib_to_screen_and_report(snap: Snapshot, made: tuple[Path, str]) -> None:
    """Joint connectedness by band (Lastrapes–Wiesen 2021 split by Baruník–Křehlík 2018 band):
    the stored values of the latest window equal arlib's `joint_frequency_connectedness` of the
    window refitted on its stored rows (1e-8, the engine's documented agreement), the screen's
    stacked bands plot them, the report plots the same values in the same colours, and its table
    prints them."""
    import arlib
    from serving import refit

    html = made[1]
    u = snap.universe(UNIVERSE)
    jb = snap.results("joint_band_connectedness", u)
    assert jb is not None and len(jb.periods) == 3
    end = jb.ends[-1]
    single = arlib.joint_frequency_connectedness(refit(snap, u, end), bands=jb.periods, truncation=jb.truncation)
    np.testing.assert_allclose(jb["total"][-1], single.total, rtol=1e-8, atol=1e-8)
    np.testing.assert_allclose(jb["from_others"][-1], single.from_others, rtol=1e-8, atol=1e-8)
    np.testing.assert_allclose(jb["variance_share"][-1], single.variance_share, rtol=1e-8, atol=1e-8)
    # stored for the same windows as the joint index
    joint = snap.joint_history(u)
    assert joint is not None and joint.ends == jb.ends
    (_, _, _), (screen, rows, note) = cb.joint_tab(snap, latest_state(snap))
    stacked = [t for t in screen["data"] if t.get("stackgroup") == "joint"]
    assert len(stacked) == 3 and len(rows) == 3 * len(jb.ends)
    np.testing.assert_allclose(np.asarray(stacked[0]["y"], dtype=float), jb["total"][:, 0], rtol=1e-12)
    assert f"{jb['total'][-1, 0]:.1f}" in note
    printed = plotly_traces(html, "fig-joint-bands")
    assert [t["name"] for t in printed] == [t["name"] for t in screen["data"]]
    for a, b in zip(printed, screen["data"], strict=True):
        np.testing.assert_allclose(np.asarray(a["y"], dtype=float), np.asarray(b["y"], dtype=float), rtol=1e-12)
        assert a["line"]["color"] == b["line"]["color"]
    assert "Joint index by band, window ending " + str(end) in html
