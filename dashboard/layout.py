"""The page: date-window bar, connectedness overview, shared settings, view tabs, the caution.

`build(snap, settings)` is called on every page load (Dash accepts a function as layout), so a newly
published snapshot's universes and the newest exported reports appear on reload. The tabs and
every view's graphs, notes and controls come from `views.VIEWS`. Nothing here queries more than the
universe list and the report folder.
"""

from __future__ import annotations

from typing import Any

from dash import dcc, html

from . import ids, views
from ._components import PANEL_CLASSES, STRESS_DEFAULT, csv_row, graph, label, note, report_links
from ._errors import DashboardError
from ._inputs import page_text
from .data import Snapshot, Universe
from .settings import DashboardSettings
from .views import View

__all__ = ["CAUTION", "build", "horizon_views"]

CAUTION = (
    "A research tool, not financial advice. Estimated relations between markets change over time."
)


def horizon_views() -> list[str]:
    """Tab labels of the views the shared horizon setting drives (from the table)."""
    return [v.tab for v in views.VIEWS if v.tab and ids.HORIZON in v.inputs]


def _charts(view: View) -> list[Any]:
    out: list[Any] = []
    for chart, height in view.chart_list:
        out += [graph(ids.graph_id(chart), height=height), csv_row(chart)]
    return out


def _panel(view: View, first: Universe | None, *, shown: bool) -> html.Div:
    """A tab's content: kept on the page whichever tab is selected, so coming back to a tab shows its
    charts as they were drawn (no redraw, no request) — only its class changes (`PANEL_CLASSES`)."""
    children: list[Any] = []
    if view.intro:
        children.append(html.P(page_text(view.intro), className="note"))
    if view.controls is not None:
        children.append(html.Div(view.controls(first), className="controls"))
    children += [*_charts(view), note(view.note_id)]
    if view.extra is not None:
        children.append(html.Div(id=view.extra[0]))
    children.append(dcc.Store(id=ids.ask_id(view.name)))
    return html.Div(children, id=ids.panel_id(view.name), className=PANEL_CLASSES[shown])


def _tabs(first: Universe | None) -> list[Any]:
    """The tab strip (labels only) and, under it, every tab's panel."""
    shown = [v for v in views.VIEWS if v.tab]
    strip = dcc.Tabs(
        id=ids.TABS, value=shown[0].name, className="view-tabs", parent_className="view-tabs-parent",
        children=[dcc.Tab(label=v.tab, value=v.name, className="view-tab", selected_className="view-tab--selected")
                  for v in shown],
    )  # fmt: skip
    panels = html.Div([_panel(v, first, shown=k == 0) for k, v in enumerate(shown)], id=ids.PANELS)
    return [strip, panels]


def _model_bar(first: Universe | None) -> html.Div:
    """Horizon and Cholesky ordering, above the tabs they drive (never the stored index above)."""
    return html.Div(
        [
            html.Span(
                f"Settings for {', '.join(horizon_views()[:-1])} and {horizon_views()[-1]} (the "
                "connectedness index and the network use the universe's stored horizon):",
                className="ctl-label model-bar-title", id=ids.MODEL_BAR_TITLE,
            ),
            label("Horizon (steps, 1–60)", dcc.Input(
                id=ids.HORIZON, type="text", inputMode="numeric",
                value=str(first.horizon) if first else "10", debounce=True, className="num-input",
            )),
            label("Cholesky ordering (first = most exogenous)", dcc.Dropdown(
                id=ids.ORDERING, multi=True, value=list(first.series) if first else [],
                options=list(first.series) if first else [], placeholder="stored order",
            ), width="330px"),
        ],
        className="controls model-bar", id=ids.MODEL_BAR,
    )  # fmt: skip


#: (component id, property) → value the page is built with (`callbacks.first_view`).
Initial = dict[tuple[str, str], Any]


def _given(initial: Initial, cid: str, prop: str) -> dict[str, Any]:
    """`{prop: value}` when the page is built with a value for (`cid`, `prop`), else nothing."""
    return {prop: initial[cid, prop]} if (cid, prop) in initial else {}


def _header(names: list[str], initial: Initial) -> html.Header:
    return html.Header(
        [
            html.Div([html.H1("shockflow"), html.Span("how shocks travel between markets, window by window",
                                                      className="subtitle")], className="brand"),
            html.Div(
                [
                    label("Universe", dcc.Dropdown(
                        id=ids.UNIVERSE, options=[{"label": n, "value": n} for n in names],
                        value=names[0] if names else None, clearable=False,
                    ), width="200px"),
                    label("Windows ending from", dcc.Input(
                        id=ids.START, type="text", debounce=True, placeholder="YYYY-MM-DD",
                        className="date-input", **_given(initial, ids.START, "value"),
                    )),
                    label("to", dcc.Input(
                        id=ids.END, type="text", debounce=True, placeholder="YYYY-MM-DD",
                        className="date-input", **_given(initial, ids.END, "value"),
                    )),
                    label("Shade stress above", dcc.Dropdown(
                        id=ids.STRESS_QUANTILE, clearable=False, value=STRESS_DEFAULT,
                        options=[{"label": f"{int(q * 100)}th pct", "value": q} for q in (0.75, 0.9, 0.95)],
                    ), width="140px"),
                ],
                className="controls window-bar",
            ),
        ],
        className="top",
    )  # fmt: skip


def build(snap: Snapshot, settings: DashboardSettings, initial: Initial | None = None) -> html.Div:
    """The whole page for one visitor (evaluated per page load).

    `initial` (`callbacks.first_view`) fills the date window, its note and the connectedness index
    in the page itself, so the first chart is drawn with the page, before any callback answers."""
    initial = initial or {}
    try:
        universes = snap.universes()
        problem = None if universes else "The serving snapshot holds no universe yet."
    except DashboardError as exc:
        universes, problem = {}, str(exc)
    names = sorted(universes)
    first = universes[names[0]] if names else None
    overview = next(v for v in views.VIEWS if v.tab is None)
    body: list[Any] = [
        _header(names, initial),
        html.Div(id=ids.WINDOW_NOTE, className="window-note", **_given(initial, ids.WINDOW_NOTE, "children")),
    ]
    if problem:
        body.append(html.Div(problem, className="problem"))
    (chart, height), = overview.chart_list
    body += [
        graph(ids.graph_id(chart), height=height, figure=initial.get((ids.graph_id(chart), "figure"))),
        html.Div([html.P(id=overview.note_id, className="note", **_given(initial, overview.note_id, "children")),
                  csv_row(chart, initial.get((ids.graph_id(chart), "data"))),
                  html.Div(report_links(settings.export_dir, names[0] if names else None),
                           id=ids.REPORTS, className="reports")],
                 className="under-index"),
        _model_bar(first),
        *_tabs(first),
        dcc.Store(id=ids.WINDOW, **_given(initial, ids.WINDOW, "data")),
        dcc.Store(id=ids.INDEX_RANGE),
        html.Footer([html.Strong("Caution. "), CAUTION], id=ids.CAUTION, className="caution", role="note"),
    ]  # fmt: skip
    return html.Div(body, className="page")
