"""The app over HTTP (Flask test client): factory, settings, access control, downloads, hostile input."""

from __future__ import annotations

import base64
import json
import subprocess
import sys
from pathlib import Path
from typing import Any

import pytest

from dashboard import DashboardError, DashboardSettings, InsecureBindError, create_app, serve
from dashboard.app import check_bind
from dashboard.auth import COOKIE
from dashboard.callbacks import asks
from dashboard.reports import latest_reports, resolve_report

from .conftest import read

# -- helpers -------------------------------------------------------------------------------------


def _prop_id(spec: dict[str, Any]) -> str:
    cid = spec["id"]
    return (cid if isinstance(cid, str) else json.dumps(cid, sort_keys=True, separators=(",", ":"))) + "." + spec["property"]


def call(client: Any, app: Any, output_key: str, values: dict[str, Any], *, headers: dict[str, str] | None = None) -> Any:
    """POST one callback the way the browser does; `values` maps "id.prop" to the value sent."""
    spec = app.callback_map[output_key]
    values = {**values, **asks(values)}  # a tab's view is sent its inputs as one list

    def fill(specs: list[dict[str, Any]]) -> list[dict[str, Any]]:
        return [{"id": s["id"], "property": s["property"], "value": values.get(_prop_id(s))} for s in specs]

    outputs = []
    for part in output_key.strip(".").split("..."):
        cid, prop = part.rsplit(".", 1)
        outputs.append({"id": json.loads(cid) if cid.startswith("{") else cid, "property": prop})
    body = {
        "output": output_key,
        "outputs": outputs,
        "inputs": fill(spec["inputs"]),
        "state": fill(spec["state"]),
        "changedPropIds": [next(iter(values))] if values else [],
    }
    return client.post("/_dash-update-component", json=body, headers=headers or {})


def key(app: Any, startswith: str) -> str:
    return next(k for k in app.callback_map if k.startswith(startswith))


@pytest.fixture
def settings(snapshot_path: Path, export_dir: Path) -> DashboardSettings:
    return DashboardSettings(snapshot=snapshot_path, export_dir=export_dir)


# -- factory and settings -----------------------------------------------------------------------


