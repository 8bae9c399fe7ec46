"""Small page components shared by the layout and the views (no callbacks, no data access).

Labels, graphs with a loading indicator, the CSV button row, notes, the skipped-window table, the
report links and `as_json` (components as the plain JSON Dash sends).
"""

from __future__ import annotations

import datetime as dt
import re
import urllib.parse
from collections.abc import Sequence
from typing import Any

from dash import dcc, html

from . import ids
from .reports import latest_reports

__all__ = [
    "PANEL_CLASSES",
    "STRESS_DEFAULT",
    "as_json",
    "csv_row",
    "graph",
    "label",
    "note",
    "report_links",
    "skipped_table",
]

#: A tab panel's class when its tab is (True) or is not (False) selected; a hidden panel keeps its
#: width (assets/style.css), so its charts are neither redrawn nor re-laid out when shown again.
PANEL_CLASSES = {True: "view-panel", False: "view-panel view-panel--idle"}

#: The stress-shading quantile the page opens with.
STRESS_DEFAULT = 0.9


def label(text: str, child: Any, *, width: str | None = None) -> html.Label:
    style = {"width": width} if width else None
    return html.Label([html.Span(text, className="ctl-label"), child], className="ctl", style=style)


def csv_row(chart: str, data: Any = None) -> html.Div:
    store = dcc.Store(id=ids.chart_data(chart)) if data is None else dcc.Store(id=ids.chart_data(chart), data=data)
    return html.Div(
        [
            html.Button("Download data (CSV)", id=ids.csv_button(chart), n_clicks=0, className="csv-btn"),
            dcc.Download(id=ids.csv_download(chart)),
            store,
        ],
        className="csv-row",
    )


def graph(graph_id: str, *, height: int = 420, figure: Any = None) -> dcc.Loading:
    """A chart inside a loading indicator (shown while its callback runs, e.g. a bootstrap band);
    `figure` draws it with the page, before any callback."""
    drawn = {} if figure is None else {"figure": figure}
    return dcc.Loading(
        dcc.Graph(
            id=graph_id,
            config={"displaylogo": False, "responsive": True, "toImageButtonOptions": {"format": "png"}},
            style={"minHeight": f"{min(height, 360)}px"},
            **drawn,
        ),
        type="circle",
        delay_show=150,
    )


def note(note_id: str) -> html.P:
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
