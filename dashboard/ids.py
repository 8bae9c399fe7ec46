"""Component ids shared by the page, the callbacks and the browser tests.

The ids of each view (its graphs, note and tab) are generated from `dashboard.views.VIEWS` with
`graph_id` and `note_id`; a view's own controls declare their ids beside it in that table. Here
are only the ids every view shares: the universe and date window, the shared model settings, the
tabs, the report links and the caution. Chart-data stores, CSV buttons and downloads use
pattern-matching ids ``{"type": ..., "chart": name}``.
"""

from __future__ import annotations

__all__ = ["ask_id", "chart_data", "csv_button", "csv_download", "graph_id", "note_id", "panel_id"]


def graph_id(chart: str) -> str:
    """The dcc.Graph of chart `chart` (a chart name of `views.VIEWS`)."""
    return f"{chart}-graph"


def note_id(view: str) -> str:
    """The line of text under view `view`."""
    return f"{view}-note"


# -- the date window (drives every view) ---------------------------------------------------------
UNIVERSE = "universe"
START = "window-start"
END = "window-end"
WINDOW = "window-state"  # dcc.Store {"universe", "start", "end"}
WINDOW_NOTE = "window-note"
INDEX_GRAPH = graph_id("index")  # its range slider also sets the date window
INDEX_RANGE = "index-range"  # dcc.Store: the index chart's layout events that set an x-range
STRESS_QUANTILE = "stress-quantile"
REPORTS = "reports"
CAUTION = "caution"
STATUS = "snapshot-status"  # the note under the index

# -- shared model settings (the views using them are named above them on the page) ---------------
HORIZON = "horizon"
ORDERING = "cholesky-ordering"
MODEL_BAR = "model-bar"
MODEL_BAR_TITLE = "model-bar-title"

TABS = "views"
PANELS = "view-panels"  # the tabs' contents, every one kept on the page (hidden unless selected)


def panel_id(view: str) -> str:
    """The element holding tab `view`'s controls, charts and note (shown while its tab is selected)."""
    return f"{view}-panel"


def ask_id(view: str) -> str:
    """The dcc.Store holding the inputs tab `view` was last asked to compute for (set in the browser)."""
    return f"{view}-ask"


def chart_data(chart: str) -> dict[str, str]:
    """The dcc.Store holding the rows behind `chart`."""
    return {"type": "chart-data", "chart": chart}


def csv_button(chart: str) -> dict[str, str]:
    return {"type": "csv-button", "chart": chart}


def csv_download(chart: str) -> dict[str, str]:
    return {"type": "csv-download", "chart": chart}