def test_import_is_light() -> None:
    """`import dashboard` loads neither Dash, Plotly nor DuckDB."""
    code = (
        "import sys, dashboard; "
        "heavy = [m for m in ('dash', 'plotly', 'duckdb', 'flask') if m in sys.modules]; "
        "print(','.join(heavy))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""


def test_settings_from_pipeline_config(tmp_path: Path) -> None:
    from pipeline.config import load_config_text

    text = """
[warehouse]
path = "wh.duckdb"
snapshot = "serve.duckdb"
[export]
directory = "out"
[dashboard]
host = "0.0.0.0"
port = 8123
workers = 3
token_env = "MY_TOKEN"
[[sources]]
name = "prices"
kind = "csv"
path = "MARKETS"
layout = "wide"
[[universes]]
name = "u"
series = ["VLX_BROAD", "VLX_BANKS"]
window = 250
lags = 1
""".replace("MARKETS", str(Path(__file__).parents[2] / "data_samples" / "markets_wide.csv"))
    try:
        config = load_config_text(text, tmp_path / "c.toml")
    except Exception as exc:  # the config grammar belongs to the pipeline; show what it wants
        pytest.fail(f"pipeline config did not load: {exc}")
    s = DashboardSettings.from_config(config, environ={"MY_TOKEN": "s3cret-of-20-chars\n"})
    assert s.snapshot == (tmp_path / "serve.duckdb").resolve()
    assert s.export_dir == (tmp_path / "out").resolve()
    assert (s.host, s.port, s.token, s.workers) == ("0.0.0.0", 8123, "s3cret-of-20-chars", 3)
    assert "s3cret" not in repr(s)
    check_bind(s)  # a token: allowed on all interfaces
    with pytest.raises(InsecureBindError):
        check_bind(DashboardSettings.from_config(config, environ={}))


MINIMAL_CONFIG = """
[warehouse]
path = "wh.duckdb"
snapshot = "s.duckdb"
[[sources]]
name = "prices"
kind = "csv"
path = "MARKETS"
layout = "wide"
[[universes]]
name = "u"
series = ["VLX_BROAD", "VLX_BANKS"]
window = 250
lags = 1
"""


def load(tmp_path: Path, extra: str = "") -> Any:
    from pipeline.config import load_config_text

    markets = str(Path(__file__).parents[2] / "data_samples" / "markets_wide.csv")
    return load_config_text(MINIMAL_CONFIG.replace("MARKETS", markets) + extra, tmp_path / "c.toml")


def test_settings_defaults_and_env(tmp_path: Path) -> None:
    cfg = load(tmp_path)
    s = DashboardSettings.from_config(cfg, environ={"SHOCKFLOW_DASHBOARD_USERNAME": "ana", "SHOCKFLOW_DASHBOARD_PASSWORD": "pw"})
    assert (s.host, s.port, s.username, s.password) == ("127.0.0.1", 8050, "ana", "pw")
    assert s.snapshot == (tmp_path / "s.duckdb").resolve()
    with pytest.raises(DashboardError, match="both"):
        DashboardSettings(snapshot=tmp_path / "s", username="ana")
    with pytest.raises(DashboardError, match="port"):
        DashboardSettings(snapshot=tmp_path / "s", port=70000)


def test_settings_workers_and_no_environment_unless_given(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    cfg = load(tmp_path, "[dashboard]\nworkers = 3\n")
    assert DashboardSettings.from_config(cfg).workers == 3
    assert DashboardSettings.from_config(load(tmp_path)).workers == 2  # default
    assert DashboardSettings(snapshot=tmp_path / "s").with_address(workers=5).workers == 5
    for bad in (0, -1, 65, 2.5, True, "2"):
        with pytest.raises(DashboardError, match="`workers` must be a whole number"):
            DashboardSettings(
                snapshot=tmp_path / "s",
                workers=bad,  # type: ignore[arg-type]  # bad counts, refused on purpose
            )
    # only the entry point reads the environment: without `environ`, none is read
    monkeypatch.setenv("SHOCKFLOW_DASHBOARD_TOKEN", "from-env")
    assert DashboardSettings.from_config(cfg).token is None
    import os

    assert DashboardSettings.from_config(cfg, environ=os.environ).token == "from-env"


@pytest.mark.parametrize("host", ["0.0.0.0", "::", "10.1.2.3", "dashboard.example.org"])
def test_serve_refuses_open_address_without_credentials(snapshot_path: Path, host: str) -> None:
    s = DashboardSettings(snapshot=snapshot_path)
    with pytest.raises(InsecureBindError) as err:
        serve(s, host=host, port=0)
    text = str(err.value)
    assert "\n" not in text and host in text and "token" in text and "127.0.0.1" in text


# -- pages and callbacks -----------------------------------------------------------------------


def test_layout_has_every_view_and_the_caution(settings: DashboardSettings, universe_name: str) -> None:
    app = create_app(settings)
    client = app.server.test_client()
    assert client.get("/").status_code == 200
    layout = client.get("/_dash-layout").get_data(as_text=True)
    for label in ("Shock paths", "Variance shares", "Lead–lag", "Spillover network", "Compare windows", "Model health", "Own cycles"):
        assert label in json.loads(json.dumps(layout)) or label.encode("unicode_escape").decode() in layout
    assert "A research tool, not financial advice. Estimated relations between markets change over time." in layout
    # the first universe's latest exported report is linked, never another universe's (the
    # fixture's reports belong to demo_four)
    assert ("report-2024-01-02.html" in layout) == (universe_name == "demo_four")


def test_callback_over_http_returns_the_window(settings: DashboardSettings, universe_name: str, state: dict[str, str]) -> None:
    app = create_app(settings)
    client = app.server.test_client()
    k = key(app, "..leadlag-graph.figure")
    r = call(client, app, k, {"window-state.data": state, "granger-level.value": 0.05, "views.value": "leadlag"})
    assert r.status_code == 200
    body = r.get_json()["response"]
    rows = body['{"chart":"leadlag","type":"chart-data"}']["data"]
    assert rows and rows[0]["date_window"] == f"{state['start']} to {state['end']}"


@pytest.mark.parametrize(
    "bad",
    ["'; DROP TABLE runs; --", "../../../../etc/passwd", {"universe": "x' OR '1'='1"}, [1, 2, 3], 1e308, "<script>alert(1)</script>"],
    ids=["sql", "path", "dict", "list", "huge", "html"],
)
def test_hostile_values_through_http_break_nothing(settings: DashboardSettings, snapshot_path: Path, state: dict[str, str], bad: Any) -> None:
    app = create_app(settings)
    client = app.server.test_client()
    before = read(snapshot_path, "SELECT count(*) FROM runs")
    probes = [
        (key(app, "..window-start.value"), {"universe.value": bad, "window-start.value": bad, "window-end.value": bad, "index-range.data": {"xaxis.range": [bad, bad]}}),
        (key(app, "..index-graph.figure"), {"window-state.data": {**state, "universe": bad}, "stress-quantile.value": bad}),
        (key(app, "..paths-graph.figure"), {"window-state.data": state, "identification.value": bad, "cholesky-ordering.value": bad, "cumulative.value": bad, "horizon.value": bad, "bands.value": bad, "views.value": "paths"}),
        (key(app, "..network-graph.figure"), {"window-state.data": {**state, "start": bad}, "network-mode.value": bad, "network-size.value": bad, "views.value": "network"}),
        (key(app, "..compare-pairs-graph.figure"), {"window-state.data": state, "compare-a-start.value": bad, "compare-a-end.value": bad, "views.value": "compare"}),
        (key(app, "..health-graph.figure"), {"window-state.data": bad, "near-one.value": bad, "views.value": "health"}),
    ]
    for output_key, values in probes:
        r = call(client, app, output_key, values)
        assert r.status_code in (200, 204), (output_key, r.status_code)
        text = r.get_data(as_text=True)
        assert "Traceback" not in text and "Catalog Error" not in text and "site-packages" not in text
    assert read(snapshot_path, "SELECT count(*) FROM runs") == before


def test_csv_download_callback_sends_rows_and_safe_name(settings: DashboardSettings, state: dict[str, str]) -> None:
    app = create_app(settings)
    client = app.server.test_client()
    k = key(app, '{"chart":["MATCH"]')
    rows = [{"a": 1.0, "b": "x"}]
    body = {
        "output": k,
        "outputs": {"id": {"chart": "paths", "type": "csv-download"}, "property": "data"},
        "inputs": [{"id": {"chart": "paths", "type": "csv-button"}, "property": "n_clicks", "value": 1}],
        "state": [
            {"id": {"chart": "paths", "type": "chart-data"}, "property": "data", "value": rows},
            {"id": "window-state", "property": "data", "value": {**state, "universe": "../../x"}},
        ],
        "changedPropIds": ['{"chart":"paths","type":"csv-button"}.n_clicks'],
    }
    r = client.post("/_dash-update-component", json=body)
    assert r.status_code == 200, r.get_data(as_text=True)[:300]
    data = next(iter(r.get_json()["response"].values()))["data"]
    assert data["content"] == "a,b\n1.0,x\n"
    assert data["filename"].startswith("shockflow_x_paths_") and "/" not in data["filename"]


# -- reports ------------------------------------------------------------------------------------


def test_reports_listed_newest_first_and_served(settings: DashboardSettings, export_dir: Path) -> None:
    names = [n for n, _ in latest_reports(export_dir)]
    assert names == ["demo_four/report-2024-01-02.html", "demo_four/report-2024-01-01.html"]
    (export_dir / "other").mkdir()
    (export_dir / "other" / "other-2030.html").write_text("newest, another universe")
    assert latest_reports(export_dir)[0][0] == "other/other-2030.html"
    assert latest_reports(export_dir, prefer="demo_four")[0][0] == "demo_four/report-2024-01-02.html"
    client = create_app(settings).server.test_client()
    r = client.get("/reports/demo_four/report-2024-01-02.html")
    assert r.status_code == 200 and r.data == b"<html>report one</html>"
    assert "attachment" in r.headers["Content-Disposition"]
    assert r.headers["X-Content-Type-Options"] == "nosniff"


@pytest.mark.parametrize(
    "name",
    [
        "../secret.txt", "..%2Fsecret.txt", "demo_four/../../secret.txt", "%2e%2e/secret.txt",
        "/etc/passwd", "demo_four/..%2f..%2fsecret.txt", ".hidden.html", "demo_four",
        "demo_four/report-2024-01-02.html%00.txt", "..\\secret.txt", "demo_four//report-2024-01-02.html",
    ],
)
def test_reports_route_refuses_anything_outside_the_export_dir(settings: DashboardSettings, name: str) -> None:
    client = create_app(settings).server.test_client()
    r = client.get("/reports/" + name)
    # either refused, or (for paths Flask normalises away from /reports/) Dash's own page — never a file
    assert r.status_code == 404 or (r.status_code == 200 and b"_dash-config" in r.data)
    assert "Content-Disposition" not in r.headers
    assert b"do not serve me" not in r.data and b"hidden" not in r.data and b"root:" not in r.data


def test_resolve_report_refuses_symlink_out(export_dir: Path, tmp_path: Path) -> None:
    link = export_dir / "demo_four" / "escape.html"
    link.symlink_to(tmp_path / "secret.txt")
    assert resolve_report(export_dir, "demo_four/escape.html") is None
    assert "demo_four/escape.html" not in [n for n, _ in latest_reports(export_dir)]
    assert resolve_report(None, "demo_four/report-2024-01-02.html") is None


# -- access control --------------------------------------------------------------------------


def test_token_protects_every_route(snapshot_path: Path, export_dir: Path) -> None:
    app = create_app(DashboardSettings(snapshot=snapshot_path, export_dir=export_dir, token="tok-123"))
    client = app.server.test_client()
    for path in ("/", "/_dash-layout", "/_dash-dependencies", "/reports/demo_four/report-2024-01-02.html", "/assets/style.css"):
        r = client.get(path)
        assert r.status_code == 401, path
        assert b"report one" not in r.data
    assert client.get("/", headers={"Authorization": "Bearer wrong"}).status_code == 401
    assert client.get("/", headers={"Authorization": "Bearer tok-123"}).status_code == 200
    # ?token= once: a cookie (not the token itself) and a redirect without the token
    r = client.get("/?token=tok-123&x=1")
    assert r.status_code == 303 and r.headers["Location"].endswith("/?x=1")
    cookie = r.headers["Set-Cookie"]
    assert COOKIE in cookie and "tok-123" not in cookie and "HttpOnly" in cookie and "SameSite=Strict" in cookie
    assert client.get("/_dash-layout").status_code == 200  # the test client kept the cookie
    r = call(client, app, key(app, "..network-graph.figure"), {"window-state.data": None, "views.value": "network"})
    assert r.status_code == 200


def test_basic_auth_protects_every_route(snapshot_path: Path) -> None:
    app = create_app(DashboardSettings(snapshot=snapshot_path, username="ana", password="pä55"))
    client = app.server.test_client()
    r = client.get("/")
    assert r.status_code == 401 and "Basic" in r.headers["WWW-Authenticate"]

    def basic(user: str, pw: str) -> dict[str, str]:
        return {"Authorization": "Basic " + base64.b64encode(f"{user}:{pw}".encode()).decode()}

    assert client.get("/", headers=basic("ana", "wrong")).status_code == 401
    assert client.get("/", headers=basic("bob", "pä55")).status_code == 401
    assert client.get("/", headers=basic("ana", "pä55")).status_code == 200
    assert client.post("/_dash-update-component", json={}, headers=basic("ana", "x")).status_code == 401
    assert client.get("/?token=anything").status_code == 401


def test_no_credentials_means_open_on_loopback_only(snapshot_path: Path) -> None:
    client = create_app(DashboardSettings(snapshot=snapshot_path)).server.test_client()
    r = client.get("/")
    assert r.status_code == 200
    assert r.headers["X-Frame-Options"] == "DENY"


def test_public_surface_is_pinned() -> None:
    import dashboard

    assert dashboard.__all__ == [
        "DashboardError", "DashboardSettings", "InsecureBindError", "SnapshotMissingError",
        "WindowError", "create_app", "serve",
    ]
    assert dashboard.__all__ == sorted(dashboard.__all__)
    assert callable(dashboard.create_app) and callable(dashboard.serve)


def test_warm_answers_the_first_visit_before_it_is_asked(settings: DashboardSettings, universe_name: str) -> None:
    """Issue 15: `warm` (run by each server worker as it starts) computes the page's first view and
    the first tab's view at the page's own control values; the first visitor's request for that
    tab is then answered from what was kept (no new answer computed), and equals a fresh one."""
    app = create_app(settings)
    answers = app.server.extensions["shockflow_answers"]
    app.server.extensions["shockflow_warm"]()
    kept = len(answers)
    assert kept == 3  # the first view, the index inside it, the first tab's view
    client = app.server.test_client()
    page = json.dumps(client.get("/_dash-layout").get_json())
    assert len(answers) == kept  # the page came from what was kept
    layout = client.get("/_dash-layout").get_json()

    def value(node: Any, cid: str, prop: str) -> Any:  # a component's property as the page has it
        stack = [node]
        while stack:
            n = stack.pop()
            if isinstance(n, list):
                stack.extend(n)
            elif isinstance(n, dict):
                props = n.get("props", {})
                if props.get("id") == cid:
                    return props.get(prop)
                stack.append(props.get("children"))
        raise AssertionError(cid)

    state = value(layout, "window-state", "data")
    assert state["universe"] == universe_name and universe_name in page
    given = {"window-state.data": state, **{f"{c}.value": value(layout, c, "value")
             for c in ("identification", "cholesky-ordering", "cumulative", "horizon", "bands")}}  # fmt: skip
    r = call(client, app, key(app, "..paths-graph.figure"), given)
    assert r.status_code == 200 and len(answers) == kept  # answered from what warm kept
    fresh = create_app(settings)
    again = call(fresh.server.test_client(), fresh, key(fresh, "..paths-graph.figure"), given)
    assert r.get_json()["response"] == again.get_json()["response"]


def test_page_loads_the_cartesian_plotly_bundle_that_draws_every_chart(settings: DashboardSettings) -> None:
    """Issue 15 (first chart): the page loads plotly.js's cartesian bundle from the assets (1.5 MB,
    beside the full bundle's 4.8 MB that dcc.Graph would fetch otherwise: it takes ``window.Plotly``
    when the page defines it). The bundle is the plotly.js version plotly.py carries, and registers
    every trace type the chart builders draw."""
    import re

    import plotly
    from plotly.offline import get_plotlyjs_version

    import charts
    from dashboard.app import ASSETS

    page = create_app(settings).server.test_client().get("/").get_data(as_text=True)
    assert re.search(r'src="/assets/plotly-cartesian\.min\.js', page), page[:2000]
    assert "package_data/plotly.min.js" not in page
    bundle = (ASSETS / "plotly-cartesian.min.js").read_text(encoding="utf-8")
    assert len(bundle.encode()) < 2_000_000
    assert f"v{get_plotlyjs_version()}" in bundle[:300]  # same plotly.js as plotly.py's (the report's)
    full = (Path(plotly.__file__).parent / "package_data" / "plotly.min.js").read_text(encoding="utf-8")
    trace_types = set(re.findall(r'moduleType:"trace",name:"(\w+)"', full))
    registered = set(re.findall(r'moduleType:"trace",name:"(\w+)"', bundle))
    source = "".join(p.read_text(encoding="utf-8") for p in Path(charts.__file__).parent.glob("*.py"))
    used = set(re.findall(r'"type":\s*"(\w+)"', source)) & trace_types
    assert {"scatter", "bar", "heatmap"} <= used <= registered, used - registered


def test_every_tab_is_asked_by_one_clientside_callback(settings: DashboardSettings) -> None:
    """Issue 15 (tab switch): a tab click ran one clientside callback per tab (a dozen) before the
    shown tab's request left — each a pass of the page's renderer over the callback graph. One
    callback now writes every tab's ask, and each tab's view reads only its own ask."""
    from dashboard import views

    app = create_app(settings)
    tabbed = [v.name for v in views.VIEWS if v.tab is not None]
    writers = [c for c in app._callback_list if "-ask.data" in c["output"]]
    assert len(writers) == 1 and writers[0]["clientside_function"] is not None
    assert writers[0]["output"] == ".." + "...".join(f"{name}-ask.data" for name in tabbed) + ".."
    assert [s["id"] for s in writers[0]["state"]] == [f"{name}-ask" for name in tabbed]
    inputs = [s["id"] for s in writers[0]["inputs"]]
    assert len(inputs) == len(set(inputs))  # an input several tabs read is passed once
    for name in tabbed:
        (reader,) = [c for c in app._callback_list if any(s["id"] == f"{name}-ask" for s in c["inputs"])]
        assert [s["id"] for s in reader["inputs"]] == [f"{name}-ask"] and reader["clientside_function"] is None
