"""The shock-path grids: on screen one pair of axes (a cell per panel), in print a subplot per panel;
the true values come back from either figure, and each cell says its own scale."""

from __future__ import annotations

import numpy as np
import plotly.graph_objects as go

import charts
from tests.charts.grids import cell_values, panel_pairs, response_panels

NAMES = ["alpha", "beta", "gamma"]


def _grid(seed: int = 0, H: int = 6) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    resp = rng.normal(scale=[1e-3, 0.5, 40.0], size=(H + 1, 3, 3))  # rows of very different sizes
    return resp, resp - 0.1 * np.abs(resp) - 1e-4, resp + 0.1 * np.abs(resp) + 1e-4


def test_screen_grid_is_one_pair_of_axes_with_true_values_in_customdata() -> None:
    resp, lo, hi = _grid()
    resp[3, 1, 2] = np.nan  # a missing value stays a gap, never a number
    resp[:, 2, 0] = 0.0  # a panel of zeros
    fig = charts.responses_figure(resp, NAMES, lower=lo, upper=hi, title="t", yunit="u", band_label="90% band")
    go.Figure(fig)
    axes = sorted(k for k in fig["layout"] if k.startswith(("xaxis", "yaxis")))
    assert axes == ["xaxis", "yaxis"]
    assert [t["name"] for t in fig["data"]] == ["panels", "90% band", "zero", "response", "scales"]
    assert [t["name"] for t in fig["data"] if t.get("showlegend", True)] == ["90% band", "response"]
    panels = response_panels(fig["data"], NAMES)
    assert len(panels) == 9
    for (i, j), p in panels.items():
        np.testing.assert_array_equal(p["response"], resp[:, i, j])
        np.testing.assert_array_equal(p["lower"], lo[:, i, j])
        np.testing.assert_array_equal(p["upper"], hi[:, i, j])
    line = fig["data"][3]
    assert line["y"][(1 * 3 + 2) * 8 + 3] is None  # row 1, column 2, h = 3: the gap
    assert "%{customdata[3]:.4g}" in line["hovertemplate"] and "90% band" in line["hovertemplate"]
    # row names on the y axis, column names above the top row
    assert fig["layout"]["yaxis"]["ticktext"] == NAMES
    assert [a["text"] for a in fig["layout"]["annotations"]] == NAMES
    assert "own scale" in fig["layout"]["title"]["text"]


def test_each_cell_prints_the_range_it_is_drawn_on() -> None:
    """A cell spans round numbers at or beyond its lowest and highest value (and zero); its label
    says them, and a value's height in the cell is its place in that range."""
    resp, lo, hi = _grid(seed=3)
    fig = charts.responses_figure(resp, NAMES, lower=lo, upper=hi, title="t", yunit="u")
    scales = fig["data"][-1]["text"]
    boxes = fig["data"][0]
    line = fig["data"][3]
    for k, (i, j) in enumerate((i, j) for i in range(3) for j in range(3)):
        bottom_text, top_text = scales[k].replace("−", "-").split("…")
        bottom, top = float(bottom_text), float(top_text)
        drawn = np.concatenate([resp[:, i, j], lo[:, i, j], hi[:, i, j], [0.0]])
        assert bottom <= drawn.min() and drawn.max() <= top
        assert drawn.max() - drawn.min() >= 0.3 * (top - bottom)  # the panel uses its cell
        cell_bottom = min(v for v in boxes["y"][6 * k: 6 * k + 5])
        heights = np.array(line["y"][8 * k: 8 * k + 7]) - cell_bottom
        np.testing.assert_allclose(heights, (resp[:, i, j] - bottom) / (top - bottom), atol=2e-4)


def test_a_cell_of_zeros_and_a_missing_band_value() -> None:
    resp, lo, hi = _grid(seed=5)
    resp[:, 0, 1] = lo[:, 0, 1] = hi[:, 0, 1] = 0.0
    hi[2, 2, 2] = np.inf
    fig = charts.responses_figure(resp, NAMES, lower=lo, upper=hi, title="t", yunit="u")
    assert fig["data"][-1]["text"][1] == "−1…1"
    panels = response_panels(fig["data"], NAMES)
    assert np.isnan(panels[(2, 2)]["upper"][2])  # shown as a gap; customdata says None
    np.testing.assert_array_equal(panels[(0, 1)]["response"], np.zeros(7))


def test_print_keeps_a_subplot_per_panel_with_the_same_values() -> None:
    resp, lo, hi = _grid(seed=7)
    screen = charts.responses_figure(resp, NAMES, lower=lo, upper=hi, title="t", yunit="u")
    paper = charts.responses_figure(resp, NAMES, lower=lo, upper=hi, title="t", yunit="u", medium="print")
    go.Figure(paper)
    assert len([k for k in paper["layout"] if k.startswith("xaxis")]) == 9
    assert len(paper["data"]) == 18 and all(len(t["meta"]) == 2 for t in paper["data"])
    on_screen, in_print = response_panels(screen["data"], NAMES), response_panels(paper["data"], NAMES)
    assert on_screen.keys() == in_print.keys()
    for key, p in on_screen.items():
        for part in ("response", "lower", "upper"):
            np.testing.assert_array_equal(p[part], in_print[key][part])
    # a report's figure per shock (wide universes): the chosen column only
    one = charts.responses_figure(resp, NAMES, shocks=[1], title="t", yunit="u")
    assert panel_pairs(one) == {(r, "beta") for r in NAMES}
    np.testing.assert_array_equal(response_panels(one["data"], NAMES)[(2, 1)]["response"], resp[:, 2, 1])
    assert "lower" not in response_panels(one["data"], NAMES)[(2, 1)]


