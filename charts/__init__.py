"""charts: one figure builder per chart and one theme, for the dashboard and the report alike.

Builders take arrays and labels and return plotly figures as plain dicts; ``medium="screen"``
(the dashboard) or ``medium="print"`` (the HTML report) adapts the same figure to where it is
shown. Imports numpy only (plotly is needed to draw the dicts, not to build them); no Dash, no
DuckDB, no files. The theme (`series_style`, `OKABE_ITO`, `FONT`, `SIGNIFICANCE_MARK`) gives a
series the same colour, dash and marker wherever it appears.
"""

from __future__ import annotations

from ._figures import (
    MODEL_LABELS,
    band_index_figure,
    band_label,
    band_net_figure,
    band_pairs_figure,
    cycles_figure,
    granger_figure,
    health_figure,
    index_figure,
    joint_index_figure,
    message_figure,
    model_compare_figure,
    net_figure,
    network_figure,
    node_positions,
    pairwise_compare_figure,
    quantile_index_figure,
    quantile_label,
    quantile_tables_figure,
    responses_compare_figure,
    responses_figure,
    shares_figure,
    stress_runs,
    tightness_figure,
)
from ._theme import (
    DIVERGING,
    FONT,
    FONT_FAMILY,
    OKABE_ITO,
    SEQUENTIAL,
    SIGNIFICANCE_MARK,
    Figure,
    Medium,
    colour,
    series_style,
)

__all__ = [
    "DIVERGING",
    "FONT",
    "FONT_FAMILY",
    "MODEL_LABELS",
    "OKABE_ITO",
    "SEQUENTIAL",
    "SIGNIFICANCE_MARK",
    "Figure",
    "Medium",
    "band_index_figure",
    "band_label",
    "band_net_figure",
    "band_pairs_figure",
    "colour",
    "cycles_figure",
    "granger_figure",
    "health_figure",
    "index_figure",
    "joint_index_figure",
    "message_figure",
    "model_compare_figure",
    "net_figure",
    "network_figure",
    "node_positions",
    "pairwise_compare_figure",
    "quantile_index_figure",
    "quantile_label",
    "quantile_tables_figure",
    "responses_compare_figure",
    "responses_figure",
    "series_style",
    "shares_figure",
    "stress_runs",
    "tightness_figure",
]
