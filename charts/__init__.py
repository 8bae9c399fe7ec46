"""charts: one figure builder per chart and one theme, for the dashboard and the report alike.

Builders take arrays and labels and return plotly figures as plain dicts; ``medium="screen"``
(the dashboard) or ``medium="print"`` (the HTML report) adapts the same figure to where it is
shown. Imports numpy only (plotly is needed to draw the dicts, not to build them); no Dash, no
DuckDB, no files. The theme (`series_style`, `OKABE_ITO`, `FONT`, `SIGNIFICANCE_MARK`) gives a
series the same colour, dash and marker wherever it appears.
"""

from __future__ import annotations

from . import _figures, _theme
from ._figures import *  # noqa: F403  (the builders; `_figures.__all__` is the one list of them)
from ._theme import *  # noqa: F403  (the theme; `_theme.__all__` lists it)

#: Everything the two modules export: a new builder is added to `_figures.__all__` only.
__all__ = [*_figures.__all__, *_theme.__all__]
