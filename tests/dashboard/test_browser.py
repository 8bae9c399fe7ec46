"""The dashboard in a real browser: Debian's chromium driven by Playwright, against a served app.

One app (werkzeug on 127.0.0.1, a free port, daemon thread) and one browser (fresh user-data-dir)
serve the whole module. What the page shows is read back from the page itself — plotly keeps each
chart's traces on its DOM node (`gd.data`, `gd.layout`) — and compared with the snapshot file.
Screenshots land in test-artifacts/dashboard/ (gitignored).
"""

from __future__ import annotations

import csv
import datetime as dt
import logging
import tempfile
import threading
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from dashboard import DashboardSettings, create_app
from dashboard.layout import CAUTION
from tests.charts.grids import cell_values, response_panels
from tests.conftest import CHROMIUM_ARGS

from .conftest import read
from .test_callbacks import add_universe

pytestmark = pytest.mark.browser

ARTIFACTS = Path(__file__).resolve().parents[2] / "test-artifacts" / "dashboard"
TIMEOUT = 60_000  # ms; generous: CI machines and a busy laptop both pass


@pytest.fixture(scope="module")
def exports(pipeline_output: tuple[Path, Path | None], tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The pipeline's export folder (its HTML reports), or a stand-in report when it cannot run."""
    if pipeline_output[1] is not None:
        return pipeline_output[1]
    folder = tmp_path_factory.mktemp("exports")
    (folder / "demo-report.html").write_text("<html>the latest report</html>")
    return folder


#: A universe the served snapshot lists but that has no windows at all (its run fitted nothing yet).
EMPTY = "zz_no_windows"


@pytest.fixture(scope="module")
def served_snapshot(snapshot_path: Path, tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The session's snapshot plus the universe `EMPTY` (series listed, no windows)."""
    target = tmp_path_factory.mktemp("served") / "serving.duckdb"
    return add_universe(snapshot_path, target, EMPTY, ("E_ONE", "E_TWO"), skipped=False)


@pytest.fixture(scope="module")
def served(served_snapshot: Path, exports: Path) -> Iterator[str]:
    from werkzeug.serving import make_server

    app = create_app(DashboardSettings(snapshot=served_snapshot, export_dir=exports))
    logging.getLogger("werkzeug").setLevel(logging.ERROR)
    server = make_server("127.0.0.1", 0, app.server, threaded=True)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    yield f"http://127.0.0.1:{server.server_port}/"
    server.shutdown()
    thread.join(10)


@pytest.fixture(scope="module")
def page(served: str, chromium_path: str) -> Iterator[Any]:
    from playwright.sync_api import sync_playwright

    ARTIFACTS.mkdir(parents=True, exist_ok=True)
    with tempfile.TemporaryDirectory(prefix="shockflow-chromium-") as profile, sync_playwright() as p:
        context = p.chromium.launch_persistent_context(
            profile, executable_path=chromium_path, args=CHROMIUM_ARGS,
            viewport={"width": 1280, "height": 800}, accept_downloads=True,
        )  # fmt: skip
        pg = context.new_page()
        pg.set_default_timeout(TIMEOUT)
        errors: list[str] = []
        pg.on("pageerror", lambda exc: errors.append(str(exc)))
        pg.goto(served)
        pg.wait_for_selector("#index-graph .js-plotly-plot")
        yield pg
        context.close()
        assert not errors, errors


def traces(page: Any, graph_id: str) -> list[dict[str, Any]]:
    return page.evaluate(
        "id => { const gd = document.querySelector('#' + id + ' .js-plotly-plot');"
        " return gd && gd.data ? gd.data : []; }",
        graph_id,
    )


def layout(page: Any, graph_id: str) -> dict[str, Any]:
    return page.evaluate(
        "id => { const gd = document.querySelector('#' + id + ' .js-plotly-plot');"
        " return gd && gd.layout ? JSON.parse(JSON.stringify(gd.layout)) : {}; }",
        graph_id,
    )


def wait_text(page: Any, selector: str, text: str) -> None:
    page.wait_for_function(
        "([sel, txt]) => { const el = document.querySelector(sel); return el && el.innerText.includes(txt); }",
        arg=[selector, text],
    )


def open_tab(page: Any, label: str, graph_id: str) -> None:
    page.get_by_text(label, exact=True).click()
    page.wait_for_function(
        "id => { const gd = document.querySelector('#' + id + ' .js-plotly-plot');"
        " return gd && gd.data && gd.data.length > 0; }",
        arg=graph_id,
    )


def set_window(page: Any, start: str, end: str) -> None:
    for sel, value in (("#window-start", start), ("#window-end", end)):
        page.fill(sel, value)
        page.press(sel, "Enter")
    wait_text(page, "#window-note", f"Date window {start} to {end}")


def series_of(snapshot_path: Path, universe: str) -> list[str]:
    return [s for (s,) in read(snapshot_path, "SELECT series FROM universe_series WHERE universe = ? ORDER BY position", [universe])]


def shown_responses(page: Any, names: list[str]) -> np.ndarray:
    """The shock-path grid on the page, read back from its points' true values (customdata):
    (H+1, n, n) [horizon, response, shock]."""
    panels = response_panels(traces(page, "paths-graph"), names)
    n = len(names)
    assert panels.keys() == {(i, j) for i in range(n) for j in range(n)}
    return np.stack([[panels[(i, j)]["response"] for j in range(n)] for i in range(n)]).transpose(2, 0, 1)


def stored_response(snapshot_path: Path, universe: str, end: dt.date, ident: str) -> np.ndarray:
    n = read(snapshot_path, "SELECT count(*) FROM universe_series WHERE universe = ?", [universe])[0][0]
    ((horizon, flat),) = read(
        snapshot_path,
        "SELECT horizon, response FROM responses WHERE universe = ? AND window_end = ? AND identification = ?",
        [universe, end, ident],
    )
    return np.asarray(flat).reshape(horizon + 1, n, n)


def cholesky_from_stored_model(snapshot_path: Path, universe: str, end: dt.date, horizon: int) -> np.ndarray:
    """Cholesky responses of the window's stored VAR (Lütkepohl 2005, eq. 2.3.33), via arlib."""
    import arlib

    n = read(snapshot_path, "SELECT count(*) FROM universe_series WHERE universe = ?", [universe])[0][0]
    ((lags, coefs, sigma),) = read(
        snapshot_path,
        "SELECT lags, coefs, sigma_u FROM window_params WHERE universe = ? AND window_end = ?",
        [universe, end],
    )
    proc = arlib.var_process(np.asarray(coefs).reshape(lags, n, n), np.asarray(sigma).reshape(n, n))
    return np.asarray(arlib.impulse_responses(proc, horizon, shocks="cholesky"))


def fitted_end(snapshot_path: Path, universe: str, start: str, end: str) -> dt.date:
    return read(
        snapshot_path,
        "SELECT max(window_end) FROM window_fits WHERE universe = ? AND window_end BETWEEN ? AND ? "
        "AND skip_reason IS NULL",
        [universe, dt.date.fromisoformat(start), dt.date.fromisoformat(end)],
    )[0][0]


def test_first_view_and_caution(page: Any, exports: Path, universe_name: str, bounds: tuple[dt.date, dt.date]) -> None:
    caution = page.locator("#caution")
    assert caution.is_visible()
    assert CAUTION in caution.inner_text()
    box = caution.bounding_box()
    assert box is not None and box["y"] + box["height"] <= 800 + 1  # inside the 1280×800 viewport
    wait_text(page, "#window-note", f"Date window {bounds[0]} to {bounds[1]}")
    index = layout(page, "index-graph")
    assert index["xaxis"]["range"][0].startswith(bounds[0].isoformat())
    assert any(s.get("type") == "rect" for s in index.get("shapes", []))  # stress shading
    link = page.locator("#reports a").first
    assert link.inner_text().startswith("latest: ")
    assert link.get_attribute("href").startswith("/reports/")
    # the chosen universe's newest HTML report comes first
    mine = [p for p in exports.rglob("*.html") if universe_name in p.name] or list(exports.rglob("*.html"))
    newest = max(mine, key=lambda p: p.stat().st_mtime)
    assert link.inner_text().removeprefix("latest: ") == newest.name
    page.wait_for_selector("#paths-graph .js-plotly-plot")
    page.screenshot(path=str(ARTIFACTS / "01-overview-shock-paths.png"))
    # the caution stays in view when the page is scrolled to the bottom
    page.mouse.wheel(0, 5000)
    box = caution.bounding_box()
    assert caution.is_visible() and box is not None and box["y"] < 800
    page.mouse.wheel(0, -5000)


def test_date_window_drives_the_views(page: Any, snapshot_path: Path, universe_name: str, bounds: tuple[dt.date, dt.date]) -> None:
    lo, hi = bounds
    ends = [d for (d,) in read(snapshot_path, "SELECT window_end FROM connectedness WHERE universe = ? ORDER BY 1", [universe_name])]
    start, end = ends[2].isoformat(), ends[len(ends) // 2].isoformat()
    set_window(page, start, end)
    used = fitted_end(snapshot_path, universe_name, start, end)
    wait_text(page, "#paths-note", f"Window ending {used}")
    # the overview zooms to the window
    rng = layout(page, "index-graph")["xaxis"]["range"]
    assert rng[0].startswith(start) and rng[1].startswith(end)
    # the shock paths on the page are the stored responses of that window (the true values each
    # point of the one-axis grid carries)
    names = series_of(snapshot_path, universe_name)
    n = len(names)
    got = shown_responses(page, names)
    assert got.shape[1:] == (n, n)
    want = stored_response(snapshot_path, universe_name, used, "generalized")
    np.testing.assert_allclose(got, want[: got.shape[0]], rtol=1e-12)
    page.screenshot(path=str(ARTIFACTS / "02-narrow-window.png"))
    # moving the chart's range (what the slider and zoom do) rewrites the date inputs
    new_start, new_end = ends[1].isoformat(), ends[-2].isoformat()
    page.evaluate(
        "([a, b]) => { const gd = document.querySelector('#index-graph .js-plotly-plot');"
        " return window.Plotly.relayout(gd, {'xaxis.range': [a, b]}); }",
        [new_start, new_end],
    )
    wait_text(page, "#window-note", f"Date window {new_start} to {new_end}")
    assert page.input_value("#window-start") == new_start
    assert page.input_value("#window-end") == new_end
    # typed dates still move the chart after a zoom of its own
    set_window(page, lo.isoformat(), hi.isoformat())
    page.wait_for_function(
        "([a, b]) => { const gd = document.querySelector('#index-graph .js-plotly-plot');"
        " return gd && gd.layout.xaxis.range[0].startsWith(a) && gd.layout.xaxis.range[1].startsWith(b); }",
        arg=[lo.isoformat(), hi.isoformat()],
    )


def test_other_identification(page: Any, snapshot_path: Path, universe_name: str, bounds: tuple[dt.date, dt.date]) -> None:
    page.get_by_text("Shock paths", exact=True).click()
    page.locator("#identification input[value=cholesky]").check()
    wait_text(page, "#paths-note", "Window ending")
    page.wait_for_function(
        "() => { const gd = document.querySelector('#paths-graph .js-plotly-plot');"
        " return gd && gd.layout && gd.layout.title.text.includes('Cholesky'); }"
    )
    used = fitted_end(snapshot_path, universe_name, bounds[0].isoformat(), bounds[1].isoformat())
    names = series_of(snapshot_path, universe_name)
    n = len(names)
    got = shown_responses(page, names)
    want = cholesky_from_stored_model(snapshot_path, universe_name, used, got.shape[0] - 1)
    np.testing.assert_allclose(got, want, rtol=1e-10, atol=1e-14)
    # recursive identification: the first series does not respond on impact to the others' shocks
    assert all(abs(got[0, 0, j]) < 1e-15 for j in range(1, n))
    page.screenshot(path=str(ARTIFACTS / "03-cholesky.png"))
    # a band computed on demand (arlib bootstrap) appears with a note saying so
    page.locator("#bands input[value=bootstrap]").check()
    wait_text(page, "#paths-note", "residual-bootstrap band")
    assert any(t.get("name") == "band" for t in traces(page, "paths-graph"))
    page.locator("#identification input[value=generalized]").check()
    page.locator("#bands input[value=stored]").check()
    wait_text(page, "#paths-note", "stored band")


@pytest.mark.parametrize(
    ("label", "graph", "note"),
    [
        ("Variance shares", "shares-graph", "shares-note"),
        ("Lead–lag", "leadlag-graph", "leadlag-note"),
        ("Spillover network", "network-graph", "network-note"),
        ("Compare windows", "compare-pairs-graph", "compare-note"),
        ("Model health", "health-graph", "health-note"),
        ("Own cycles", "cycles-graph", "cycles-note"),
        ("By cycle length", "bands-pairs-graph", "bands-note"),
    ],
)
def test_each_view_loads(page: Any, label: str, graph: str, note: str) -> None:
    open_tab(page, label, graph)
    page.wait_for_function("id => document.getElementById(id).innerText.length > 10", arg=note)
    text = page.inner_text("#" + note)
    assert "could not be computed" not in text
    page.screenshot(path=str(ARTIFACTS / f"view-{graph.removesuffix('-graph')}.png"), full_page=True)


def test_csv_download_equals_the_snapshot(page: Any, snapshot_path: Path, universe_name: str, bounds: tuple[dt.date, dt.date]) -> None:
    open_tab(page, "Lead–lag", "leadlag-graph")
    with page.expect_download() as info:
        page.get_by_role("button", name="Download data (CSV)").locator("visible=true").last.click()
    download = info.value
    name = download.suggested_filename
    assert name.startswith(f"shockflow_{universe_name}_leadlag_") and name.endswith(".csv")
    rows = list(csv.DictReader(open(download.path(), encoding="utf-8")))
    used = fitted_end(snapshot_path, universe_name, bounds[0].isoformat(), bounds[1].isoformat())
    stored = {(c, s): p for c, s, p in read(snapshot_path, "SELECT caused, causing, p_value FROM granger WHERE universe = ? AND window_end = ?", [universe_name, used])}
    assert len(rows) == len(stored)
    for r in rows:
        assert r["window_end"] == used.isoformat()
        assert float(r["p_value"]) == pytest.approx(stored[(r["caused"], r["causing"])], rel=1e-12)


def test_switching_universe_resets_window_and_controls(page: Any, snapshot_path: Path, universe_name: str, bounds: tuple[dt.date, dt.date]) -> None:
    others = [u for (u,) in read(snapshot_path, "SELECT universe FROM universes WHERE universe <> ? ORDER BY 1", [universe_name])]
    if not others:
        pytest.skip("the snapshot holds one universe")
    other = others[0]
    ((lo, hi),) = read(snapshot_path, "SELECT min(window_end), max(window_end) FROM window_fits WHERE universe = ?", [other])
    series = [s for (s,) in read(snapshot_path, "SELECT series FROM universe_series WHERE universe = ? ORDER BY position", [other])]
    page.get_by_text("Shock paths", exact=True).click()
    page.locator("#universe").click()
    page.get_by_role("option", name=other, exact=True).click()
    wait_text(page, "#window-note", f"Date window {lo} to {hi}")
    assert page.input_value("#window-start") == lo.isoformat()
    # the ordering control now lists the new universe's series, and the grid shows them
    page.wait_for_function(
        "s => { const gd = document.querySelector('#paths-graph .js-plotly-plot');"
        " const t = gd && gd.data && gd.data.find(t => t.name === 'response');"
        " return t && t.customdata[0][0] === s[0] && t.customdata[0][1] === s[0]"
        " && new Set(t.customdata.filter(p => p).map(p => p[0] + '|' + p[1])).size === s.length ** 2; }",
        arg=series,
    )
    (shown,) = [t for t in traces(page, "paths-graph") if t.get("name") == "response"]
    assert next(iter(cell_values(shown))) == (series[0], series[0])
    assert other in layout(page, "index-graph")["title"]["text"]
    # and the universe's own identification is selected
    ident = read(snapshot_path, "SELECT identification FROM universes WHERE universe = ?", [other])[0][0]
    assert page.locator(f"#identification input[value={ident}]").is_checked()
    page.screenshot(path=str(ARTIFACTS / "04-other-universe.png"))
    page.locator("#universe").click()
    page.get_by_role("option", name=universe_name, exact=True).click()
    wait_text(page, "#window-note", f"Date window {bounds[0]} to {bounds[1]}")


def pick_universe(page: Any, name: str) -> None:
    page.locator("#universe").click()
    page.get_by_role("option", name=name, exact=True).click()


def test_empty_universe_shows_its_own_empty_state(page: Any, universe_name: str, bounds: tuple[dt.date, dt.date]) -> None:
    """Issue 10.2: nothing of the previous universe stays on the page."""
    page.get_by_text("Shock paths", exact=True).click()
    pick_universe(page, EMPTY)
    wait_text(page, "#window-note", "no fitted windows")
    assert EMPTY in page.inner_text("#window-note")
    page.wait_for_function(
        "u => { const gd = document.querySelector('#index-graph .js-plotly-plot');"
        " return gd && gd.data.length === 0 && JSON.stringify(gd.layout.annotations || []).includes(u); }",
        arg=EMPTY,
    )
    page.wait_for_function(
        "u => { const gd = document.querySelector('#paths-graph .js-plotly-plot');"
        " return gd && gd.data.length === 0 && JSON.stringify(gd.layout.annotations || []).includes(u); }",
        arg=EMPTY,
    )
    wait_text(page, "#reports", f"No exported report for {EMPTY} yet.")
    assert page.locator("#reports a").count() == 0
    # every chart on view (tabs not selected keep their panel, hidden, and recompute when shown)
    shown = page.evaluate(
        "() => [...document.querySelectorAll('.js-plotly-plot')].filter(gd => !gd.closest('.view-panel--idle'))"
        ".map(gd => JSON.stringify(gd.layout || {}) + JSON.stringify(gd.data || [])).join(' ')"
    )
    assert universe_name not in shown
    page.screenshot(path=str(ARTIFACTS / "05-empty-universe.png"))
    pick_universe(page, universe_name)
    wait_text(page, "#window-note", f"Date window {bounds[0]} to {bounds[1]}")
    page.wait_for_selector("#reports a")


def test_horizon_control_says_what_it_drives(page: Any, universe_name: str) -> None:
    """Issue 10.3: the control sits with the views it drives, the index says its own horizon, and
    a bad value is quoted as typed."""
    page.get_by_text("Shock paths", exact=True).click()
    index_box = page.locator("#index-graph").bounding_box()
    horizon_box = page.locator("#horizon").bounding_box()
    assert horizon_box["y"] > index_box["y"] + index_box["height"]  # below the index, not above it
    bar = page.inner_text("#model-bar-title")
    for view in ("Shock paths", "Variance shares", "Compare windows"):
        assert view in bar
    title = layout(page, "index-graph")["title"]["text"]
    assert "-step horizon" in title and "does not change it" in title
    page.fill("#horizon", "500")
    page.press("#horizon", "Enter")
    wait_text(page, "#paths-note", "'500'")
    note = page.inner_text("#paths-note")
    assert "`" not in note and "None" not in note
    page.screenshot(path=str(ARTIFACTS / "06-horizon-500.png"))
    page.fill("#horizon", "10")
    page.press("#horizon", "Enter")
    wait_text(page, "#paths-note", "Window ending")


PANELS_JS = """id => {
  const gd = document.querySelector('#' + id + ' .js-plotly-plot');
  const fl = gd._fullLayout;
  const svg = gd.querySelector('.main-svg').getBoundingClientRect();
  return Object.keys(fl._plots).map(sp => {
    const xa = fl._plots[sp].xaxis, ya = fl._plots[sp].yaxis;
    const labels = [...gd.querySelectorAll('.subplot.' + sp + ' .yaxislayer-above text')]
      .map(t => t.getBoundingClientRect()).filter(r => r.width > 0);
    return {sp, left: svg.left + xa._offset, right: svg.left + xa._offset + xa._length,
            top: svg.top + ya._offset, bottom: svg.top + ya._offset + ya._length,
            labelLeft: labels.length ? Math.min(...labels.map(r => r.left)) : null};
  });
}"""

BOXES_JS = """([id, sel]) => [...document.querySelectorAll('#' + id + ' ' + sel)]
  .map(e => e.getBoundingClientRect()).filter(r => r.width > 0)
  .map(r => ({left: r.left, right: r.right, top: r.top, bottom: r.bottom}))"""


def _overlap(a: dict[str, float], b: dict[str, float]) -> bool:
    return a["left"] < b["right"] - 1 and b["left"] < a["right"] - 1 and a["top"] < b["bottom"] - 1 and b["top"] < a["bottom"] - 1


CELLS_JS = """id => {
  const gd = document.querySelector('#' + id + ' .js-plotly-plot');
  const xa = gd._fullLayout.xaxis, ya = gd._fullLayout.yaxis;
  const svg = gd.querySelector('.main-svg').getBoundingClientRect();
  const t = gd.data.find(t => t.name === 'panels'), out = [];
  for (let k = 0; k + 5 <= t.x.length; k += 6) {  // a cell's box: five corners, then a gap
    const xs = t.x.slice(k, k + 5), ys = t.y.slice(k, k + 5);
    out.push({left: svg.left + xa._offset + xa.l2p(Math.min(...xs)),
              right: svg.left + xa._offset + xa.l2p(Math.max(...xs)),
              top: svg.top + ya._offset + ya.l2p(Math.max(...ys)),
              bottom: svg.top + ya._offset + ya.l2p(Math.min(...ys))});
  }
  return out;
}"""


def _labels_apart(page: Any, graph_id: str) -> None:
    """A one-axis grid on the page: each cell's scale label, the column titles and the row names
    clear of one another and of every cell."""
    labels = page.evaluate(BOXES_JS, [graph_id, ".scatterlayer .textpoint text"])
    titles = page.evaluate(BOXES_JS, [graph_id, ".annotation-text"])
    rows = page.evaluate(BOXES_JS, [graph_id, ".ytick text"])
    cells = page.evaluate(CELLS_JS, graph_id)
    n = len(rows)
    assert len(cells) == n * n and len(labels) == n * n and len(titles) == n, (len(cells), len(labels), len(titles))
    everything = labels + titles + rows
    for k, a in enumerate(everything):
        for b in everything[k + 1:]:
            assert not _overlap(a, b), (a, b)
        for c in cells:
            assert not _overlap(a, c), (a, c)


def test_shock_path_layout_in_the_browser(page: Any, snapshot_path: Path, universe_name: str) -> None:
    """Issue 10.4, measured on the drawn page: the legend inside its figure and clear of the
    controls, the long Cholesky title inside the figure; the grid (one pair of axes) keeps its
    scale labels, column titles and row names clear of one another and of the cells."""
    page.set_viewport_size({"width": 1024, "height": 800})  # a laptop-sized window
    page.get_by_text("Shock paths", exact=True).click()
    page.locator("#identification input[value=cholesky]").check()
    page.locator("#bands input[value=bootstrap]").check()
    wait_text(page, "#paths-note", "residual-bootstrap band")
    page.wait_for_timeout(500)  # the responsive figure re-lays itself out at the new width
    svg = page.evaluate(BOXES_JS, ["paths-graph", ".main-svg"])[0]
    (legend,) = page.evaluate(BOXES_JS, ["paths-graph", ".legend"])
    assert svg["top"] <= legend["top"] and legend["bottom"] <= svg["bottom"] + 1, (legend, svg)
    controls = page.evaluate(BOXES_JS, ["paths-panel", ".controls"]) + page.evaluate(BOXES_JS, ["model-bar", "*"])
    assert not any(_overlap(legend, c) for c in controls)
    titles = page.evaluate(BOXES_JS, ["paths-graph", ".gtitle"])
    assert titles and all(t["right"] <= svg["right"] + 1 for t in titles), (titles, svg)
    _labels_apart(page, "paths-graph")
    page.locator("#identification input[value=generalized]").check()
    page.locator("#bands input[value=stored]").check()
    wait_text(page, "#paths-note", "stored band")
    page.wait_for_timeout(300)
    _labels_apart(page, "paths-graph")
    page.screenshot(path=str(ARTIFACTS / "07-cholesky-layout.png"), full_page=True)
    page.set_viewport_size({"width": 1280, "height": 800})


HOVER_JS = """([curve, point]) => {
  const gd = document.querySelector('#paths-graph .js-plotly-plot');
  window.Plotly.Fx.hover(gd, [{curveNumber: curve, pointNumber: point}]);
}"""
HOVER_TEXT_JS = """want => {
  const gd = document.querySelector('#paths-graph .js-plotly-plot');
  const text = [...gd.querySelectorAll('.hoverlayer .hovertext')].map(e => e.textContent).join(' ');
  return text.includes(want) ? text : null;
}"""


def test_shock_path_hover_says_the_true_value(page: Any, snapshot_path: Path, universe_name: str, bounds: tuple[dt.date, dt.date]) -> None:
    """The grid's heights are positions in a cell; hovering a point says its pair, horizon and
    true (stored) value, and the band around it."""
    page.get_by_text("Shock paths", exact=True).click()
    wait_text(page, "#paths-note", "stored band")
    data = traces(page, "paths-graph")
    curve = next(k for k, t in enumerate(data) if t.get("name") == "response")
    names = series_of(snapshot_path, universe_name)
    used = fitted_end(snapshot_path, universe_name, bounds[0].isoformat(), bounds[1].isoformat())
    want = stored_response(snapshot_path, universe_name, used, "generalized")
    H1 = data[curve]["customdata"].index(None)  # horizons shown: the first cell's points
    assert H1 <= want.shape[0]
    for i, j, h in ((0, 1, 0), (len(names) - 1, 0, 2)):
        point = (i * len(names) + j) * (H1 + 1) + h  # a cell's points, then its gap
        page.wait_for_timeout(150)  # plotly takes a hover at most every 50 ms
        page.evaluate(HOVER_JS, [curve, point])
        text = page.wait_for_function(HOVER_TEXT_JS, arg=f"{names[i]} after a shock to {names[j]}").json_value()
        assert f"h={h}: " in text and "band: " in text, text
        shown = float(text.split(f"h={h}: ")[1].split("band")[0].replace("−", "-"))
        assert shown == pytest.approx(want[h, i, j], rel=1e-3), (text, want[h, i, j])


def test_network_spreads_nodes_and_labels(page: Any) -> None:
    """Issue 10.4: nodes use the plot's width and height; no two node labels overlap."""
    open_tab(page, "Spillover network", "network-graph")
    # the chart may still be laid out again after its first data (page reflow as other tabs'
    # charts are drawn): measure nodes, labels and plot area together, once two reads agree
    before = None
    for _ in range(40):
        now = (
            page.evaluate(PANELS_JS, "network-graph"),
            page.evaluate(BOXES_JS, ["network-graph", ".scatterlayer .trace:last-child .point"]),
            page.evaluate(BOXES_JS, ["network-graph", ".scatterlayer .trace:last-child .textpoint text"]),
        )
        if now == before:
            break
        before = now
        page.wait_for_timeout(250)
    panels, points, labels = now
    area = panels[0]
    xs = [(b["left"] + b["right"]) / 2 for b in points]
    ys = [(b["top"] + b["bottom"]) / 2 for b in points]
    assert (max(xs) - min(xs)) >= 0.6 * (area["right"] - area["left"])
    assert (max(ys) - min(ys)) >= 0.6 * (area["bottom"] - area["top"])
    assert len(labels) == len(points)
    for i, a in enumerate(labels):
        for b in labels[i + 1:]:
            assert not _overlap(a, b), (a, b)
        for p in points:  # a label never covers a node
            assert not _overlap(a, p), (a, p)
    page.screenshot(path=str(ARTIFACTS / "08-network.png"), full_page=True)


# -- callback round trips per interaction (issue 15: a count, never a timing) --------------------

#: The most `_dash-update-component` requests each interaction may cost (measured: opening the
#: page 1 — the first tab's view; the index and date window come with the page; a new "to" date 3
#: — the date window, the index, the open tab's view; a tab whose inputs changed since it was
#: last shown 1; a tab shown again with nothing changed 0; a tab's own control 1). Before issue
#: 15 (measured): opening 14, a new "to" date 12, every tab switch 10.
ROUND_TRIPS = {"open": 1, "to date": 3, "stale tab": 1, "same tab": 0, "own control": 1}


class RoundTrips:
    """Counts the page's callback requests; `settle` waits until none is pending for a while."""

    QUIET_MS = 1500  # no callback request pending or started for this long: the interaction is over

    def __init__(self, page: Any) -> None:
        self.page, self.sent, self.done = page, 0, 0
        page.on("request", self._on_request)
        page.on("requestfinished", self._on_done)
        page.on("requestfailed", self._on_done)

    @staticmethod
    def _is_callback(request: Any) -> bool:
        return "_dash-update-component" in request.url

    def _on_request(self, request: Any) -> None:
        if self._is_callback(request):
            self.sent += 1

    def _on_done(self, request: Any) -> None:
        if self._is_callback(request):
            self.done += 1

    def settle(self) -> None:
        quiet, seen = 0, -1
        while quiet < self.QUIET_MS:
            self.page.wait_for_timeout(100)
            if self.sent != seen or self.done < self.sent:
                seen, quiet = self.sent, 0
            else:
                quiet += 100

    def count(self, action: Any) -> int:
        before = self.sent
        action()
        self.settle()
        return self.sent - before


@pytest.fixture
def fresh_page(page: Any, served: str) -> Iterator[tuple[Any, RoundTrips]]:
    """A new page of the module's browser (nothing visited yet), and its callback-request count."""
    pg = page.context.new_page()
    pg.set_default_timeout(TIMEOUT)
    trips = RoundTrips(pg)
    pg.goto(served)
    pg.wait_for_selector("#index-graph .js-plotly-plot")
    yield pg, trips
    pg.close()


def test_round_trips_per_interaction_do_not_grow(fresh_page: tuple[Any, RoundTrips], bounds: tuple[dt.date, dt.date]) -> None:
    """Each interaction costs at most `ROUND_TRIPS` callback requests (counted in the browser)."""
    page, trips = fresh_page
    trips.settle()
    counts = {"open": trips.sent}
    lo, hi = bounds
    new_end = (lo + (hi - lo) * 3 / 4).isoformat()

    def set_end() -> None:
        page.fill("#window-end", new_end)
        page.press("#window-end", "Enter")
        wait_text(page, "#window-note", f"to {new_end}")

    counts["to date"] = trips.count(set_end)
    counts["stale tab"] = trips.count(lambda: open_tab(page, "Spillover network", "network-graph"))
    counts["same tab"] = max(
        trips.count(lambda: open_tab(page, "Shock paths", "paths-graph")),
        trips.count(lambda: open_tab(page, "Spillover network", "network-graph")),
    )
    counts["own control"] = trips.count(lambda: page.locator("#network-mode input[value=mean]").check())
    assert all(counts[k] <= ROUND_TRIPS[k] for k in ROUND_TRIPS), (counts, ROUND_TRIPS)
    # and the page still answers: the network shows the averaged spillovers of the new window
    wait_text(page, "#network-note", "averaged over")


#: Put in a page before its scripts: every chart draw plotly runs (inside the page's own wrapper of
#: `Plotly.react`, so a draw put off is recorded when it runs): graph id, traces, started, painted.
DRAWS_JS = r"""(() => {
  const S = window.__draws = []; let P;
  Object.defineProperty(window, 'Plotly', {configurable: true, get() { return P; }, set(v) {
    P = v;
    if (!v || !v.react || v.__drawsWrapped) return;
    const react = v.react;
    v.react = function (gd, fig) {
      const host = gd && gd.closest ? gd.closest('[id$="-graph"]') : null;
      const rec = {id: host ? host.id : '', traces: fig && fig.data ? fig.data.length : 0,
                   start: performance.now(), painted: null};
      S.push(rec);
      const out = react.apply(this, arguments);
      Promise.resolve(out).then(() => requestAnimationFrame(() => { rec.painted = performance.now(); }));
      return out;
    };
    v.__drawsWrapped = true;
  }});
})();"""


def test_first_load_draws_no_empty_chart_before_the_index_is_painted(page: Any, served: str) -> None:
    """Issue 15 (first chart): every tab's graph is on the page from the start, and dcc.Graph draws
    each as it mounts, empty; those draws ran in the same task as the index chart's and held back
    its paint (16 empty charts on the demo). A graph's first draw, when empty, now waits until the
    browser is idle (`assets/plotly-deferred.js`): until the index chart is painted no empty chart
    is drawn; afterwards each at most once, and a tab shown later draws its data."""
    pg = page.context.new_page()
    pg.set_default_timeout(TIMEOUT)
    errors: list[str] = []
    pg.on("pageerror", lambda exc: errors.append(str(exc)))
    try:
        pg.add_init_script(DRAWS_JS)
        pg.goto(served)
        pg.wait_for_function("() => window.__draws.some(d => d.id === 'index-graph' && d.traces > 0 && d.painted)")
        # every graph of the page drawn at last (the empty ones once the browser was idle)
        pg.wait_for_function(
            "() => { const drawn = new Set(window.__draws.map(d => d.id));"
            " return [...document.querySelectorAll('div[id$=\"-graph\"]')].every(el => drawn.has(el.id)); }"
        )
        draws = pg.evaluate("() => window.__draws")
        index = next(d for d in draws if d["id"] == "index-graph" and d["traces"] > 0)
        early = [d["id"] for d in draws if d["traces"] == 0 and d["start"] < index["painted"]]
        assert early == [], early
        empties = [d["id"] for d in draws if d["traces"] == 0]
        assert "health-graph" in empties and len(empties) == len(set(empties)), empties
        open_tab(pg, "Spillover network", "network-graph")
        assert not errors, errors
    finally:
        pg.close()


@pytest.mark.parametrize(
    ("label", "graphs"),
    [("Compare windows", ("compare-pairs-graph", "compare-paths-graph")), ("Shock paths", ("paths-graph",))],
)
def test_grid_and_heatmap_margins_need_no_automargin_widening(page: Any, label: str, graphs: tuple[str, ...]) -> None:
    """Issue 15 (Compare windows, first visit): the heatmaps asked for margins of 60/20/40 px and the
    grids for 20 px on the left, narrower than their labels; plotly's automargin widened them as it
    drew, and each widening redrew the whole chart (a first draw ran ~2× longer). The figures now
    ask for margins that hold their labels (`charts._theme.text_px`): what is drawn is what was asked."""
    for graph in graphs:
        open_tab(page, label, graph)
        asked, drawn = page.evaluate(
            "id => { const gd = document.querySelector('#' + id + ' .js-plotly-plot');"
            " return [gd.layout.margin, gd._fullLayout._size]; }",
            graph,
        )
        assert {k: drawn[k] for k in "lrtb"} == {k: asked[k] for k in "lrtb"}, (graph, asked, drawn)
