"""The page: date-window bar, connectedness overview, view tabs, and the always-visible caution.

`build(snap, settings)` is called on every page load (Dash accepts a function as layout), so a newly
published snapshot's universes and the newest exported reports appear on reload. Nothing here
queries more than the universe list and the report folder.
"""

from __future__ import annotations

import datetime as dt
import re
import urllib.parse
from collections.abc import Sequence
from typing import Any

from dash import dcc, html

from . import ids
from ._errors import DashboardError
from .callbacks import BAND_CHOICES, IDENTIFICATIONS
from .data import Snapshot
from .reports import latest_reports
from .settings import DashboardSettings

__all__ = ["CAUTION", "build", "skipped_table"]

CAUTION = (
    "A research tool, not financial advice. Estimated relations between markets change over time."
)


def _label(text: str, child: Any, *, width: str | None = None) -> html.Label:
    style = {"width": width} if width else None
    return html.Label([html.Span(text, className="ctl-label"), child], className="ctl", style=style)


def _csv(chart: str) -> html.Div:
    return html.Div(
        [
            html.Button("Download data (CSV)", id=ids.csv_button(chart), n_clicks=0, className="csv-btn"),
            dcc.Download(id=ids.csv_download(chart)),
            dcc.Store(id=ids.chart_data(chart)),
        ],
        className="csv-row",
    )


def _graph(graph_id: str, *, height: int = 420) -> dcc.Loading:
    """A chart inside a loading indicator (shown while its callback runs, e.g. a bootstrap band)."""
    return dcc.Loading(
        dcc.Graph(
            id=graph_id,
            config={"displaylogo": False, "responsive": True, "toImageButtonOptions": {"format": "png"}},
            style={"minHeight": f"{min(height, 360)}px"},
        ),
        type="circle",
        delay_show=150,
    )


def _note(note_id: str) -> html.P:
    return html.P(id=note_id, className="note")


