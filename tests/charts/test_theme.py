"""The one chart theme: colour-blind-safe series styles, distinct for many series, one font, one mark."""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import numpy as np
import plotly.graph_objects as go

import charts

ROOT = Path(__file__).resolve().parents[2]


def test_palette_is_okabe_ito() -> None:
    # Okabe & Ito (2008), "Color Universal Design", the eight colours as hex (also printed in
    # Wong 2011, Nature Methods 8:441, Fig. 2); black is moved last here.
    published = {"#000000", "#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7"}
    assert set(charts.OKABE_ITO) == published and len(charts.OKABE_ITO) == 8


def test_series_styles_are_distinct_past_the_palette() -> None:
    """At least 12 (here 32) series never share a look: past eight colours the dash, marker and
    fill pattern change with the colour's second and later turns."""
    styles = [charts.series_style(k) for k in range(32)]
    lines = {(s["color"], s["dash"]) for s in styles}
    points = {(s["color"], s["symbol"]) for s in styles}
    bars = {(s["color"], s["pattern"]) for s in styles}
    assert len(lines) == len(points) == len(bars) == 32
    # the first eight series are told apart by colour alone (solid lines, plain bars)
    assert len({s["color"] for s in styles[:8]}) == 8
    assert {s["dash"] for s in styles[:8]} == {"solid"}


def test_one_font_for_charts_dashboard_and_report() -> None:
    for css in (ROOT / "dashboard" / "assets" / "style.css", ROOT / "pipeline" / "export" / "templates" / "report.css"):
        text = css.read_text(encoding="utf-8")
        assert '"DejaVu Sans", Helvetica, Arial, sans-serif' in text, css
    assert charts.FONT_FAMILY == "DejaVu Sans, Helvetica, Arial, sans-serif"


def test_twelve_series_in_every_multi_series_chart_keep_their_style() -> None:
    names = [f"S{k:02d}" for k in range(12)]
    n = len(names)
    shares = np.full((n, n), 100.0 / n)
    fig = charts.shares_figure([("generalized", shares)], names, title="t", medium="print")
    go.Figure(fig)
    for k, t in enumerate(fig["data"]):
        style = charts.series_style(k)
        assert t["meta"] == [names[k]]
        assert (t["marker"]["color"], t["marker"]["pattern"]["shape"]) == (style["color"], style["pattern"])
    ends = [np.datetime64("2020-01-01") + np.timedelta64(d, "D") for d in range(5)]
    net = charts.net_figure([str(e) for e in ends], np.zeros((5, n)), names, medium="print")
    go.Figure(net)
    for k, t in enumerate(net["data"]):
        style = charts.series_style(k)
        assert (t["line"]["color"], t["line"]["dash"]) == (style["color"], style["dash"])
    spectra = [(k, s, np.ones(3), None) for k, s in enumerate(names) if k % 3]  # some series missing
    cyc = charts.cycles_figure(np.array([0.0, 0.25, 0.5]), spectra, title="t")
    for t in cyc["data"]:
        if t.get("meta"):
            k = names.index(t["meta"][0])
            assert t["line"]["color"] == charts.series_style(k)["color"]


def test_figures_build_without_dash_or_duckdb() -> None:
    import subprocess
    import sys

    code = "import sys, charts; bad = [m for m in sys.modules if m.split('.')[0] in ('dash', 'duckdb', 'dashboard', 'pipeline')]; print(bad); sys.exit(bool(bad))"
    out = subprocess.run([sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True, check=False)
    assert out.returncode == 0, out.stdout + out.stderr


def test_band_index_right_axis_spans_the_hidden_within_band_lines() -> None:
    """The within-band lines start hidden (legend only); plotly then draws an axis with no visible
    trace from −1 to 4 (seen in the demo: ticks 3.98, 2.73, …, −1). The right axis spans the data."""


    ends = [dt.date(2024, 1, d) for d in (2, 3, 4)]
    totals = np.array([[10.0, 5.0, 1.0], [12.0, 4.0, 1.5], [9.0, 6.0, 2.0]])
    within = np.array([[30.0, 20.0, 8.0], [32.0, 22.0, 9.0], [28.0, 25.0, 7.0]])
    fig = charts.band_index_figure(ends, totals, ((1, 5), (5, 20), (20, float("inf"))), universe="u",
                                   truncation=100, within=within)
    y2 = fig["layout"]["yaxis2"]
    assert y2["range"][0] == 0 and 32.0 <= y2["range"][1] <= 32.0 * 1.1
    assert len(fig["layout"]["yaxis"]["title"]["text"]) <= 30  # a long title is clipped on screen


def test_every_public_builder_is_exported() -> None:
    """`charts` exports `_figures.__all__`: a public function left out of it is not reachable as
    `charts.name` (three were, until the package started exporting the list itself)."""
    import inspect

    from charts import _figures

    public = {name for name, f in inspect.getmembers(_figures, inspect.isfunction)
              if f.__module__ == _figures.__name__ and not name.startswith("_")}
    assert public <= set(_figures.__all__)
    assert set(_figures.__all__) <= set(charts.__all__)
    assert all(hasattr(charts, name) for name in charts.__all__)