def test_compare_grid_overlays_both_windows_on_one_pair_of_axes() -> None:
    a, _, _ = _grid(seed=1)
    b, _, _ = _grid(seed=2)
    fig = charts.responses_compare_figure(a, b, NAMES, labels=("A: w1", "B: w2"), title="t")
    go.Figure(fig)
    assert sorted(k for k in fig["layout"] if k.startswith(("xaxis", "yaxis"))) == ["xaxis", "yaxis"]
    first, second = (next(t for t in fig["data"] if t["name"] == label) for label in ("A: w1", "B: w2"))
    assert second["line"]["dash"] == "dash" and first["line"]["color"] != second["line"]["color"]
    for trace, values in ((first, a), (second, b)):
        for (r, s), got in cell_values(trace).items():
            np.testing.assert_array_equal(got, values[:, NAMES.index(r), NAMES.index(s)])
    # one scale per cell covers both windows
    scales = fig["data"][-1]["text"]
    for k, (i, j) in enumerate((i, j) for i in range(3) for j in range(3)):
        bottom, top = (float(v) for v in scales[k].replace("−", "-").split("…"))
        both = np.concatenate([a[:, i, j], b[:, i, j]])
        assert bottom <= both.min() and both.max() <= top


def test_pairwise_compare_heatmaps_share_one_colour_bar_for_both_windows() -> None:
    """Issue 15 (Compare windows): A and B were drawn with a colour bar each, the same bar twice
    (same range, same scale), and each bar is a drawn axis. They now share one colour axis; the
    change keeps its own symmetric one. The cells' values, texts and labels are unchanged."""
    rng = np.random.default_rng(3)
    a, b = rng.uniform(0, 60, size=(3, 3)), rng.uniform(0, 80, size=(3, 3))
    b[0, 2] = np.nan  # a missing cell stays blank
    fig = charts.pairwise_compare_figure(a, b, NAMES, labels=("2020 to 2021", "2022 to 2023"))
    go.Figure(fig)
    heat = fig["data"]
    assert [t["type"] for t in heat] == ["heatmap"] * 3
    assert [t["coloraxis"] for t in heat] == ["coloraxis", "coloraxis", "coloraxis2"]
    assert not any(k in t for t in heat for k in ("colorbar", "colorscale", "zmin", "zmax", "showscale"))
    bars = [k for k in fig["layout"] if k.startswith("coloraxis")]
    assert sorted(bars) == ["coloraxis", "coloraxis2"]  # two colour bars drawn, not three
    shared, change = fig["layout"]["coloraxis"], fig["layout"]["coloraxis2"]
    assert shared["cmin"] == 0.0 and shared["cmax"] == np.nanmax(np.concatenate([a.ravel(), b.ravel()]))
    lim = np.nanmax(np.abs(b - a))
    assert change["cmin"] == -lim and change["cmax"] == lim
    assert shared["colorbar"]["title"]["text"] == "%" and change["colorbar"]["title"]["text"] == "pp"
    for trace, z, fmt in zip(heat, (a, b, b - a), (".1f", ".1f", "+.1f"), strict=True):
        np.testing.assert_array_equal(np.array(trace["z"], dtype=float), z)
        assert trace["text"] == [["" if not np.isfinite(v) else format(v, fmt) for v in row] for row in z]
        assert trace["x"] == NAMES and trace["y"] == NAMES
    titles = [ann["text"] for ann in fig["layout"]["annotations"]]
    assert titles == ["A: 2020 to 2021", "B: 2022 to 2023", "change B − A, pp"]


def test_heatmaps_and_grids_ask_for_margins_that_hold_their_labels() -> None:
    """Issue 15: the Compare windows heatmaps asked for a 60 px left margin and the grids for 20 px
    whatever the names; plotly's automargin then widened them while drawing, redrawing the chart
    each time (tests/dashboard/test_browser.py checks the drawn margins in chromium). The margins
    asked for now grow with the widest label, at the theme font's measured character widths."""
    from charts import _theme as th

    for names in (["a", "b", "c"], ["VLX_BROAD", "VCR_SPREAD", "FX_VLR"], ["WWWWWWWWWWWWWWWWWWWWWWWW", "x", "y"]):
        n = len(names)
        fig = charts.pairwise_compare_figure(np.ones((n, n)), np.ones((n, n)), names, labels=("a", "b"))
        widest = max(th.text_px(x, 12) for x in names)
        margin = fig["layout"]["margin"]
        assert margin["l"] >= max(60, widest + 34) and margin["l"] <= max(60, widest + 34) + 3
        assert margin["b"] >= max(40, widest / 2 + 48) and margin["b"] <= max(40, widest / 2 + 48) + 3
        grid = charts.responses_compare_figure(np.zeros((5, n, n)), np.zeros((5, n, n)), names, labels=("A", "B"), title="t")
        assert max(20, th.text_px(max(names, key=len), 11) + 13) <= grid["layout"]["margin"]["l"]
        assert grid["layout"]["margin"]["l"] <= max(20, th.text_px(max(names, key=len), 11) + 13) + 3
    # V C R _ S P R E A D in DejaVu Sans (em): the table's values, 12 px
    np.testing.assert_allclose(th.text_px("VCR_SPREAD", 12), 12 * (0.68 + 0.7 + 0.69 + 0.5 + 0.63 + 0.6 + 0.69 + 0.63 + 0.68 + 0.77))