def as_json(value: Any) -> Any:
    """Components as the plain JSON Dash sends for them (``{"type", "namespace", "props"}``).

    A callback returning only plain values is serialised by orjson in one pass; one component
    object anywhere in a response makes plotly's encoder walk the whole response in Python first.
    """
    if hasattr(value, "to_plotly_json"):
        return as_json(value.to_plotly_json())
    if isinstance(value, dict):
        return {k: as_json(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [as_json(v) for v in value]
    return value


def skipped_table(rows: Sequence[tuple[str, str]]) -> html.Div:
    """Skipped windows and why, as a small table (at most 50 rows shown)."""
    if not rows:
        return html.Div("No skipped windows in this date window.", className="note")
    body = [html.Tr([html.Td(end), html.Td(reason)]) for end, reason in rows[:50]]
    more = [html.Tr([html.Td(f"… {len(rows) - 50} more", colSpan=2)])] if len(rows) > 50 else []
    return html.Div(
        [
            html.H4(f"Skipped windows ({len(rows)})"),
            html.Table(
                [html.Thead(html.Tr([html.Th("window end"), html.Th("reason")])), html.Tbody(body + more)],
                className="plain-table",
            ),
        ]
    )


_HASHED = r"(-[0-9a-f]{6,16})?"


def _of_universe(rel: str, universe: str) -> bool:
    """True when the exported file `rel` belongs to `universe`: a folder named after it (as given,
    or as the export makes it safe for a folder name, optionally with a short hash suffix), or a
    file name starting with that name and a dash."""
    names = {universe, re.sub(r"_{2,}", "_", re.sub(r"[^A-Za-z0-9._-]+", "_", universe)).strip("._-")}
    parts = rel.split("/")
    for name in filter(None, names):
        pattern = re.escape(name) + _HASHED
        if any(re.fullmatch(pattern, p) for p in parts[:-1]):
            return True
        if re.match(pattern + r"-\d{4}-\d{2}-\d{2}", parts[-1]):
            return True
    return False


def report_links(export_dir: Any, universe: str | None) -> list[Any]:
    """Links to the chosen universe's newest exported reports (served by /reports/); never another
    universe's."""
    files = latest_reports(export_dir, prefer=universe, limit=64)
    if universe is not None:
        files = [f for f in files if _of_universe(f[0], universe)]
    if not files:
        who = f" for {universe}" if universe else ""
        return [html.Span(f"No exported report{who} yet.", className="note")]
    links: list[Any] = [html.Span("Exported reports: ", className="ctl-label")]
    for k, (rel, mtime) in enumerate(files[:4]):
        stamp = dt.datetime.fromtimestamp(mtime).strftime("%Y-%m-%d %H:%M")
        href = "/reports/" + urllib.parse.quote(rel)
        links.append(
            html.A(
                ("latest: " if k == 0 else "") + rel.rsplit("/", 1)[-1],
                href=href, title=f"{rel} ({stamp})", target="_blank", className="report-link",
            )
        )  # fmt: skip
    return links


def _reports(settings: DashboardSettings, universe: str | None) -> html.Div:
    return html.Div(report_links(settings.export_dir, universe), id=ids.REPORTS, className="reports")


def _paths_tab(series: Sequence[str], identification: str) -> list[Any]:
    return [
        html.Div(
            [
                _label("Identification", dcc.RadioItems(
                    id=ids.IDENTIFICATION, value=identification, inline=True,
                    options=[{"label": v, "value": k} for k, v in IDENTIFICATIONS.items()],
                )),
                _label("Paths", dcc.Checklist(
                    id=ids.CUMULATIVE, value=[], inline=True,
                    options=[{"label": "cumulative (level response for returns)", "value": "cumulative"}],
                )),
                _label("Band", dcc.RadioItems(
                    id=ids.BANDS, value="stored", inline=True,
                    options=[{"label": v, "value": k} for k, v in BAND_CHOICES.items()],
                )),
            ],
            className="controls",
        ),
        _graph(ids.PATHS_GRAPH, height=520),
        _note(ids.PATHS_NOTE),
        _csv("paths"),
    ]


def _tabs(series: Sequence[str], level: float, identification: str) -> dcc.Tabs:
    tabs = [
        dcc.Tab(label="Shock paths", value=ids.TAB_PATHS, children=_paths_tab(series, identification)),
        dcc.Tab(label="Variance shares", value=ids.TAB_SHARES, children=[
            _graph(ids.SHARES_GRAPH), _note(ids.SHARES_NOTE), _csv("shares"),
        ]),
        dcc.Tab(label="Lead–lag", value=ids.TAB_LEADLAG, children=[
            html.Div([_label("Significance level", dcc.Dropdown(
                id=ids.LEVEL, clearable=False, value=level,
                options=[{"label": f"{x:g}", "value": x} for x in sorted({0.01, 0.05, 0.10, level})],
            ), width="180px")], className="controls"),
            _graph(ids.LEADLAG_GRAPH), _note(ids.LEADLAG_NOTE), _csv("leadlag"),
        ]),
        dcc.Tab(label="Spillover network", value=ids.TAB_NETWORK, children=[
            html.Div([
                _label("Spillovers", dcc.RadioItems(id=ids.NETWORK_MODE, value="end", inline=True, options=[
                    {"label": "at the window end", "value": "end"},
                    {"label": "averaged over the date window", "value": "mean"},
                ])),
                _label("Node size", dcc.RadioItems(id=ids.NETWORK_SIZE, value="to", inline=True, options=[
                    {"label": "spillover to others", "value": "to"},
                    {"label": "spillover from others", "value": "from"},
                ])),
            ], className="controls"),
            _graph(ids.NETWORK_GRAPH, height=520), _note(ids.NETWORK_NOTE), _csv("network"),
        ]),
        dcc.Tab(label="Compare windows", value=ids.TAB_COMPARE, children=[
            html.Div([
                _label("A from", dcc.Input(id=ids.A_START, type="text", debounce=True,
                                           placeholder="first half", className="date-input")),
                _label("A to", dcc.Input(id=ids.A_END, type="text", debounce=True,
                                         placeholder="YYYY-MM-DD", className="date-input")),
                _label("B from", dcc.Input(id=ids.B_START, type="text", debounce=True,
                                           placeholder="second half", className="date-input")),
                _label("B to", dcc.Input(id=ids.B_END, type="text", debounce=True,
                                         placeholder="YYYY-MM-DD", className="date-input")),
                html.Span("Blank dates: the two halves of the date window.", className="note"),
            ], className="controls"),
            _note(ids.COMPARE_NOTE),
            _graph(ids.COMPARE_PAIRS_GRAPH, height=380), _csv("compare-pairs"),
            _graph(ids.COMPARE_PATHS_GRAPH, height=520), _csv("compare-paths"),
        ]),
        dcc.Tab(label="Model health", value=ids.TAB_HEALTH, children=[
            html.Div([_label("Flag spectral radius from", dcc.Dropdown(
                id=ids.NEAR_ONE, clearable=False, value=0.98,
                options=[{"label": f"{x:g}", "value": x} for x in (0.95, 0.98, 0.99, 0.995)],
            ), width="220px")], className="controls"),
            _graph(ids.HEALTH_GRAPH, height=640), _note(ids.HEALTH_NOTE), _csv("health"),
            html.Div(id=ids.SKIPPED_TABLE),
        ]),
        dcc.Tab(label="Own cycles", value=ids.TAB_CYCLES, children=[
            html.P(
                "Each series on its own: a univariate AR (order chosen by AIC) fitted on the prepared "
                "data of the window the views use; its implied spectral density and, where the "
                "density peaks away from frequency zero, the dominant cycle length in observations.",
                className="note",
            ),
            _graph(ids.CYCLES_GRAPH, height=460), _note(ids.CYCLES_NOTE), _csv("cycles"),
        ]),
    ]
    for tab in tabs:
        tab.className = "view-tab"
        tab.selected_className = "view-tab--selected"
    return dcc.Tabs(
        id=ids.TABS, value=ids.TAB_PATHS, children=tabs, className="view-tabs",
        parent_className="view-tabs-parent",
    )  # fmt: skip


def _model_bar(first: Any) -> html.Div:
    """Horizon and Cholesky ordering, above the tabs they drive (never the stored index above)."""
    return html.Div(
        [
            html.Span(
                "Settings for Shock paths, Variance shares and Compare windows (the connectedness "
                "index and the network use the universe's stored horizon):",
                className="ctl-label model-bar-title", id=ids.MODEL_BAR_TITLE,
            ),
            _label("Horizon (steps, 1–60)", dcc.Input(
                id=ids.HORIZON, type="text", inputMode="numeric",
                value=str(first.horizon) if first else "10", debounce=True, className="num-input",
            )),
            _label("Cholesky ordering (first = most exogenous)", dcc.Dropdown(
                id=ids.ORDERING, multi=True, value=list(first.series) if first else [],
                options=list(first.series) if first else [], placeholder="stored order",
            ), width="330px"),
        ],
        className="controls model-bar", id=ids.MODEL_BAR,
    )  # fmt: skip


def build(snap: Snapshot, settings: DashboardSettings) -> html.Div:
    """The whole page for one visitor (evaluated per page load)."""
    try:
        universes = snap.universes()
        problem = None if universes else "The serving snapshot holds no universe yet."
    except DashboardError as exc:
        universes, problem = {}, str(exc)
    names = sorted(universes)
    first = universes[names[0]] if names else None
    header = html.Header(
        [
            html.Div([html.H1("shockflow"), html.Span("how shocks travel between markets, window by window",
                                                      className="subtitle")], className="brand"),
            html.Div(
                [
                    _label("Universe", dcc.Dropdown(
                        id=ids.UNIVERSE, options=[{"label": n, "value": n} for n in names],
                        value=names[0] if names else None, clearable=False,
                    ), width="200px"),
                    _label("Windows ending from", dcc.Input(
                        id=ids.START, type="text", debounce=True, placeholder="YYYY-MM-DD",
                        className="date-input",
                    )),
                    _label("to", dcc.Input(
                        id=ids.END, type="text", debounce=True, placeholder="YYYY-MM-DD",
                        className="date-input",
                    )),
                    _label("Shade stress above", dcc.Dropdown(
                        id=ids.STRESS_QUANTILE, clearable=False, value=0.9,
                        options=[{"label": f"{int(q * 100)}th pct", "value": q} for q in (0.75, 0.9, 0.95)],
                    ), width="140px"),
                ],
                className="controls window-bar",
            ),
        ],
        className="top",
    )
    body: list[Any] = [
        header,
        html.Div(id=ids.WINDOW_NOTE, className="window-note"),
    ]
    if problem:
        body.append(html.Div(problem, className="problem"))
    body += [
        _graph(ids.INDEX_GRAPH, height=270),
        html.Div([html.P(id=ids.STATUS, className="note"), _csv("index"),
                  _reports(settings, names[0] if names else None)],
                 className="under-index"),
        _model_bar(first),
        _tabs(
            first.series if first else (), first.granger_level if first else 0.05,
            first.identification if first and first.identification in IDENTIFICATIONS else "generalized",
        ),
        dcc.Store(id=ids.WINDOW),
        html.Footer(
            [html.Strong("Caution. "), CAUTION],
            id=ids.CAUTION, className="caution", role="note",
        ),
    ]
    return html.Div(body, className="page")
