"""One look for every chart: series colours, line and marker patterns, fonts, marks, layout helpers.

Series colours are the Okabe–Ito set (Okabe & Ito 2008, "Color Universal Design"; printed in
Wong 2011, Nature Methods 8:441), chosen to stay distinguishable under the common colour-vision
deficiencies. Past its eight colours a series keeps the colour of position ``k mod 8`` and takes
the next dash pattern (lines), marker symbol (points) and fill pattern (bars), so 32 series are
told apart without colour alone. A series' style depends only on its position in the universe's
series list, so the same series looks the same on the screen and in the report.

Sequential maps use cividis (Nuñez, Anderton & Renslow 2018); diverging maps run blue → white →
vermillion from the same Okabe–Ito set.

`Medium` is ``"screen"`` (the dashboard: hover labels, range slider) or ``"print"`` (the report:
no slider, legends below the plot, static-friendly margins). It is an option of each builder,
never a second set of builders.
"""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Sequence
from typing import Any, Literal

import numpy as np

__all__ = [
    "DIVERGING",
    "FONT",
    "FONT_FAMILY",
    "OKABE_ITO",
    "SEQUENTIAL",
    "SIGNIFICANCE_MARK",
    "Figure",
    "Medium",
    "colour",
    "series_style",
]

Figure = dict[str, Any]
Medium = Literal["screen", "print"]

#: Okabe–Ito colours in the order series get them (black last: it doubles as the text colour).
OKABE_ITO = (
    "#0072B2",  # blue
    "#E69F00",  # orange
    "#009E73",  # bluish green
    "#D55E00",  # vermillion
    "#56B4E9",  # sky blue
    "#CC79A7",  # reddish purple
    "#F0E442",  # yellow
    "#000000",  # black
)
BLUE, ORANGE, GREEN, VERMILLION, SKY, PURPLE = OKABE_ITO[:6]
GREY = "#7f7f7f"
GRID = "#e5e8ec"
INK = "#1b1b1b"
#: Translucent sky blue for response bands.
BAND_FILL = "rgba(86,180,233,0.30)"
#: Diverging blue → white → vermillion (negative → zero → positive).
DIVERGING = [[0.0, BLUE], [0.5, "#f7f7f7"], [1.0, VERMILLION]]
SEQUENTIAL = "Cividis"
#: Line dashes, marker symbols and bar fill patterns taken in turn past each eight series.
DASHES = ("solid", "dash", "dot", "dashdot")
SYMBOLS = ("circle", "square", "diamond", "triangle-up")
PATTERNS = ("", "/", "\\", "x")
#: One font stack for charts, the dashboard page and the report page (their CSS names it too).
FONT_FAMILY = "DejaVu Sans, Helvetica, Arial, sans-serif"
FONT = {"family": FONT_FAMILY, "size": 12, "color": INK}
#: Advance width, in em, of each printable ASCII character in DejaVu Sans (the stack's first font),
#: measured in chromium (canvas ``measureText`` at 100 px, rounded to 0.01 em). Other characters
#: count as `WIDE_EM`, the widest here, so an estimate errs wide.
CHAR_EM = dict(zip(
    " !\"#$%&'()*+,-./0123456789:;<=>?@ABCDEFGHIJKLMNOPQRSTUVWXYZ[\\]^_`abcdefghijklmnopqrstuvwxyz{|}~",
    (0.32, 0.4, 0.46, 0.84, 0.64, 0.95, 0.78, 0.27, 0.39, 0.39, 0.5, 0.84, 0.32, 0.36, 0.32, 0.34)
    + (0.64,) * 10
    + (0.34, 0.34, 0.84, 0.84, 0.84, 0.53, 1.0, 0.68, 0.69, 0.7, 0.77, 0.63, 0.58, 0.77, 0.75, 0.29, 0.29,
       0.66, 0.56, 0.86, 0.75, 0.79, 0.6, 0.79, 0.69, 0.63, 0.61, 0.73, 0.68, 0.99, 0.69, 0.61, 0.69, 0.39,
       0.34, 0.39, 0.84, 0.5, 0.5, 0.61, 0.63, 0.55, 0.63, 0.62, 0.35, 0.63, 0.63, 0.28, 0.28, 0.58, 0.28,
       0.97, 0.63, 0.61, 0.63, 0.63, 0.41, 0.52, 0.39, 0.63, 0.59, 0.82, 0.59, 0.59, 0.52, 0.64, 0.34, 0.64,
       0.84),
    strict=True,
))
WIDE_EM = 1.0
#: The mark beside a statistically significant value (Granger p-values), on screen and in print.
SIGNIFICANCE_MARK = "★"


def colour(k: int) -> str:
    """Colour of the series at position `k` of its universe."""
    return OKABE_ITO[k % len(OKABE_ITO)]


