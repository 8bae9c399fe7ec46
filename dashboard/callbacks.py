"""Callbacks: the date window, the CSV downloads, and the wiring generated from `views.VIEWS`.

`sync_window` keeps one date window for every view (typed dates, the index chart's range slider,
the universe). `register` attaches one callback per row of `views.VIEWS` (inputs → figure, rows,
note), the universe defaults the rows declare, the report links and the CSV downloads. Bad or
hostile input never reaches SQL text: it fails validation and the view shows a message instead.
"""

from __future__ import annotations

import csv
import io
import re
from collections.abc import Callable
from typing import Any

from . import views
from ._components import report_links
from ._errors import DashboardError, WindowError
from ._inputs import page_text
from .data import Snapshot, Universe, parse_date
from .views import View, empty_note, has_fitted

__all__ = [
    "csv_file",
    "register",
    "safe_filename",
    "sync_window",
]


#: A stand-in universe for reading which controls the views' defaults set.
_SAMPLE = Universe("sample", ("a",), 1, 0.05, "generalized")


# ---------------------------------------------------------------------------------------------
# the date window
# ---------------------------------------------------------------------------------------------


def _relayout_range(relayout: Any) -> tuple[Any, Any] | str | None:
    """The x-range a plotly relayout event sets: (start, end), "auto", or None when it sets none."""
    if not isinstance(relayout, dict):
        return None
    if relayout.get("xaxis.autorange") or relayout.get("xaxis.rangeslider.autorange"):
        return "auto"
    rng = relayout.get("xaxis.range")
    if isinstance(rng, (list, tuple)) and len(rng) == 2:
        return rng[0], rng[1]
    if "xaxis.range[0]" in relayout and "xaxis.range[1]" in relayout:
        return relayout["xaxis.range[0]"], relayout["xaxis.range[1]"]
    return None


def sync_window(
    snap: Snapshot,
    universe: Any,
    start: Any,
    end: Any,
    relayout: Any,
    trigger: str | None,
) -> tuple[str, str, dict[str, str], str]:
    """One source of truth for the date window: date inputs, the chart's range slider, the universe.

    Returns (start input, end input, window state, note). A new universe resets the window to its
    whole history; a range-slider move or zoom sets both dates; typed dates are parsed strictly and
    clamped to the stored history.
    """
    u = snap.universe(universe)
    try:
        lo, hi = snap.date_bounds(u.name)
    except WindowError:
        # a universe with no stored windows: its own (empty) state, so no view keeps showing the
        # universe picked before; every view then says this universe has nothing yet
        if trigger == "relayout":
            raise
        return "", "", {"universe": u.name, "start": "", "end": ""}, empty_note(u.name)
    if trigger == "relayout":
        rng = _relayout_range(relayout)
        if rng == "auto":
            start, end = lo, hi
        elif isinstance(rng, tuple):
            start, end = parse_date(rng[0], name="range start"), parse_date(rng[1], name="range end")
        else:
            raise WindowError("the chart's range did not change")
    elif trigger in (None, "universe"):
        start, end = lo, hi
    window = snap.window({"universe": u.name, "start": start, "end": end})
    if not has_fitted(snap, u.name):
        return window.start.isoformat(), window.end.isoformat(), window.as_store(), empty_note(u.name)
    count = len(snap.index_in(window))
    try:
        used = f"Views at one window use the window ending {snap.fitted_end(window).isoformat()}."
    except WindowError as exc:  # fitted windows exist, just not in this range
        used = page_text(str(exc)) + "."
    note = f"Date window {window.label} ({count} windows). {used}"
    return window.start.isoformat(), window.end.isoformat(), window.as_store(), note


# ---------------------------------------------------------------------------------------------
# downloads
# ---------------------------------------------------------------------------------------------

_SAFE = re.compile(r"[^A-Za-z0-9_.-]+")
_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")
MAX_CSV_ROWS = 200_000
MAX_CSV_CELLS = 4_000_000  # rows x columns of one download: MAX_CSV_ROWS rows of 20 columns


def safe_filename(*parts: Any, suffix: str = ".csv") -> str:
    """A download name made only of letters, digits, ``_ . -``; no path separators, no leading dot."""
    cleaned = (_SAFE.sub("-", str(p)).strip(".-") for p in parts if p not in (None, ""))
    text = "_".join(c for c in cleaned if c)
    text = re.sub(r"\.{2,}", ".", text).lstrip(".") or "shockflow"
    return text[:120] + suffix


