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
from tests.conftest import CHROMIUM_ARGS

from .conftest import read

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


@pytest.fixture(scope="module")
def served(snapshot_path: Path, exports: Path) -> Iterator[str]:
    from werkzeug.serving import make_server

    app = create_app(DashboardSettings(snapshot=snapshot_path, export_dir=exports))
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
    assert caution.is_visible() and caution.bounding_box()["y"] < 800  # type: ignore[index]
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
    # the shock paths on the page are the stored responses of that window
    n = len(read(snapshot_path, "SELECT series FROM universe_series WHERE universe = ?", [universe_name]))
    shown = [t for t in traces(page, "paths-graph") if t.get("name") == "response"]
    assert len(shown) == n * n
    want = stored_response(snapshot_path, universe_name, used, "generalized")
    H = len(shown[0]["y"]) - 1
    got = np.array([t["y"] for t in shown]).reshape(n, n, H + 1).transpose(2, 0, 1)
    np.testing.assert_allclose(got, want[: H + 1], rtol=1e-12)
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
    shown = [t for t in traces(page, "paths-graph") if t.get("name") == "response"]
    n = round(len(shown) ** 0.5)
    got = np.array([t["y"] for t in shown]).reshape(n, n, -1).transpose(2, 0, 1)
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
        "n => { const gd = document.querySelector('#paths-graph .js-plotly-plot');"
        " return gd && gd.data && gd.data.filter(t => t.name === 'response').length === n; }",
        arg=len(series) ** 2,
    )
    shown = [t for t in traces(page, "paths-graph") if t.get("name") == "response"]
    assert shown[0]["meta"] == [series[0], series[0]]
    assert other in layout(page, "index-graph")["title"]["text"]
    # and the universe's own identification is selected
    ident = read(snapshot_path, "SELECT identification FROM universes WHERE universe = ?", [other])[0][0]
    assert page.locator(f"#identification input[value={ident}]").is_checked()
    page.screenshot(path=str(ARTIFACTS / "04-other-universe.png"))
    page.locator("#universe").click()
    page.get_by_role("option", name=universe_name, exact=True).click()
    wait_text(page, "#window-note", f"Date window {bounds[0]} to {bounds[1]}")
