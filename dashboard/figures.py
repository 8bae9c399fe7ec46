"""Plotly figure builders: arrays and labels in, a plotly figure (as a plain dict) out.

No data access, no Dash. Figures are built as plain ``{"data": [...], "layout": {...}}`` dicts in
plotly.js's schema rather than through ``plotly.graph_objects``: validating a 36-panel grid through
graph objects takes about half a second, the dict a few milliseconds, and dcc.Graph draws both
alike. `plotly.graph_objects.Figure(fig)` accepts every figure built here (the tests check that).

Colours are colour-blind safe: series use the Okabe–Ito palette (Okabe & Ito 2008, "Color
Universal Design"), sequential maps use cividis (Nuñez, Anderton & Renslow 2018), and diverging maps
run blue → white → vermillion from the same Okabe–Ito set. Every axis says what it measures and its
unit.
"""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Sequence
from typing import Any

import numpy as np

__all__ = [
    "DIVERGING",
    "OKABE_ITO",
    "Figure",
    "cycles_figure",
    "granger_figure",
    "health_figure",
    "index_figure",
    "message_figure",
    "network_figure",
    "pairwise_compare_figure",
    "responses_compare_figure",
    "responses_figure",
    "shares_figure",
    "stress_runs",
]

Figure = dict[str, Any]

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
#: Diverging blue → white → vermillion (negative → zero → positive).
DIVERGING = [[0.0, BLUE], [0.5, "#f7f7f7"], [1.0, VERMILLION]]
SEQUENTIAL = "Cividis"
FONT = {"family": "system-ui, -apple-system, Segoe UI, Roboto, sans-serif", "size": 12, "color": "#1b1b1b"}


def colour(i: int) -> str:
    return OKABE_ITO[i % len(OKABE_ITO)]


def _list(values: Any) -> list[Any]:
    """JSON-ready list: NaN/inf become None (a gap), numpy scalars become floats."""
    arr = np.asarray(values, dtype=float).ravel()
    out = arr.tolist()
    if not np.isfinite(arr).all():  # the common all-finite case needs no loop
        out = [v if math.isfinite(v) else None for v in out]
    return out


def _panels(values: np.ndarray) -> list[list[list[Any]]]:
    """(H1, n, n) [h, i, j] → nested lists [i][j] over h, NaN/inf as None (one conversion, not n²)."""
    arr = np.asarray(values, dtype=float)
    out: list[list[list[Any]]] = np.moveaxis(arr, 0, -1).tolist()
    if not np.isfinite(arr).all():
        out = [[[v if math.isfinite(v) else None for v in cell] for cell in row] for row in out]
    return out


def _matrix(z: np.ndarray) -> list[list[Any]]:
    arr = np.asarray(z, dtype=float)
    if np.isfinite(arr).all():
        return arr.tolist()  # type: ignore[no-any-return]
    return [_list(row) for row in arr]


def _dates(values: Sequence[Any]) -> list[str]:
    return [v.isoformat() if isinstance(v, (dt.date, dt.datetime)) else str(v) for v in values]


def _axis(**extra: Any) -> dict[str, Any]:
    base = {"gridcolor": GRID, "zerolinecolor": "#b8bec6", "linecolor": "#8a9099", "automargin": True}
    base.update(extra)
    return base


def _layout(*, height: int, title: str | None = None, **extra: Any) -> dict[str, Any]:
    layout: dict[str, Any] = {
        "font": FONT,
        "height": height,
        "paper_bgcolor": "white",
        "plot_bgcolor": "white",
        "margin": {"l": 60, "r": 20, "t": 60 if title else 30, "b": 40},
        "hoverlabel": {"font": FONT},
        "legend": {"bgcolor": "rgba(255,255,255,0.8)"},
        "colorway": list(OKABE_ITO),
    }
    if title:
        layout["title"] = {"text": title, "x": 0.0, "xanchor": "left", "xref": "paper",
                           "font": {"size": 14}}  # fmt: skip
    layout.update(extra)
    return layout


def _text(text: str, x: float, y: float, **extra: Any) -> dict[str, Any]:
    ann = {"text": text, "x": x, "y": y, "xref": "paper", "yref": "paper", "showarrow": False,
           "font": {"size": 12}}  # fmt: skip
    ann.update(extra)
    return ann