def _cell(value: Any) -> Any:
    """A CSV cell; text that a spreadsheet would run as a formula is prefixed with a quote."""
    if value is None:
        return ""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return repr(float(value)) if isinstance(value, float) else str(value)
    text = str(value)
    return "'" + text if text.startswith(_FORMULA_START) else text


def csv_file(rows: Any, chart: Any, state: Any) -> dict[str, Any] | None:
    """The download for one chart: its rows as CSV and a safe file name, or None without rows."""
    if not isinstance(rows, list) or not rows or not all(isinstance(r, dict) for r in rows):
        return None
    rows = rows[:MAX_CSV_ROWS]
    # column names in first-seen order; a dict is the ordered set (a list's `in` made a request
    # with many keys quadratic: 100k keys held a server thread for 109 s)
    columns = list(dict.fromkeys(str(k) for r in rows for k in r))
    if len(columns) * len(rows) > MAX_CSV_CELLS:  # sparse rows would be written out dense
        return None
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow([_cell(c) for c in columns])
    for r in rows:
        writer.writerow([_cell(r.get(c)) for c in columns])
    s = state if isinstance(state, dict) else {}
    name = safe_filename("shockflow", s.get("universe"), chart, s.get("start"), s.get("end"))
    return {"content": buf.getvalue(), "filename": name, "type": "text/csv", "base64": False}


# ---------------------------------------------------------------------------------------------
# wiring
# ---------------------------------------------------------------------------------------------


def _view_callback(snap: Snapshot, view: View) -> Callable[..., list[Any]]:
    """The callback body of one row of `VIEWS`: window state and input values → per chart (figure,
    CSV rows), the note, and the extra output if the row has one.

    A view shown above the tabs gets (state, *values) as its callback's inputs; a tab's view gets
    them as one list, its ask (`ask_id`), which the browser sets only while the tab is selected and
    only when the list differs from the last one asked (`ASK_JS`)."""
    from dash.exceptions import PreventUpdate

    def run(*given: Any) -> list[Any]:
        if view.tab is not None:
            (ask,) = given
            if not isinstance(ask, list) or len(ask) != 1 + len(view.inputs):
                raise PreventUpdate  # never asked yet (the tab was never selected)
            given = tuple(ask)
        state, *values = given
        triples = view.results(snap, state, *values)
        out: list[Any] = []
        for fig, rows, _ in triples:
            out += [fig, rows]
        out.append(" ".join(dict.fromkeys(text for _, _, text in triples)))
        if view.extra is not None:
            out.append(view.extra[1](triples[0][1]))
        return out

    run.__name__ = f"_{view.name}_view"
    return run


#: In the browser, per tab: (window state, *input values, selected tab, last ask) → the new ask
#: ``[state, *values]``, or no update while the tab is not selected or nothing changed since the
#: last ask. So a tab computes only when shown, and coming back to it unchanged costs no request.
ASK_JS = """function () {
    const args = Array.prototype.slice.call(arguments);
    const last = args.pop();
    const tab = args.pop();
    if (tab !== %s) { return window.dash_clientside.no_update; }
    if (last !== null && last !== undefined && JSON.stringify(last) === JSON.stringify(args)) {
        return window.dash_clientside.no_update;
    }
    return args;
}"""

#: In the browser: the selected tab → each panel's class (`layout.PANEL_CLASSES`), in `VIEWS` order.
PANELS_JS = """function (tab) {
    return %s.map(name => name === tab ? %s : %s);
}"""


def universe_defaults(snap: Snapshot, universe: Any) -> dict[tuple[str, str], Any]:
    """(component id, property) → value a newly picked universe brings: its series as the Cholesky
    ordering, its horizon, and what each row of `VIEWS` declares."""
    from . import ids

    u = snap.universe(universe)
    out: dict[tuple[str, str], Any] = {
        (ids.ORDERING, "options"): list(u.series), (ids.ORDERING, "value"): list(u.series),
        (ids.HORIZON, "value"): str(u.horizon),
    }  # fmt: skip
    for view in views.VIEWS:
        if view.defaults is not None:
            out.update(view.defaults(u))
    return out


def universe_defaults_keys() -> tuple[tuple[str, str], ...]:
    """Every (component id, property) `universe_defaults` sets, in a fixed order."""
    from . import ids

    keys: list[tuple[str, str]] = [(ids.ORDERING, "options"), (ids.ORDERING, "value"), (ids.HORIZON, "value")]
    for view in views.VIEWS:
        if view.defaults is not None:
            keys += [k for k in view.defaults(_SAMPLE) if k not in keys]
    return tuple(keys)


