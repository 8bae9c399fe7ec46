"""Plotly figures of the report, built as plain figure dicts (``{"data": [...], "layout": {...}}``).

Pure: data in, dict out; nothing here touches files. Plain dicts (serialised with
``plotly.io.to_html(..., validate=False)``) skip plotly's per-property validation, which took
most of a report's time; the dicts use only documented plotly.js attributes.

Colours are the Okabe–Ito set (Okabe & Ito 2008, "Color Universal Design"), distinguishable
under the common colour-vision deficiencies; beyond eight series the colours repeat with another
dash pattern (lines) or fill pattern (bars), so no two look alike.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, Any

import numpy as np
import polars as pl

if TYPE_CHECKING:
    from pipeline.export._data import DecompositionSet, ResponseSet

__all__ = [
    "GRID_MAX",
    "PALETTE",
    "colour",
    "connectedness_figure",
    "decomposition_figure",
    "health_figure",
    "net_figure",
    "response_figures",
]

Figure = dict[str, Any]

#: Okabe–Ito, black moved last (it reads as "axis", so series start with orange).
PALETTE = ("#E69F00", "#56B4E9", "#009E73", "#0072B2", "#D55E00", "#CC79A7", "#F0E442", "#000000")
_DASHES = ("solid", "dash", "dot", "dashdot")
_PATTERNS = ("", "/", "\\", "x")
_LINE = "#0072B2"  # single-series lines: Okabe–Ito blue
_BAND = "rgba(86, 180, 233, 0.30)"  # Okabe–Ito sky blue, translucent
_REFERENCE = "#D55E00"  # reference lines (zero, stability limit): vermillion
#: Largest n drawn as one n × n grid of responses; above it, one figure per shock.
GRID_MAX = 6

_FONT = {"family": "Helvetica, Arial, sans-serif", "size": 12, "color": "#1b1b1b"}
#: Axis look (white background, axis lines and outside ticks, no grid).
_AXIS = {"showline": True, "linecolor": "#444444", "ticks": "outside", "tickcolor": "#444444",
         "showgrid": False, "zeroline": False, "automargin": True}


def colour(i: int) -> str:
    return PALETTE[i % len(PALETTE)]


def dash(i: int) -> str:
    return _DASHES[(i // len(PALETTE)) % len(_DASHES)]


def _layout(*, title: str, height: int, **extra: Any) -> dict[str, Any]:
    layout: dict[str, Any] = {
        "title": {"text": title, "x": 0.0, "xanchor": "left", "font": {"size": 15}},
        "height": height,
        "margin": {"l": 60, "r": 20, "t": 50, "b": 70},
        "font": _FONT,
        "paper_bgcolor": "white",
        "plot_bgcolor": "white",
        "legend": {"orientation": "h", "yanchor": "top", "y": -0.2, "x": 0.0,
                   "traceorder": "normal"},
        "hovermode": "x unified",
        "xaxis": dict(_AXIS),
        "yaxis": dict(_AXIS),
    }
    layout.update(extra)
    return layout


def _hline(y: float, *, axis: str = "", colour: str = "#888888", width: float = 1.0,
           dash: str = "solid") -> dict[str, Any]:
    """A horizontal line across subplot `axis` ("" for the first, "2", "3", ...)."""
    return {"type": "line", "xref": f"x{axis} domain", "x0": 0, "x1": 1, "yref": f"y{axis}",
            "y0": y, "y1": y, "line": {"color": colour, "width": width, "dash": dash}}


def _grid(rows: int, cols: int, *, hspace: float, vspace: float
          ) -> list[tuple[str, list[float], list[float]]]:
    """Subplot axes of a rows × cols grid, row-major from the top-left:
    (axis suffix, x domain, y domain) with domains in paper fractions."""
    w = (1.0 - hspace * (cols - 1)) / cols
    h = (1.0 - vspace * (rows - 1)) / rows
    out = []
    for r in range(rows):
        for c in range(cols):
            k = r * cols + c + 1
            x0 = c * (w + hspace)
            top = 1.0 - r * (h + vspace)
            out.append(("" if k == 1 else str(k), [x0, min(1.0, x0 + w)],
                        [max(0.0, top - h), top]))
    return out


def _subplots(layout: dict[str, Any], rows: int, cols: int, titles: list[str], *, hspace: float,
              vspace: float, x_title: str | None = None) -> list[str]:
    """Add a grid of axes (shared x, tick labels on the bottom row) and panel titles to
    `layout`; returns the axis suffixes, row-major."""
    cells = _grid(rows, cols, hspace=hspace, vspace=vspace)
    annotations = []
    for k, (ax, xd, yd) in enumerate(cells):
        r = k // cols
        layout[f"xaxis{ax}"] = {**_AXIS, "domain": xd, "anchor": f"y{ax}",
                                "showticklabels": r == rows - 1,
                                **({"matches": "x"} if ax else {})}
        if x_title and r == rows - 1:
            layout[f"xaxis{ax}"]["title"] = {"text": x_title}
        layout[f"yaxis{ax}"] = {**_AXIS, "domain": yd, "anchor": f"x{ax}"}
        if k < len(titles):
            annotations.append({"text": titles[k], "x": (xd[0] + xd[1]) / 2, "y": yd[1],
                                "xref": "paper", "yref": "paper", "xanchor": "center",
                                "yanchor": "bottom", "showarrow": False, "font": {"size": 11}})
    layout["annotations"] = annotations
    return [ax for ax, _, _ in cells]


def connectedness_figure(conn: pl.DataFrame, *, universe: str) -> Figure:
    """Total connectedness (percent) against window end."""
    trace = {
        "type": "scatter", "x": conn["window_end"].to_list(), "y": conn["total"].to_numpy(),
        "mode": "lines+markers" if conn.height <= 40 else "lines",
        "line": {"color": _LINE, "width": 2}, "name": "total connectedness",
        "hovertemplate": "%{x|%Y-%m-%d}: %{y:.2f}%<extra></extra>",
    }
    layout = _layout(title=f"Total connectedness, {universe}", height=340, showlegend=False)
    layout["yaxis"].update(title={"text": "percent of forecast-error variance"},
                           rangemode="tozero")
    return {"data": [trace], "layout": layout}


def net_figure(direc: pl.DataFrame, names: tuple[str, ...]) -> Figure:
    """Net directional connectedness (to others − from others) per series against window end."""
    data = []
    for i, s in enumerate(names):
        d = direc.filter(pl.col("series") == s)
        data.append({
            "type": "scatter", "x": d["window_end"].to_list(), "y": d["net"].to_numpy(),
            "mode": "lines", "name": s,
            "line": {"color": colour(i), "dash": dash(i), "width": 1.6},
            "hovertemplate": f"{s}: " + "%{y:.2f}<extra></extra>",
        })
    layout = _layout(title="Net transmitter (+) or receiver (−), by series", height=360,
                     shapes=[_hline(0.0)])
    layout["yaxis"]["title"] = {"text": "net, percentage points"}
    return {"data": data, "layout": layout}


def _band_traces(h: np.ndarray, mid: np.ndarray, lo: np.ndarray | None, hi: np.ndarray | None,
                 *, axis: str, show_legend: bool, coverage: float | None) -> list[dict[str, Any]]:
    """(upper, lower filled to upper,) response — the band first so the line is drawn on top."""
    ref = {"xaxis": f"x{axis}", "yaxis": f"y{axis}"}
    out = []
    if lo is not None and hi is not None:
        label = f"{coverage:.0%} band" if coverage else "band"
        out.append({"type": "scatter", "x": h, "y": hi, "mode": "lines", "line": {"width": 0},
                    "hoverinfo": "skip", "showlegend": False, "legendgroup": "band", **ref})
        out.append({"type": "scatter", "x": h, "y": lo, "mode": "lines", "line": {"width": 0},
                    "fill": "tonexty", "fillcolor": _BAND, "name": label,
                    "showlegend": show_legend, "legendgroup": "band", "hoverinfo": "skip", **ref})
    out.append({"type": "scatter", "x": h, "y": mid, "mode": "lines",
                "line": {"color": _LINE, "width": 1.8}, "name": "response",
                "showlegend": show_legend, "legendgroup": "resp",
                "hovertemplate": "h=%{x}: %{y:.4g}<extra></extra>", **ref})
    return out


def response_figures(rs: ResponseSet, names: tuple[str, ...]) -> list[Figure]:
    """Impulse responses with bands: one n × n grid (rows: response, columns: shock) when
    n <= GRID_MAX, otherwise one figure per shock with the responses wrapped four to a row."""
    n = len(names)
    h = np.arange(rs.horizon + 1)

    def panel(i: int, j: int, axis: str, first: bool) -> list[dict[str, Any]]:
        lo = None if rs.lower is None else rs.lower[:, i, j]
        hi = None if rs.upper is None else rs.upper[:, i, j]
        return _band_traces(h, rs.response[:, i, j], lo, hi, axis=axis, show_legend=first,
                            coverage=rs.coverage)

    zero = {"colour": _REFERENCE, "width": 0.8, "dash": "dot"}
    if n <= GRID_MAX:
        layout = _layout(title=f"Response (row) to a shock in (column), {rs.identification} shocks",
                         height=max(320, 190 * n), hovermode="closest")
        axes = _subplots(layout, n, n, [f"{names[i]} ← {names[j]}" for i in range(n)
                                        for j in range(n)],
                         hspace=0.06, vspace=0.09 if n > 1 else 0.1, x_title="horizon")
        data, shapes = [], []
        for k, ax in enumerate(axes):
            data += panel(k // n, k % n, ax, k == 0)
            shapes.append(_hline(0.0, axis=ax, **zero))
        layout["shapes"] = shapes
        return [{"data": data, "layout": layout}]

    figs = []
    cols = 4
    rows = math.ceil(n / cols)
    for j in range(n):
        layout = _layout(title=f"Responses to a shock in {names[j]} ({rs.identification} shocks)",
                         height=max(300, 180 * rows), hovermode="closest")
        axes = _subplots(layout, rows, cols, list(names), hspace=0.06, vspace=0.12)
        data, shapes = [], []
        for i in range(n):
            data += panel(i, j, axes[i], i == 0)
            shapes.append(_hline(0.0, axis=axes[i], **zero))
        for ax in axes[n:]:  # unused cells of the last row
            layout[f"xaxis{ax}"]["visible"] = False
            layout[f"yaxis{ax}"]["visible"] = False
        layout["shapes"] = shapes
        figs.append({"data": data, "layout": layout})
    return figs


def decomposition_figure(ds: DecompositionSet, names: tuple[str, ...]) -> Figure:
    """Stacked bars: each series' H-step forecast-error variance split by shock, in percent."""
    last = 100.0 * ds.share[-1]  # (n, n) [variable, shock]
    data = [{
        "type": "bar", "orientation": "h", "y": list(names), "x": last[:, j],
        "name": f"shock in {s}",
        "marker": {"color": colour(j), "pattern": {"shape": _PATTERNS[(j // 8) % 4]}},
        "hovertemplate": f"%{{y}} from {s}: " + "%{x:.1f}%<extra></extra>",
    } for j, s in enumerate(names)]
    layout = _layout(title=(f"{ds.method.capitalize()} decomposition at {ds.horizon} steps: "
                            "percent of each series' forecast-error variance, by shock"),
                     height=max(280, 110 + 34 * len(names)), barmode="stack",
                     hovermode="closest")
    layout["xaxis"].update(range=[0, 100], ticksuffix="%")
    layout["yaxis"].update(autorange="reversed")
    return {"data": data, "layout": layout}


def health_figure(fits: pl.DataFrame) -> Figure:
    """Spectral radius of each window's companion matrix (stable below 1) and the lag order."""
    fitted = fits.filter(pl.col("skip_reason").is_null())
    skipped = fits.filter(pl.col("skip_reason").is_not_null())
    layout = _layout(title="Model health by window", height=420)
    layout["yaxis"] = {**_AXIS, "domain": [0.40, 1.0], "anchor": "x",
                       "title": {"text": "spectral radius"}, "rangemode": "tozero"}
    layout["xaxis"] = {**_AXIS, "anchor": "y", "showticklabels": False}
    layout["yaxis2"] = {**_AXIS, "domain": [0.0, 0.30], "anchor": "x2",
                        "title": {"text": "lags"}, "rangemode": "tozero", "dtick": 1}
    layout["xaxis2"] = {**_AXIS, "anchor": "y2", "matches": "x"}
    layout["shapes"] = [_hline(1.0, colour=_REFERENCE, dash="dash")]
    layout["annotations"] = [{"text": "stability limit", "xref": "x domain", "x": 0.0,
                              "yref": "y", "y": 1.0, "xanchor": "left", "yanchor": "bottom",
                              "showarrow": False, "font": {"size": 11, "color": _REFERENCE}}]
    data: list[dict[str, Any]] = [{
        "type": "scatter", "x": fitted["window_end"].to_list(),
        "y": fitted["spectral_radius"].to_numpy(), "mode": "lines",
        "line": {"color": _LINE, "width": 1.8}, "name": "spectral radius",
        "hovertemplate": "%{x|%Y-%m-%d}: %{y:.4f}<extra></extra>",
    }]
    if skipped.height:
        data.append({
            "type": "scatter", "x": skipped["window_end"].to_list(), "y": [0.0] * skipped.height,
            "mode": "markers", "marker": {"symbol": "x", "color": _REFERENCE, "size": 8},
            "name": "skipped window", "text": skipped["skip_reason"].to_list(),
            "hovertemplate": "%{x|%Y-%m-%d}: %{text}<extra></extra>",
        })
    data.append({
        "type": "scatter", "x": fitted["window_end"].to_list(), "y": fitted["lags"].to_numpy(),
        "mode": "lines", "line": {"color": PALETTE[2], "width": 1.5, "shape": "hv"},
        "name": "lag order", "xaxis": "x2", "yaxis": "y2",
        "hovertemplate": "%{x|%Y-%m-%d}: p=%{y}<extra></extra>",
    })
    return {"data": data, "layout": layout}
