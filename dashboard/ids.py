"""Component ids, in one place so layout, callbacks and browser tests agree.

Chart-data stores, CSV buttons and downloads use pattern-matching ids ``{"type": ..., "chart": name}``
with `CHARTS` naming every chart.
"""

from __future__ import annotations

__all__ = ["CHARTS", "TABS", "chart_data", "csv_button", "csv_download"]

# -- the date window (drives every view) ---------------------------------------------------------
UNIVERSE = "universe"
START = "window-start"
END = "window-end"
WINDOW = "window-state"  # dcc.Store {"universe", "start", "end"}
WINDOW_NOTE = "window-note"
INDEX_GRAPH = "index-graph"
STRESS_QUANTILE = "stress-quantile"
REPORTS = "reports"
CAUTION = "caution"
STATUS = "snapshot-status"

# -- shared model controls -----------------------------------------------------------------------
HORIZON = "horizon"
ORDERING = "cholesky-ordering"
MODEL_BAR = "model-bar"
MODEL_BAR_TITLE = "model-bar-title"

TABS = "views"
TAB_PATHS = "paths"
TAB_SHARES = "shares"
TAB_LEADLAG = "leadlag"
TAB_NETWORK = "network"
TAB_COMPARE = "compare"
TAB_HEALTH = "health"
TAB_CYCLES = "cycles"

# -- shock paths ---------------------------------------------------------------------------------
IDENTIFICATION = "identification"
CUMULATIVE = "cumulative"
BANDS = "bands"
PATHS_GRAPH = "paths-graph"
PATHS_NOTE = "paths-note"

# -- variance shares -----------------------------------------------------------------------------
SHARES_GRAPH = "shares-graph"
SHARES_NOTE = "shares-note"

# -- lead–lag ------------------------------------------------------------------------------------
LEVEL = "granger-level"
LEADLAG_GRAPH = "leadlag-graph"
LEADLAG_NOTE = "leadlag-note"

# -- network -------------------------------------------------------------------------------------
NETWORK_MODE = "network-mode"
NETWORK_SIZE = "network-size"
NETWORK_GRAPH = "network-graph"
NETWORK_NOTE = "network-note"

# -- window comparison ---------------------------------------------------------------------------
A_START = "compare-a-start"
A_END = "compare-a-end"
B_START = "compare-b-start"
B_END = "compare-b-end"
COMPARE_PAIRS_GRAPH = "compare-pairs-graph"
COMPARE_PATHS_GRAPH = "compare-paths-graph"
COMPARE_NOTE = "compare-note"

# -- model health --------------------------------------------------------------------------------
NEAR_ONE = "near-one"
HEALTH_GRAPH = "health-graph"
HEALTH_NOTE = "health-note"
SKIPPED_TABLE = "skipped-table"

# -- own cycles ----------------------------------------------------------------------------------
CYCLES_GRAPH = "cycles-graph"
CYCLES_NOTE = "cycles-note"

TABS_ORDER = (TAB_PATHS, TAB_SHARES, TAB_LEADLAG, TAB_NETWORK, TAB_COMPARE, TAB_HEALTH, TAB_CYCLES)

#: Every chart whose data can be downloaded as CSV, by name.
CHARTS = (
    "index",
    "paths",
    "shares",
    "leadlag",
    "network",
    "compare-pairs",
    "compare-paths",
    "health",
    "cycles",
)


def chart_data(chart: str) -> dict[str, str]:
    """The dcc.Store holding the rows behind `chart`."""
    return {"type": "chart-data", "chart": chart}


def csv_button(chart: str) -> dict[str, str]:
    return {"type": "csv-button", "chart": chart}


def csv_download(chart: str) -> dict[str, str]:
    return {"type": "csv-download", "chart": chart}
