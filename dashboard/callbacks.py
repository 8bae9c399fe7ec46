"""Callbacks: the date window, the CSV downloads, and the wiring generated from `views.VIEWS`.

`sync_window` keeps one date window for every view (typed dates, the index chart's range slider,
the universe). `register` attaches one callback per row of `views.VIEWS` (inputs → figure, rows,
note), the universe defaults the rows declare, the report links and the CSV downloads. Bad or
hostile input never reaches SQL text: it fails validation and the view shows a message instead.
"""

from __future__ import annotations

import csv
import io
import json
import re
import threading
from collections import OrderedDict
from collections.abc import Callable
from typing import Any

from . import views
from ._components import PANEL_CLASSES, STRESS_DEFAULT, report_links
from ._errors import DashboardError, WindowError
from ._inputs import FAILED, page_text
from .data import Snapshot, Universe, parse_date
from .views import View, empty_note, has_fitted

__all__ = [
    "ANSWERS_KEPT",
    "Answers",
    "asks",
    "csv_file",
    "first_view",
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


#: Answers of view callbacks one worker process keeps (the newest snapshot's; least recently used
#: dropped first). The largest answers (a response grid with bands) are about 0.4 MB.
ANSWERS_KEPT = 64


class Answers:
    """The outputs of view callbacks, per snapshot file and inputs: a question asked again — the
    page every visitor opens first, a date window visited before — is answered without recomputing.

    Keyed by the snapshot's generation (a newly published file starts afresh) and the view's name
    and inputs as JSON. A request pinned to a replaced file computes without keeping its answer, and
    an answer `keep` refuses (a view that failed unexpectedly) is not kept either.
    """

    def __init__(self, kept: int = ANSWERS_KEPT) -> None:
        self._kept = kept
        self._items: OrderedDict[tuple[int, str], Any] = OrderedDict()
        self._newest = -1
        self._lock = threading.Lock()

    def get(
        self, snap: Snapshot, name: str, inputs: Any, compute: Callable[[], Any],
        keep: Callable[[Any], bool] = lambda value: True,
    ) -> Any:  # fmt: skip
        try:
            key = json.dumps([name, inputs], sort_keys=True, default=str)
        except (TypeError, ValueError):  # inputs JSON cannot hold: nothing to key on
            return compute()
        with snap.reader.pinned():
            try:
                generation = snap.reader.current_generation()
            except DashboardError:  # no snapshot yet: the view says so itself
                return compute()
            with self._lock:
                if generation > self._newest:
                    self._items.clear()
                    self._newest = generation
                hit = self._items.get((generation, key))
                if hit is not None:
                    self._items.move_to_end((generation, key))
                    return hit
            value = compute()
            with self._lock:
                if generation == self._newest and keep(value):
                    self._items[(generation, key)] = value
                    while len(self._items) > self._kept:
                        self._items.popitem(last=False)
            return value

    def __len__(self) -> int:
        return len(self._items)


def _view_callback(snap: Snapshot, view: View, answers: Answers | None = None) -> Callable[..., list[Any]]:
    """The callback body of one row of `VIEWS`: window state and input values → per chart (figure,
    CSV rows), the note, and the extra output if the row has one.

    A view shown above the tabs gets (state, *values) as its callback's inputs; a tab's view gets
    them as one list, its ask (`ask_id`), which the browser sets only while the tab is selected and
    only when the list differs from the last one asked (`ASK_JS`). With `answers`, an answer given
    before for the same inputs and snapshot file is sent again without recomputing."""
    from dash.exceptions import PreventUpdate

    def compute(state: Any, values: list[Any]) -> list[Any]:
        triples = view.results(snap, state, *values)
        out: list[Any] = []
        for fig, rows, _ in triples:
            out += [fig, rows]
        out.append(" ".join(dict.fromkeys(text for _, _, text in triples)))
        if view.extra is not None:
            out.append(view.extra[1](triples[0][1]))
        return out

    def run(*given: Any) -> list[Any]:
        if view.tab is not None:
            (ask,) = given
            if not isinstance(ask, list) or len(ask) != 1 + len(view.inputs):
                raise PreventUpdate  # never asked yet (the tab was never selected)
            given = tuple(ask)
        state, *values = given
        if answers is None:
            return compute(state, values)
        return list(answers.get(snap, view.name, given, lambda: compute(state, values), keep=_succeeded))

    run.__name__ = f"_{view.name}_view"
    return run


def _succeeded(out: list[Any]) -> bool:
    """False when a view's note (a str among its outputs) says it failed unexpectedly."""
    return not any(isinstance(x, str) and FAILED in x for x in out)


def first_view(snap: Snapshot, answers: Answers | None = None) -> dict[tuple[str, str], Any]:
    """(component id, property) → value of what every visitor sees first: the first universe's
    whole history as the date window, its note, and the connectedness index over it (the first row
    of `VIEWS`, default inputs) — put in the page itself, so the first chart needs no callback.

    Empty when the snapshot lists no universe; a problem reading it becomes the window note.
    Kept in `answers` (per snapshot file) when given."""
    if answers is not None:
        return dict(answers.get(snap, "first view", [], lambda: _first_view(snap, answers)))
    return _first_view(snap, None)


def _first_view(snap: Snapshot, answers: Answers | None) -> dict[tuple[str, str], Any]:
    from . import ids

    try:
        names = sorted(snap.universes())
    except DashboardError as exc:
        return {(ids.WINDOW_NOTE, "children"): page_text(str(exc))}
    if not names:
        return {}
    try:
        start, end, state, note = sync_window(snap, names[0], None, None, None, None)
    except DashboardError as exc:
        return {(ids.WINDOW_NOTE, "children"): page_text(str(exc))}
    out: dict[tuple[str, str], Any] = {
        (ids.START, "value"): start, (ids.END, "value"): end, (ids.WINDOW, "data"): state,
        (ids.WINDOW_NOTE, "children"): note,
    }  # fmt: skip
    overview = views.VIEWS[0]
    values = [{ids.STRESS_QUANTILE: STRESS_DEFAULT}[cid] for cid in overview.inputs]
    answer = _view_callback(snap, overview, answers)(state, *values)
    # the rows behind a chart (its chart-data store) under (graph id, "data")
    targets = [(ids.graph_id(c), k) for c, _ in overview.chart_list for k in ("figure", "data")]
    targets.append((overview.note_id, "children"))
    out.update(zip(targets, answer, strict=False))
    return out


def asks(values: dict[str, Any]) -> dict[str, list[Any]]:
    """``"{view}-ask.data"`` → the ask the browser would send each tab's view (`ASK_JS`), given
    ``"id.property"`` → value of the window state and the views' inputs (missing ones are None).

    For clients other than the page (tests, benchmarks) that post callbacks as the browser does."""
    from . import ids

    return {
        f"{ids.ask_id(v.name)}.data": [values.get(f"{ids.WINDOW}.data"), *(values.get(f"{c}.value") for c in v.inputs)]
        for v in views.VIEWS if v.tab is not None
    }  # fmt: skip


#: In the browser, for every tab at once (one callback, not one per tab: each clientside callback
#: costs the page's renderer a pass over the callback graph, and a tab click ran a dozen of them
#: before its request left): (window state, *every tab's input values, selected tab, the index
#: chart's layout event, *every tab's last ask) → per tab (`VIEWS` order, the keys of the table
#: ``{view: [position of each of its inputs among the arguments]}`` put in with ``%`` as JSON) its
#: new ask ``[state, *its values]``, or no update while the tab is not selected, nothing changed
#: since its last ask, or the index chart (which comes with the page) has not been drawn yet — so
#: the first chart is drawn before any tab's. A tab computes only when shown, and coming back to it
#: unchanged costs no request.
ASK_JS = """function () {
    const picks = %s;
    const names = Object.keys(picks);
    const args = Array.prototype.slice.call(arguments);
    const lasts = args.splice(args.length - names.length, names.length);
    const drawn = args.pop();
    const tab = args.pop();
    const none = window.dash_clientside.no_update;
    return names.map((name, k) => {
        if (tab !== name || drawn === null || drawn === undefined) { return none; }
        const ask = [args[0]].concat(picks[name].map(i => args[i]));
        const last = lasts[k];
        if (last !== null && last !== undefined && JSON.stringify(last) === JSON.stringify(ask)) { return none; }
        return ask;
    });
}"""


#: In the browser: the index chart's layout event → itself when it sets the x-range (the keys
#: `_relayout_range` reads), else no update.
RANGE_JS = """function (relayout) {
    const keys = ["xaxis.range", "xaxis.range[0]", "xaxis.autorange", "xaxis.rangeslider.autorange"];
    if (relayout && keys.some(k => k in relayout)) { return relayout; }
    return window.dash_clientside.no_update;
}"""

#: In the browser: the selected tab → each panel's class (`PANEL_CLASSES`), in `VIEWS` order.
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


def register(app: Any, snap: Snapshot, settings: Any = None, answers: Answers | None = None) -> None:
    """Attach every callback to `app` (a `dash.Dash` whose layout comes from `layout.build`):
    one per row of `views.VIEWS`, plus the date window, universe defaults, report links and CSV
    downloads. The page is built with what `first_view` gives (the date window, the index, the
    report links), so those callbacks do not run when it opens; views answer through `answers`."""
    from dash import MATCH, Input, Output, State, ctx, no_update
    from dash.exceptions import PreventUpdate

    from . import ids

    @app.callback(Output(ids.REPORTS, "children"), Input(ids.UNIVERSE, "value"), prevent_initial_call=True)
    def _reports(universe: Any) -> list[Any]:
        export_dir = getattr(settings, "export_dir", None)
        return report_links(export_dir, universe if isinstance(universe, str) else None)

    @app.callback(
        Output(ids.START, "value"), Output(ids.END, "value"), Output(ids.WINDOW, "data"),
        Output(ids.WINDOW_NOTE, "children"),
        Input(ids.UNIVERSE, "value"), Input(ids.START, "value"), Input(ids.END, "value"),
        Input(ids.INDEX_RANGE, "data"), State(ids.WINDOW, "data"), prevent_initial_call=True,
    )  # fmt: skip
    def _sync(universe: Any, start: Any, end: Any, relayout: Any, current: Any) -> tuple[Any, ...]:
        trigger = {ids.UNIVERSE: "universe", ids.INDEX_RANGE: "relayout"}.get(
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

    # the index chart's layout events reach the server only when they set an x-range (not, e.g.,
    # the one each draw sends)
    app.clientside_callback(RANGE_JS, Output(ids.INDEX_RANGE, "data"), Input(ids.INDEX_GRAPH, "relayoutData"),
                            prevent_initial_call=True)  # fmt: skip
    tabbed = [v for v in views.VIEWS if v.tab is not None]
    app.clientside_callback(
        PANELS_JS % (json.dumps([v.name for v in tabbed]), json.dumps(PANEL_CLASSES[True]),
                     json.dumps(PANEL_CLASSES[False])),
        [Output(ids.panel_id(v.name), "className") for v in tabbed], Input(ids.TABS, "value"),
    )  # fmt: skip
    # every tab's ask from one clientside callback (`ASK_JS`); its arguments: the window state, each
    # input any tab reads (once), the selected tab, the index chart's layout event, each tab's ask
    shared = list(dict.fromkeys(cid for v in tabbed for cid in v.inputs))
    picks = {v.name: [1 + shared.index(cid) for cid in v.inputs] for v in tabbed}
    app.clientside_callback(
        ASK_JS % json.dumps(picks),
        [Output(ids.ask_id(v.name), "data") for v in tabbed],
        [Input(ids.WINDOW, "data"), *(Input(cid, "value") for cid in shared), Input(ids.TABS, "value"),
         Input(ids.INDEX_GRAPH, "relayoutData")],
        [State(ids.ask_id(v.name), "data") for v in tabbed],
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
            inputs = [Input(ids.ask_id(view.name), "data")]
        # the view above the tabs comes with the page (`first_view`); a tab's view when asked
        app.callback(outputs, inputs, prevent_initial_call=view.tab is None)(_view_callback(snap, view, answers))

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