def _grid(
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
    layout: dict[str, Any] = {}
    refs: list[list[tuple[str, str]]] = []
    for r in range(rows):
        row = []
        for c in range(cols):
            k = r * cols + c + 1
            suffix = "" if k == 1 else str(k)
            x0 = c * (w + hgap)
            y1 = 1.0 - r * (h + vgap)
            xa = _axis(domain=[x0, x0 + w], anchor=f"y{suffix}")
            ya = _axis(domain=[max(0.0, y1 - h), y1], anchor=f"x{suffix}")
            if share_x and k > 1:
                xa["matches"] = "x"
            if share_x and r < rows - 1:
                xa["showticklabels"] = False
            if share_y and c > 0:
                ya["matches"] = f"y{r * cols + 1 if r * cols + 1 > 1 else ''}"
                ya["showticklabels"] = False
            layout[f"xaxis{suffix}"] = xa
            layout[f"yaxis{suffix}"] = ya
            row.append((f"x{suffix}", f"y{suffix}"))
        refs.append(row)
    return layout, refs


def _axis_key(ref: str) -> str:
    """ "x3" → "xaxis3", "y" → "yaxis"."""
    return ref[0] + "axis" + ref[1:]


def message_figure(text: str, *, height: int = 300) -> Figure:
    """An empty chart that says why it is empty (no data, bad input, missing snapshot)."""
    return {
        "data": [],
        "layout": _layout(
            height=height,
            xaxis={"visible": False}, yaxis={"visible": False},
            annotations=[_text(text, 0.5, 0.5, font={"size": 14, "color": "#333"})],
        ),
    }  # fmt: skip


# ---------------------------------------------------------------------------------------------
# overview: the connectedness index
# ---------------------------------------------------------------------------------------------


def stress_runs(
    dates: Sequence[dt.date], values: Sequence[float], threshold: float
) -> list[tuple[dt.date, dt.date]]:
    """Maximal runs of consecutive windows with value >= threshold, as (first, last) dates."""
    runs: list[tuple[dt.date, dt.date]] = []
    start: dt.date | None = None
    prev: dt.date | None = None
    for d, v in zip(dates, values, strict=True):
        above = v is not None and math.isfinite(v) and v >= threshold
        if above and start is None:
            start = d
        if not above and start is not None:
            runs.append((start, prev))  # type: ignore[arg-type]
            start = None
        prev = d
    if start is not None and prev is not None:
        runs.append((start, prev))
    return runs


def index_figure(
    dates: Sequence[dt.date],
    totals: Sequence[float],
    *,
    start: dt.date,
    end: dt.date,
    reference_end: dt.date | None,
    threshold: float | None,
    universe: str,
) -> Figure:
    """The total connectedness index (percent) over every stored window, with a range slider.

    The x-range shows the chosen date window; the slider below shows the whole history with the
    window highlighted. Windows whose index is at or above `threshold` (a high quantile of the
    history) are shaded as stress periods; a dashed line marks the window the other views use.
    """
    data: list[dict[str, Any]] = [
        {
            "type": "scatter", "mode": "lines", "name": "total connectedness",
            "x": _dates(dates), "y": _list(totals), "line": {"color": BLUE, "width": 1.8},
            "hovertemplate": "window ending %{x|%Y-%m-%d}<br>index %{y:.1f}%<extra></extra>",
        }
    ]  # fmt: skip
    shapes: list[dict[str, Any]] = []
    if threshold is not None:
        # each run is shaded from half a step before its first window to half a step after its last
        pos = {d: k for k, d in enumerate(dates)}
        for a, b in stress_runs(dates, totals, threshold):
            ia, ib = pos[a], pos[b]
            x0 = a - (a - dates[ia - 1]) / 2 if ia > 0 else a
            x1 = b + (dates[ib + 1] - b) / 2 if ib + 1 < len(dates) else b
            shapes.append({
                "type": "rect", "xref": "x", "yref": "paper", "x0": x0.isoformat(),
                "x1": x1.isoformat(), "y0": 0, "y1": 1, "fillcolor": ORANGE, "opacity": 0.28,
                "line": {"width": 0}, "layer": "below",
            })  # fmt: skip
        data.append({
            "type": "scatter", "mode": "markers", "x": [None], "y": [None],
            "name": f"stress: index ≥ {threshold:.1f}%",
            "marker": {"symbol": "square", "size": 12, "color": ORANGE, "opacity": 0.5},
        })  # fmt: skip
    if reference_end is not None:
        shapes.append({
            "type": "line", "xref": "x", "yref": "paper", "x0": reference_end.isoformat(),
            "x1": reference_end.isoformat(), "y0": 0, "y1": 1,
            "line": {"color": VERMILLION, "dash": "dash", "width": 1.5},
        })  # fmt: skip
        data.append({
            "type": "scatter", "mode": "lines", "x": [None], "y": [None],
            "name": "window the views use", "line": {"color": VERMILLION, "dash": "dash"},
        })  # fmt: skip
    layout = _layout(
        height=270,
        title=f"Total connectedness, {universe} (percent of forecast-error variance from other series)",
        margin={"l": 60, "r": 20, "t": 50, "b": 10},
        legend={"orientation": "h", "y": 1.02, "x": 1.0, "xanchor": "right", "yanchor": "bottom"},
        shapes=shapes,
        xaxis=_axis(
            type="date", range=[start.isoformat(), end.isoformat()],
            rangeslider={"visible": True, "thickness": 0.18},
        ),
        yaxis=_axis(title={"text": "index, %"}, rangemode="tozero"),
        uirevision=f"{universe}|{start}|{end}",  # a new window applies its range; zooms persist otherwise
    )  # fmt: skip
    return {"data": data, "layout": layout}


# ---------------------------------------------------------------------------------------------
# shock paths
# ---------------------------------------------------------------------------------------------


def _shock_titles(names: Sequence[str]) -> list[str]:
    """Column titles of a response grid; wide grids keep just the name so titles never overlap."""
    return [f"shock to {s}" if len(names) <= 5 else s for s in names]


def _grid_titles(refs: list[list[tuple[str, str]]], layout: dict[str, Any],
                 cols: Sequence[str], rows: Sequence[str]) -> list[dict[str, Any]]:
    """Column titles above the top row; row names as the y-axis titles of the first column."""
    anns = []
    for c, label in enumerate(cols):
        dom = layout[_axis_key(refs[0][c][0])]["domain"]
        size = 12 if len(cols) <= 5 else 10
        anns.append(_text(label, (dom[0] + dom[1]) / 2, 1.0, yanchor="bottom", font={"size": size}))
    for r, label in enumerate(rows):
        layout[_axis_key(refs[r][0][1])]["title"] = {"text": label, "font": {"size": 11}, "standoff": 4}
    return anns


def responses_figure(
    response: np.ndarray,
    names: Sequence[str],
    *,
    lower: np.ndarray | None = None,
    upper: np.ndarray | None = None,
    title: str,
    yunit: str,
) -> Figure:
    """Grid of impulse responses: rows are responding series, columns are shocked series.

    response, lower, upper : (H+1, n, n) [horizon, response, shock]. Each panel's response trace
    carries ``meta = [response name, shock name]``.
    """
    H1, n, _ = response.shape
    h = list(range(H1))
    axes, refs = _grid(n, n, hgap=0.035 if n < 6 else 0.025, vgap=0.04, share_x=True)
    data: list[dict[str, Any]] = []
    paths = _panels(response)
    bands = None if lower is None or upper is None else (_panels(lower), _panels(upper))
    for i in range(n):
        for j in range(n):
            xr, yr = refs[i][j]
            first = i == 0 and j == 0
            if bands is not None:
                data.append({
                    "type": "scatter", "x": h + h[::-1],
                    "y": bands[1][i][j] + bands[0][i][j][::-1],
                    "fill": "toself", "fillcolor": "rgba(86,180,233,0.30)", "line": {"width": 0},
                    "name": "band", "legendgroup": "band", "showlegend": first, "hoverinfo": "skip",
                    "xaxis": xr, "yaxis": yr,
                })  # fmt: skip
            data.append({
                "type": "scatter", "mode": "lines", "x": h, "y": paths[i][j],
                "line": {"color": BLUE, "width": 1.6}, "name": "response",
                "legendgroup": "response", "showlegend": first, "meta": [names[i], names[j]],
                "hovertemplate": f"{names[i]} after a shock to {names[j]}<br>h=%{{x}}: %{{y:.4g}}<extra></extra>",
                "xaxis": xr, "yaxis": yr,
            })  # fmt: skip
            axes[_axis_key(yr)].update(zeroline=True, zerolinewidth=1, tickfont={"size": 10},
                                       exponentformat="e")  # fmt: skip
            axes[_axis_key(xr)].update(tickfont={"size": 10})
    for j in range(n):
        axes[_axis_key(refs[n - 1][j][0])]["title"] = {"text": "horizon", "font": {"size": 11}}
    anns = _grid_titles(refs, axes, _shock_titles(names), list(names))
    layout = _layout(
        height=max(380, 70 + 112 * n),
        title=f"{title}<br><span style='font-size:11px;color:#444'>rows: responding series; "
        f"columns: shocked series; units: {yunit}</span>",
        margin={"l": 70, "r": 20, "t": 100, "b": 50},
        legend={"orientation": "h", "x": 1.0, "xanchor": "right", "yanchor": "bottom",
                "yref": "container", "y": 0.99},
        annotations=anns, **axes,
    )  # fmt: skip
    return {"data": data, "layout": layout}


def responses_compare_figure(
    first: np.ndarray, second: np.ndarray, names: Sequence[str], *, labels: tuple[str, str],
    title: str,
) -> Figure:
    """Two response grids (H+1, n, n) overlaid: the first date window solid, the second dashed."""
    H1, n, _ = first.shape
    h = list(range(H1))
    axes, refs = _grid(n, n, hgap=0.035 if n < 6 else 0.025, vgap=0.04, share_x=True)
    data: list[dict[str, Any]] = []
    styles = ({"color": BLUE, "width": 1.6}, {"color": ORANGE, "width": 1.6, "dash": "dash"})
    grids = (_panels(first), _panels(second))
    for i in range(n):
        for j in range(n):
            xr, yr = refs[i][j]
            for k, (arr, label) in enumerate(((grids[0], labels[0]), (grids[1], labels[1]))):
                data.append({
                    "type": "scatter", "mode": "lines", "x": h, "y": arr[i][j],
                    "line": styles[k], "name": label, "legendgroup": str(k),
                    "showlegend": i == 0 and j == 0, "meta": [names[i], names[j]],
                    "hovertemplate": f"{label}<br>{names[i]} ← {names[j]}, h=%{{x}}: %{{y:.4g}}<extra></extra>",
                    "xaxis": xr, "yaxis": yr,
                })  # fmt: skip
            axes[_axis_key(yr)].update(zeroline=True, tickfont={"size": 10}, exponentformat="e")
            axes[_axis_key(xr)].update(tickfont={"size": 10})
    for j in range(n):
        axes[_axis_key(refs[n - 1][j][0])]["title"] = {"text": "horizon", "font": {"size": 11}}
    anns = _grid_titles(refs, axes, _shock_titles(names), list(names))
    layout = _layout(
        height=max(380, 60 + 108 * n), title=title,
        margin={"l": 70, "r": 20, "t": 90, "b": 50},
        legend={"orientation": "h", "x": 1.0, "xanchor": "right", "yanchor": "bottom",
                "yref": "container", "y": 0.99},
        annotations=anns, **axes,
    )  # fmt: skip
    return {"data": data, "layout": layout}


# ---------------------------------------------------------------------------------------------
# variance shares
# ---------------------------------------------------------------------------------------------


def shares_figure(
    panels: Sequence[tuple[str, np.ndarray]], names: Sequence[str], *, title: str
) -> Figure:
    """Stacked horizontal bars, one panel per decomposition: per series, percent from each shock.

    panels : (panel title, (n, n) shares [variable, shock] in percent, rows summing to 100).
    """
    n = len(names)
    axes, refs = _grid(1, len(panels), hgap=0.08, vgap=0.0, share_y=True)
    data: list[dict[str, Any]] = []
    anns = []
    for col, (panel_title, table) in enumerate(panels):
        xr, yr = refs[0][col]
        for j in range(n):
            data.append({
                "type": "bar", "orientation": "h", "y": list(names), "x": _list(table[:, j]),
                "name": f"shock: {names[j]}", "legendgroup": names[j], "showlegend": col == 0,
                "marker": {"color": colour(j), "line": {"color": "white", "width": 0.5}},
                "hovertemplate": f"%{{y}}: %{{x:.1f}}% from {names[j]}<extra></extra>",
                "xaxis": xr, "yaxis": yr,
            })  # fmt: skip
        axes[_axis_key(xr)].update(range=[0, 100], title={"text": "share of forecast-error variance, %"})
        axes[_axis_key(yr)].update(autorange="reversed")
        dom = axes[_axis_key(xr)]["domain"]
        anns.append(_text(panel_title, (dom[0] + dom[1]) / 2, 1.0, yanchor="bottom"))
    axes["yaxis"]["title"] = {"text": "series whose variance is split"}
    layout = _layout(
        height=max(330, 130 + 46 * n), title=title, barmode="stack", annotations=anns,
        legend={"title": {"text": "source of the shock"}, "traceorder": "normal"},
        margin={"l": 60, "r": 20, "t": 120, "b": 40}, **axes,
    )  # fmt: skip
    return {"data": data, "layout": layout}


# ---------------------------------------------------------------------------------------------
# lead–lag
# ---------------------------------------------------------------------------------------------


def _heat_text(z: np.ndarray, fmt: str) -> list[list[str]]:
    return [["" if not np.isfinite(v) else format(v, fmt) for v in row] for row in z]


def granger_figure(
    pvalues: np.ndarray,
    share: np.ndarray,
    names: Sequence[str],
    *,
    level: float,
    window_end: dt.date,
    n_windows: int,
    date_label: str,
) -> Figure:
    """Two heatmaps [caused, causing]: p-values at the window end, and percent of windows significant.

    Cells significant at `level` carry a ★ in the first panel.
    """
    text = [
        ["" if not np.isfinite(v) else f"{v:.3f}{' ★' if v < level else ''}" for v in row]
        for row in pvalues
    ]
    axes, refs = _grid(1, 2, hgap=0.2, vgap=0.0)
    pct = 100.0 * share
    data = [
        {
            "type": "heatmap", "z": _matrix(pvalues), "x": list(names), "y": list(names),
            "zmin": 0, "zmax": 1, "colorscale": SEQUENTIAL, "reversescale": True, "text": text,
            "texttemplate": "%{text}", "colorbar": {"title": {"text": "p-value"}, "x": axes["xaxis"]["domain"][1] + 0.01,
                                              "xanchor": "left", "len": 0.9, "thickness": 12},
            "hovertemplate": "does %{x} lead %{y}?<br>p = %{z:.4f}<extra></extra>",
            "xaxis": refs[0][0][0], "yaxis": refs[0][0][1],
        },
        {
            "type": "heatmap", "z": _matrix(pct), "x": list(names), "y": list(names),
            "zmin": 0, "zmax": 100, "colorscale": SEQUENTIAL,
            "text": [[t + "%" if t else "" for t in row] for row in _heat_text(pct, ".0f")],
            "texttemplate": "%{text}", "colorbar": {"title": {"text": "% of windows"}, "x": 1.01, "xanchor": "left",
                                              "len": 0.9, "thickness": 12},
            "hovertemplate": "%{x} leads %{y} in %{z:.1f}% of windows<extra></extra>",
            "xaxis": refs[0][1][0], "yaxis": refs[0][1][1],
        },
    ]  # fmt: skip
    anns = []
    for col, label in enumerate((
        f"p-value, window ending {window_end}<br>★: p < {level:g}",
        f"% of {n_windows} windows with p < {level:g}<br>{date_label}",
    )):
        xr, yr = refs[0][col]
        axes[_axis_key(xr)].update(title={"text": "leading series (causing)"}, tickangle=-30)
        axes[_axis_key(yr)].update(title={"text": "led series (caused)"}, autorange="reversed")
        dom = axes[_axis_key(xr)]["domain"]
        anns.append(_text(label, (dom[0] + dom[1]) / 2, 1.0, yanchor="bottom"))
    layout = _layout(
        height=max(360, 170 + 48 * len(names)),
        title="Granger causality: does the column series lead the row series?",
        annotations=anns, margin={"l": 60, "r": 20, "t": 100, "b": 40}, **axes,
    )  # fmt: skip
    return {"data": data, "layout": layout}


# ---------------------------------------------------------------------------------------------
# spillover network
# ---------------------------------------------------------------------------------------------


def network_figure(
    table: np.ndarray,
    names: Sequence[str],
    *,
    to_others: np.ndarray,
    from_others: np.ndarray,
    size_by: str,
    title: str,
) -> Figure:
    """Directed graph of net pairwise spillovers on a circle.

    table : (n, n) [target, source] percent. The net spillover from i to j is
    table[j, i] − table[i, j]; an arrow points from the net transmitter to the receiver, its width
    proportional to the size. Node size follows "to others" or "from others"; node colour is the net
    directional spillover (to − from), blue for net receivers, vermillion for net transmitters.
    """
    n = len(names)
    angle = np.pi / 2 - 2 * np.pi * np.arange(n) / n
    xs, ys = np.cos(angle), np.sin(angle)
    pairs = []
    for i in range(n):
        for j in range(i + 1, n):
            net = table[j, i] - table[i, j]
            if np.isfinite(net):
                src, dst = (i, j) if net >= 0 else (j, i)
                pairs.append((src, dst, abs(float(net))))
    biggest = max((p[2] for p in pairs), default=0.0) or 1.0
    anns: list[dict[str, Any]] = []
    mid_x, mid_y, mid_text = [], [], []
    for src, dst, size in pairs:
        # stop the arrow short of the target node's centre
        tx = float(xs[dst] - 0.13 * (xs[dst] - xs[src]))
        ty = float(ys[dst] - 0.13 * (ys[dst] - ys[src]))
        anns.append({
            "x": tx, "y": ty, "ax": float(xs[src]), "ay": float(ys[src]), "xref": "x", "yref": "y",
            "axref": "x", "ayref": "y", "showarrow": True, "arrowhead": 2, "arrowsize": 0.8,
            "arrowwidth": 0.8 + 7.0 * size / biggest, "text": "",
            "arrowcolor": f"rgba(40,40,40,{0.25 + 0.6 * size / biggest:.2f})",
        })  # fmt: skip
        mid_x.append(0.5 * (float(xs[src]) + tx))
        mid_y.append(0.5 * (float(ys[src]) + ty))
        mid_text.append(f"{names[src]} → {names[dst]}: net {size:.2f} pp")
    sizes = np.nan_to_num(np.asarray(to_others if size_by == "to" else from_others, dtype=float))
    top = float(sizes.max()) if sizes.size and sizes.max() > 0 else 1.0
    net = np.asarray(to_others, dtype=float) - np.asarray(from_others, dtype=float)
    lim = float(np.nanmax(np.abs(net))) if net.size and np.isfinite(net).any() else 1.0
    lim = lim or 1.0
    data = [
        {
            "type": "scatter", "mode": "markers", "x": mid_x, "y": mid_y, "text": mid_text,
            "marker": {"size": 12, "opacity": 0}, "hovertemplate": "%{text}<extra></extra>",
            "showlegend": False, "name": "pairs",
        },
        {
            "type": "scatter", "mode": "markers+text", "x": _list(xs), "y": _list(ys),
            "text": list(names), "textposition": "top center", "textfont": {"size": 13},
            "marker": {
                "size": _list(22 + 38 * sizes / top), "color": _list(net), "cmin": -lim, "cmax": lim,
                "colorscale": DIVERGING, "line": {"color": "#333", "width": 1},
                "colorbar": {"title": {"text": "net, pp<br>(to − from)"}},
            },
            "customdata": [[float(a), float(b), float(c)] for a, b, c in zip(to_others, from_others, net, strict=True)],
            "hovertemplate": (
                "%{text}<br>to others %{customdata[0]:.1f}%<br>from others %{customdata[1]:.1f}%"
                "<br>net %{customdata[2]:+.1f} pp<extra></extra>"
            ),
            "showlegend": False, "name": "series",
        },
    ]  # fmt: skip
    anns.append(_text(
        "arrow: net transmitter → receiver, width ∝ net spillover; node size: spillover "
        f"{'to' if size_by == 'to' else 'from'} others", 0.0, 0.0, xanchor="left", yanchor="top",
        font={"size": 11, "color": "#444"},
    ))  # fmt: skip
    layout = _layout(
        height=540, title=title, annotations=anns,
        xaxis={"visible": False, "range": [-1.45, 1.45]},
        yaxis={"visible": False, "range": [-1.3, 1.35], "scaleanchor": "x", "scaleratio": 1},
    )  # fmt: skip
    return {"data": data, "layout": layout}


# ---------------------------------------------------------------------------------------------
# window comparison
# ---------------------------------------------------------------------------------------------


def pairwise_compare_figure(
    first: np.ndarray, second: np.ndarray, names: Sequence[str], *, labels: tuple[str, str]
) -> Figure:
    """Three heatmaps [target, source] in percent: first window, second window, second − first."""
    diff = second - first
    lim = float(np.nanmax(np.abs(diff))) if np.isfinite(diff).any() else 1.0
    lim = lim or 1.0
    both = np.concatenate([first.ravel(), second.ravel()])
    top = float(np.nanmax(both)) if np.isfinite(both).any() else 100.0
    axes, refs = _grid(1, 3, hgap=0.14, vgap=0.0)
    data = []
    anns = []
    specs = (
        (first, SEQUENTIAL, 0.0, top, axes["xaxis"]["domain"][1] + 0.005, ".1f", "%", f"A: {labels[0]}"),
        (second, SEQUENTIAL, 0.0, top, axes["xaxis2"]["domain"][1] + 0.005, ".1f", "%", f"B: {labels[1]}"),
        (diff, DIVERGING, -lim, lim, 1.005, "+.1f", "pp", "change B − A, pp"),
    )
    for col, (z, scale, zmin, zmax, cb_x, fmt, unit, label) in enumerate(specs):
        xr, yr = refs[0][col]
        data.append({
            "type": "heatmap", "z": _matrix(z), "x": list(names), "y": list(names),
            "zmin": zmin, "zmax": zmax, "colorscale": scale, "text": _heat_text(z, fmt),
            "texttemplate": "%{text}", "colorbar": {"x": cb_x, "xanchor": "left", "len": 0.9, "thickness": 10,
                                                    "title": {"text": unit}},
            "hovertemplate": "%{y} ← %{x}: %{z:.2f}<extra></extra>", "xaxis": xr, "yaxis": yr,
        })  # fmt: skip
        axes[_axis_key(yr)].update(autorange="reversed")
        axes[_axis_key(xr)].update(tickangle=-30)
        dom = axes[_axis_key(xr)]["domain"]
        anns.append(_text(label, (dom[0] + dom[1]) / 2, 1.0, yanchor="bottom"))
    axes["yaxis"]["title"] = {"text": "receiving series (target)"}
    axes["xaxis2"]["title"] = {"text": "sending series (source)"}
    layout = _layout(
        height=max(360, 160 + 45 * len(names)),
        title="Pairwise spillovers averaged over each date window (% of the target's forecast-error variance)",
        annotations=anns, margin={"l": 60, "r": 20, "t": 80, "b": 40}, **axes,
    )  # fmt: skip
    return {"data": data, "layout": layout}


# ---------------------------------------------------------------------------------------------
# model health
# ---------------------------------------------------------------------------------------------


def _hline(y: float, xref: str, yref: str, colour_: str, dash: str) -> dict[str, Any]:
    return {"type": "line", "xref": f"{xref} domain", "x0": 0, "x1": 1, "yref": yref, "y0": y,
            "y1": y, "line": {"color": colour_, "dash": dash, "width": 1}}  # fmt: skip


def health_figure(
    ends: Sequence[dt.date],
    lags: Sequence[float | None],
    radius: Sequence[float | None],
    portmanteau: Sequence[float | None],
    nobs: Sequence[float | None],
    *,
    skipped: Sequence[tuple[dt.date, str]],
    near_one: float,
    title: str,
) -> Figure:
    """Four stacked panels over window ends: lag order, spectral radius, residual-test p, observations.

    Spectral radii at or above `near_one` are drawn orange, at or above one vermillion (and ringed);
    skipped windows appear as ✕ on the lag-order panel with their reason on hover.
    """
    axes, refs = _grid(4, 1, hgap=0.0, vgap=0.07, share_x=True)
    (x1, y1), (x2, y2), (x3, y3), (x4, y4) = (r[0] for r in refs)
    x = _dates(ends)
    r = np.array([np.nan if v is None else float(v) for v in radius])
    colours = [VERMILLION if v >= 1 else ORANGE if v >= near_one else BLUE for v in np.nan_to_num(r)]
    flagged = [(d, v) for d, v in zip(x, r, strict=True) if np.isfinite(v) and v >= near_one]
    data: list[dict[str, Any]] = [
        {"type": "scatter", "mode": "lines", "x": x, "y": _list([np.nan if v is None else v for v in lags]),
         "line": {"shape": "hv", "color": BLUE}, "name": "lag order", "showlegend": False,
         "hovertemplate": "%{x|%Y-%m-%d}: p = %{y}<extra></extra>", "xaxis": x1, "yaxis": y1},
        {"type": "scatter", "mode": "lines+markers", "x": x, "y": _list(r),
         "line": {"color": "#9ecae1", "width": 1}, "marker": {"color": colours, "size": 5},
         "name": "spectral radius", "showlegend": False,
         "hovertemplate": "%{x|%Y-%m-%d}: %{y:.4f}<extra></extra>", "xaxis": x2, "yaxis": y2},
        {"type": "scatter", "mode": "markers", "x": [d for d, _ in flagged],
         "y": [float(v) for _, v in flagged], "name": f"radius ≥ {near_one:g} ({len(flagged)})",
         "marker": {"color": VERMILLION, "size": 9, "symbol": "diamond-open"},
         "hovertemplate": "%{x|%Y-%m-%d}: radius %{y:.4f}<extra></extra>", "xaxis": x2, "yaxis": y2},
        {"type": "scatter", "mode": "markers", "x": x,
         "y": _list([np.nan if v is None else v for v in portmanteau]),
         "marker": {"color": GREEN, "size": 4}, "name": "p-value", "showlegend": False,
         "hovertemplate": "%{x|%Y-%m-%d}: p = %{y:.3f}<extra></extra>", "xaxis": x3, "yaxis": y3},
        {"type": "scatter", "mode": "lines", "x": x, "y": _list([np.nan if v is None else v for v in nobs]),
         "line": {"color": PURPLE}, "name": "observations", "showlegend": False,
         "hovertemplate": "%{x|%Y-%m-%d}: %{y} rows<extra></extra>", "xaxis": x4, "yaxis": y4},
    ]  # fmt: skip
    if skipped:
        data.append({
            "type": "scatter", "mode": "markers", "x": _dates([d for d, _ in skipped]),
            "y": [0] * len(skipped), "text": [reason for _, reason in skipped],
            "marker": {"symbol": "x", "size": 10, "color": VERMILLION},
            "name": f"skipped window ({len(skipped)})",
            "hovertemplate": "%{x|%Y-%m-%d} skipped: %{text}<extra></extra>", "xaxis": x1, "yaxis": y1,
        })  # fmt: skip
    anns = []
    for (_xr, yr), label in zip(
        (r[0] for r in refs),
        ("lag order p", "spectral radius of the companion matrix (≥ 1: not stationary)",
         "residual autocorrelation test, p-value (portmanteau)", "observations in the window"),
        strict=True,
    ):
        dom = axes[_axis_key(yr)]["domain"]
        anns.append(_text(label, 0.0, dom[1], xanchor="left", yanchor="bottom", font={"size": 12}))
    axes[_axis_key(y1)].update(title={"text": "lags"}, rangemode="tozero")
    axes[_axis_key(y2)].update(title={"text": "radius"})
    axes[_axis_key(y3)].update(title={"text": "p"}, range=[0, 1])
    axes[_axis_key(y4)].update(title={"text": "rows"}, rangemode="tozero")
    axes[_axis_key(x4)].update(title={"text": "window end (date)"}, type="date")
    for xr in (x1, x2, x3):
        axes[_axis_key(xr)]["type"] = "date"
    shapes = [
        _hline(1.0, x2, y2, VERMILLION, "dash"),
        _hline(near_one, x2, y2, ORANGE, "dot"),
        _hline(0.05, x3, y3, GREY, "dot"),
    ]
    layout = _layout(
        height=660, title=title, annotations=anns, shapes=shapes,
        legend={"orientation": "h", "x": 1.0, "xanchor": "right", "yanchor": "bottom",
                "yref": "container", "y": 0.99},
        margin={"l": 60, "r": 20, "t": 80, "b": 40}, **axes,
    )  # fmt: skip
    return {"data": data, "layout": layout}


# ---------------------------------------------------------------------------------------------
# own cycles
# ---------------------------------------------------------------------------------------------


def cycles_figure(
    frequencies: np.ndarray,
    spectra: Sequence[tuple[str, np.ndarray, float | None]],
    *,
    title: str,
) -> Figure:
    """Each series' AR spectral density against frequency, with its dominant cycle marked.

    frequencies : (F,) in cycles per observation, 0..0.5.
    spectra : (name, (F,) density divided by the series' variance, peak period or None). On this
    scale white noise is flat at 1/(2π) (drawn dashed) whatever the series' units, so series of
    different units share one axis.
    """
    freqs = np.asarray(frequencies, dtype=float)
    periods = [None if f <= 0 else 1.0 / f for f in freqs]
    data: list[dict[str, Any]] = []
    for k, (name, density, period) in enumerate(spectra):
        data.append({
            "type": "scatter", "mode": "lines", "x": _list(freqs), "y": _list(density), "name": name,
            "line": {"color": colour(k), "width": 1.8}, "customdata": periods, "meta": [name],
            "hovertemplate": (
                f"{name}<br>%{{x:.3f}} cycles/obs (period %{{customdata:.1f}} obs)"
                "<br>density %{y:.3g}<extra></extra>"
            ),
        })  # fmt: skip
        if period is not None and period > 0:
            f = 1.0 / period
            y = float(np.interp(f, freqs, np.asarray(density, dtype=float)))
            data.append({
                "type": "scatter", "mode": "markers", "x": [f], "y": [y],
                "marker": {"color": colour(k), "size": 12, "symbol": "star",
                           "line": {"color": "#333", "width": 1}},
                "name": f"{name}: cycle of {period:.1f} obs",
                "hovertemplate": f"{name}: dominant cycle {period:.1f} observations<extra></extra>",
            })  # fmt: skip
    white = 1.0 / (2.0 * np.pi)
    data.append({
        "type": "scatter", "mode": "lines", "x": [0.0, 0.5], "y": [white, white],
        "line": {"color": GREY, "dash": "dash", "width": 1}, "name": "white noise (no dynamics)",
        "hoverinfo": "skip",
    })  # fmt: skip
    layout = _layout(
        height=470, title=title,
        xaxis=_axis(title={"text": "frequency (cycles per observation; period = 1 / frequency)"},
                    range=[0, 0.5]),
        yaxis=_axis(title={"text": "spectral density ÷ variance (log scale)"}, type="log"),
    )  # fmt: skip
    return {"data": data, "layout": layout}