def register(app: Any, snap: Snapshot, settings: Any = None) -> None:
    """Attach every callback to `app` (a `dash.Dash` whose layout comes from `layout.build`):
    one per row of `views.VIEWS`, plus the date window, universe defaults, report links and CSV
    downloads."""
    from dash import MATCH, Input, Output, State, ctx, no_update
    from dash.exceptions import PreventUpdate

    from . import ids

    @app.callback(Output(ids.REPORTS, "children"), Input(ids.UNIVERSE, "value"))
    def _reports(universe: Any) -> list[Any]:
        export_dir = getattr(settings, "export_dir", None)
        return report_links(export_dir, universe if isinstance(universe, str) else None)

    @app.callback(
        Output(ids.START, "value"), Output(ids.END, "value"), Output(ids.WINDOW, "data"),
        Output(ids.WINDOW_NOTE, "children"),
        Input(ids.UNIVERSE, "value"), Input(ids.START, "value"), Input(ids.END, "value"),
        Input(ids.INDEX_GRAPH, "relayoutData"), State(ids.WINDOW, "data"),
    )  # fmt: skip
    def _sync(universe: Any, start: Any, end: Any, relayout: Any, current: Any) -> tuple[Any, ...]:
        trigger = {ids.UNIVERSE: "universe", ids.INDEX_GRAPH: "relayout"}.get(
            ctx.triggered_id, "dates" if ctx.triggered_id else None
        )
        if trigger == "universe" and isinstance(current, dict) and current.get("universe") == universe:
            raise PreventUpdate
        try:
            out = sync_window(snap, universe, start, end, relayout, trigger)
        except DashboardError as exc:
            if trigger == "relayout":
                raise PreventUpdate from None
            return no_update, no_update, no_update, page_text(str(exc))
        if current == out[2] and trigger != "dates":
            raise PreventUpdate
        return out

    targets = list(universe_defaults_keys())

    @app.callback(
        [Output(cid, prop) for cid, prop in targets], Input(ids.UNIVERSE, "value"),
        prevent_initial_call=True,
    )  # fmt: skip
    def _universe_defaults(universe: Any) -> list[Any]:
        """A new universe brings its own series, horizon and the views' declared defaults."""
        try:
            values = universe_defaults(snap, universe)
        except DashboardError:
            raise PreventUpdate from None
        return [values[k] for k in targets]

    import json

    from .layout import PANEL_CLASSES

    tabbed = [v for v in views.VIEWS if v.tab is not None]
    app.clientside_callback(
        PANELS_JS % (json.dumps([v.name for v in tabbed]), json.dumps(PANEL_CLASSES[True]),
                     json.dumps(PANEL_CLASSES[False])),
        [Output(ids.panel_id(v.name), "className") for v in tabbed], Input(ids.TABS, "value"),
    )  # fmt: skip
    for view in views.VIEWS:
        outputs = []
        for chart, _ in view.chart_list:
            outputs += [Output(ids.graph_id(chart), "figure"), Output(ids.chart_data(chart), "data")]
        outputs.append(Output(view.note_id, "children"))
        if view.extra is not None:
            outputs.append(Output(view.extra[0], "children"))
        inputs = [Input(ids.WINDOW, "data"), *(Input(cid, "value") for cid in view.inputs)]
        if view.tab is not None:
            ask = ids.ask_id(view.name)
            app.clientside_callback(
                ASK_JS % json.dumps(view.name), Output(ask, "data"),
                [*inputs, Input(ids.TABS, "value")], State(ask, "data"),
            )  # fmt: skip
            inputs = [Input(ask, "data")]
        app.callback(outputs, inputs)(_view_callback(snap, view))

    @app.callback(
        Output({"type": "csv-download", "chart": MATCH}, "data"),
        Input({"type": "csv-button", "chart": MATCH}, "n_clicks"),
        State({"type": "chart-data", "chart": MATCH}, "data"),
        State(ids.WINDOW, "data"),
        prevent_initial_call=True,
    )  # fmt: skip
    def _download(clicks: Any, rows: Any, state: Any) -> dict[str, Any]:
        if not clicks:
            raise PreventUpdate
        chart = ctx.triggered_id.get("chart") if isinstance(ctx.triggered_id, dict) else "chart"
        out = csv_file(rows, chart, state)
        if out is None:
            raise PreventUpdate
        return out