def series_style(k: int) -> dict[str, str]:
    """Colour, dash, marker symbol and bar pattern of the series at position `k` (unique for k < 32)."""
    turn = (k // len(OKABE_ITO)) % len(DASHES)
    return {"color": colour(k), "dash": DASHES[turn], "symbol": SYMBOLS[turn], "pattern": PATTERNS[turn]}


def as_list(values: Any) -> list[Any]:
    """JSON-ready list: NaN/inf become None (a gap), numpy scalars become floats."""
    arr = np.asarray(values, dtype=float).ravel()
    out: list[Any] = arr.tolist()
    if not np.isfinite(arr).all():  # the common all-finite case needs no loop
        out = [v if math.isfinite(v) else None for v in out]
    return out


def panels(values: np.ndarray) -> list[list[list[Any]]]:
    """(H1, n, m) [h, i, j] → nested lists [i][j] over h, NaN/inf as None (one conversion, not n²)."""
    arr = np.asarray(values, dtype=float)
    out: list[list[list[Any]]] = np.moveaxis(arr, 0, -1).tolist()
    if not np.isfinite(arr).all():
        out = [[[v if math.isfinite(v) else None for v in cell] for cell in row] for row in out]
    return out


def matrix(z: np.ndarray) -> list[list[Any]]:
    arr = np.asarray(z, dtype=float)
    if np.isfinite(arr).all():
        out: list[list[Any]] = arr.tolist()
        return out
    return [as_list(row) for row in arr]


def dates(values: Sequence[Any]) -> list[str]:
    return [v.isoformat() if isinstance(v, (dt.date, dt.datetime)) else str(v) for v in values]


def wrap(text: str, width: int = 95, *, sep: str = "<br>") -> str:
    """`text` broken at spaces into lines of at most `width` characters (a long word stays whole)."""
    lines: list[str] = []
    for part in text.split(sep):
        line = ""
        for w in part.split(" "):
            if line and len(line) + 1 + len(w) > width:
                lines.append(line)
                line = w
            else:
                line = f"{line} {w}" if line else w
        lines.append(line)
    return sep.join(lines)


def text_px(label: str, size: float) -> float:
    """Width in px of one line of `label` in the theme's font at `size` px (`CHAR_EM`): what a chart
    reserves as margin for its labels, so that plotly's automargin finds nothing to widen — each
    widening redraws the whole chart, and a first draw widened up to four times."""
    return size * sum(CHAR_EM.get(c, WIDE_EM) for c in label)


def axis(**extra: Any) -> dict[str, Any]:
    base = {"gridcolor": GRID, "zerolinecolor": "#b8bec6", "linecolor": "#8a9099", "automargin": True}
    base.update(extra)
    return base


def layout(
    *,
    height: int,
    title: str | None = None,
    subtitle: str | None = None,
    medium: Medium = "screen",
    **extra: Any,
) -> dict[str, Any]:
    """The common layout: font, white background, a left-aligned title (wrapped) over a subtitle."""
    out: dict[str, Any] = {
        "font": FONT,
        "height": height,
        "paper_bgcolor": "white",
        "plot_bgcolor": "white",
        "margin": {"l": 60, "r": 20, "t": 60 if title else 30, "b": 40},
        "hoverlabel": {"font": FONT},
        "legend": {"bgcolor": "rgba(255,255,255,0.8)"},
        "colorway": list(OKABE_ITO),
        "hovermode": "closest",
    }
    if title:
        text = wrap(title)
        if subtitle:
            text += "<br><span style='font-size:11px;color:#444'>" + wrap(subtitle, 120) + "</span>"
        out["title"] = {"text": text, "x": 0.0, "xanchor": "left", "xref": "paper",
                        "font": {"size": 14 if medium == "screen" else 15}}  # fmt: skip
    out.update(extra)
    if title:
        # margins assume a title of at most two lines; each further line gets room of its own
        more = out["title"]["text"].count("<br>") - 1
        if more > 0:
            out["margin"] = {**out["margin"], "t": out["margin"].get("t", 60) + 16 * more}
    return out


def text(label: str, x: float, y: float, **extra: Any) -> dict[str, Any]:
    ann = {"text": label, "x": x, "y": y, "xref": "paper", "yref": "paper", "showarrow": False,
           "font": {"size": 12}}  # fmt: skip
    ann.update(extra)
    return ann


def grid(
    rows: int,
    cols: int,
    *,
    hgap: float,
    vgap: float,
    share_x: bool = False,
    share_y: bool = False,
) -> tuple[dict[str, Any], list[list[tuple[str, str]]]]:
    """Axes for a rows × cols grid of panels, top-left first.

    Returns the layout's axis entries and, per panel [r][c], its trace references ("x3", "y3").
    """
    w = (1.0 - (cols - 1) * hgap) / cols
    h = (1.0 - (rows - 1) * vgap) / rows
    out: dict[str, Any] = {}
    refs: list[list[tuple[str, str]]] = []
    for r in range(rows):
        row = []
        for c in range(cols):
            k = r * cols + c + 1
            suffix = "" if k == 1 else str(k)
            x0 = c * (w + hgap)
            y1 = 1.0 - r * (h + vgap)
            xa = axis(domain=[x0, min(1.0, x0 + w)], anchor=f"y{suffix}")
            ya = axis(domain=[max(0.0, y1 - h), y1], anchor=f"x{suffix}")
            if share_x and k > 1:
                xa["matches"] = "x"
            if share_x and r < rows - 1:
                xa["showticklabels"] = False
            if share_y and c > 0:
                ya["matches"] = f"y{r * cols + 1 if r * cols + 1 > 1 else ''}"
                ya["showticklabels"] = False
            out[f"xaxis{suffix}"] = xa
            out[f"yaxis{suffix}"] = ya
            row.append((f"x{suffix}", f"y{suffix}"))
        refs.append(row)
    return out, refs


def axis_key(ref: str) -> str:
    """ "x3" → "xaxis3", "y" → "yaxis"."""
    return ref[0] + "axis" + ref[1:]


def hline(y: float, xref: str, yref: str, colour_: str, dash: str, width: float = 1.0) -> dict[str, Any]:
    """A horizontal line across the panel of axes (`xref`, `yref`)."""
    return {"type": "line", "xref": f"{xref} domain", "x0": 0, "x1": 1, "yref": yref, "y0": y,
            "y1": y, "line": {"color": colour_, "dash": dash, "width": width}}  # fmt: skip
