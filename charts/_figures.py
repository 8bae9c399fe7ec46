"""Figure builders: arrays and labels in, a plotly figure (as a plain dict) out.

No data access, no Dash, no files. Figures are plain ``{"data": [...], "layout": {...}}`` dicts
in plotly.js's schema rather than ``plotly.graph_objects``: validating a 36-panel grid through
graph objects takes about half a second, the dict a few milliseconds, and both dcc.Graph and
``plotly.io.to_html(..., validate=False)`` draw them alike. `plotly.graph_objects.Figure(fig)`
accepts every figure built here (the tests check that).

The dashboard and the HTML report call the same builders; ``medium="print"`` adapts a figure to
the report (no range slider, legend under the plot; a shock-path grid with a subplot and y axis
per panel, where the screen draws the grid on one pair of axes, see `_cell_grid`). Styles come from `charts._theme`: a series
keeps one colour, dash and marker wherever it appears (its position in the universe). Every axis
says what it measures and its unit.
"""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Sequence
from typing import Any

import numpy as np

from . import _theme as th
from ._theme import (
    BAND_FILL,
    BLUE,
    DIVERGING,
    GREEN,
    GREY,
    ORANGE,
    PURPLE,
    SEQUENTIAL,
    SIGNIFICANCE_MARK,
    VERMILLION,
    Figure,
    Medium,
    series_style,
)

__all__ = [
    "MODEL_LABELS",
    "band_index_figure",
    "band_label",
    "band_net_figure",
    "band_pairs_figure",
    "cycles_figure",
    "granger_figure",
    "health_figure",
    "index_figure",
    "joint_band_figure",
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
    "shares_figure",
    "stress_runs",
    "tightness_figure",
]


def message_figure(text: str, *, height: int = 300) -> Figure:
    """An empty chart that says why it is empty (no data, bad input, missing snapshot)."""
    return {
        "data": [],
        "layout": th.layout(
            height=height,
            xaxis={"visible": False}, yaxis={"visible": False},
            annotations=[th.text(text, 0.5, 0.5, font={"size": 14, "color": "#333"})],
        ),
    }  # fmt: skip


# ---------------------------------------------------------------------------------------------
# overview: the connectedness index
# ---------------------------------------------------------------------------------------------


def stress_runs(
    dates: Sequence[dt.date], values: Sequence[float] | np.ndarray, threshold: float
) -> list[tuple[dt.date, dt.date]]:
    """Maximal runs of consecutive windows with value >= threshold, as (first, last) dates."""
    runs: list[tuple[dt.date, dt.date]] = []
    start: dt.date | None = None
    prev: dt.date | None = None
    for d, v in zip(dates, values, strict=True):
        above = v is not None and math.isfinite(v) and v >= threshold
        if above and start is None:
            start = d
        if not above and start is not None and prev is not None:  # prev is set whenever start is
            runs.append((start, prev))
            start = None
        prev = d
    if start is not None and prev is not None:
        runs.append((start, prev))
    return runs


def index_figure(
    dates: Sequence[dt.date],
    totals: Sequence[float] | np.ndarray,
    *,
    start: dt.date | None = None,
    end: dt.date | None = None,
    reference_end: dt.date | None = None,
    threshold: float | None = None,
    universe: str,
    horizon: int | None = None,
    model: str | None = None,
    medium: Medium = "screen",
) -> Figure:
    """The total connectedness index (percent) over every stored window.

    `model` ("rolling" or "tvp"), when given, is said in the title: a TVP universe's index is one
    value per filtered date, not per window.

    On screen the x-range shows the chosen date window (`start`..`end`) and a range slider below
    shows the whole history. Windows whose index is at or above `threshold` (a high quantile of
    the history) are shaded as stress periods; a dashed line marks `reference_end`, the window the
    other views use. `horizon` is the forecast horizon the stored index was computed at (the
    universe's own), said in the title.
    """
    screen = medium == "screen"
    data: list[dict[str, Any]] = [
        {
            "type": "scatter", "mode": "lines" if screen or len(dates) > 40 else "lines+markers",
            "name": "total connectedness",
            "x": th.dates(dates), "y": th.as_list(totals), "line": {"color": BLUE, "width": 1.8},
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
    at = f", {horizon}-step horizon" if horizon is not None else ""
    title = f"Total connectedness, {universe}{at}" + (f" · {MODEL_LABELS.get(model, model)}" if model else "")
    subtitle = "% of forecast-error variance from other series" + (
        f" · stored at the universe's {horizon}-step horizon; the horizon setting below does not "
        "change it" if horizon is not None and screen else ""
    )
    xaxis = th.axis(type="date")
    if screen:
        if start is not None and end is not None:
            xaxis["range"] = [start.isoformat(), end.isoformat()]
        xaxis["rangeslider"] = {"visible": True, "thickness": 0.18}
    else:
        xaxis["title"] = {"text": "window end (date)"}
    layout = th.layout(
        height=300 if screen else 340, title=title, subtitle=subtitle, medium=medium,
        margin={"l": 60, "r": 20, "t": 82, "b": 10 if screen else 50},
        showlegend=len(data) > 1,
        # the legend sits in the row between the subtitle and the plot, never over either
        legend={"orientation": "h", "y": 1.0, "x": 1.0, "xanchor": "right", "yanchor": "bottom",
                "font": {"size": 11}},
        shapes=shapes, xaxis=xaxis,
        yaxis=th.axis(title={"text": "index, %"}, rangemode="tozero"),
    )  # fmt: skip
    layout["title"].update(yref="container", y=1.0, yanchor="top", pad={"t": 10})
    if screen:  # a new window applies its range; zooms persist otherwise
        layout["uirevision"] = f"{universe}|{start}|{end}"
    return {"data": data, "layout": layout}


def net_figure(
    dates: Sequence[dt.date], net: np.ndarray, names: Sequence[str], *, medium: Medium = "screen"
) -> Figure:
    """Net directional connectedness (to others − from others, percentage points) per series.

    net : (W, n) [window, series], one row per window end in `dates`. Each series keeps its own
    style (`series_style` of its position).
    """
    x = th.dates(dates)
    arr = np.asarray(net, dtype=float)
    data = []
    for i, s in enumerate(names):
        style = series_style(i)
        data.append({
            "type": "scatter", "x": x, "y": th.as_list(arr[:, i]), "mode": "lines", "name": s,
            "line": {"color": style["color"], "dash": style["dash"], "width": 1.6}, "meta": [s],
            "hovertemplate": f"{s}: " + "%{y:.2f} pp<extra></extra>",
        })  # fmt: skip
    layout = th.layout(
        height=360, title="Net transmitter (+) or receiver (−), by series", medium=medium,
        shapes=[{"type": "line", "xref": "x domain", "x0": 0, "x1": 1, "yref": "y", "y0": 0, "y1": 0,
                 "line": {"color": GREY, "width": 1}}],
        legend={"orientation": "h", "x": 0.0, "xanchor": "left", "yref": "container", "y": 0.0,
                "yanchor": "bottom"},
        margin={"l": 60, "r": 20, "t": 50, "b": 90},
        xaxis=th.axis(type="date"), yaxis=th.axis(title={"text": "net, percentage points"}),
    )  # fmt: skip
    return {"data": data, "layout": layout}


# ---------------------------------------------------------------------------------------------
# shock paths
# ---------------------------------------------------------------------------------------------

#: Gap between panels of a response grid (paper fraction): room for the right panel's y-tick labels.
GRID_HGAP = 0.06
#: Legend under a response grid, in the figure's bottom margin (never above the figure, where the
#: page's controls are).
_BOTTOM_LEGEND = {"orientation": "h", "x": 0.0, "xanchor": "left", "yref": "container", "y": 0.0,
                  "yanchor": "bottom"}


def _grid_titles(refs: list[list[tuple[str, str]]], layout: dict[str, Any],
                 cols: Sequence[str], rows: Sequence[str]) -> list[dict[str, Any]]:
    """Column titles (the shocked series' names) above the top row; row names as the y-axis
    titles of the first column. Every grid titles its columns the same way, whatever its size."""
    anns = []
    size = 12 if len(cols) <= 5 else 10
    for c, label in enumerate(cols):
        dom = layout[th.axis_key(refs[0][c][0])]["domain"]
        anns.append(th.text(label, (dom[0] + dom[1]) / 2, 1.0, yanchor="bottom", font={"size": size}))
    for r, label in enumerate(rows):
        layout[th.axis_key(refs[r][0][1])]["title"] = {"text": label, "font": {"size": 11}, "standoff": 4}
    return anns


def _panel_axes(axes: dict[str, Any], xr: str, yr: str) -> None:
    """Compact ticks so a panel's y labels fit the gap to its left neighbour."""
    axes[th.axis_key(yr)].update(zeroline=True, zerolinewidth=1, tickfont={"size": 9}, nticks=4,
                                 exponentformat="e", showexponent="all")  # fmt: skip
    axes[th.axis_key(xr)].update(tickfont={"size": 9})


# The screen's grid: every panel a cell of ONE pair of axes. Drawing a 9 × 9 grid as 81 subplots
# (162 axes) kept chromium busy for 0.4–1.3 s; the same panels as cells of one axis pair, with the
# cells' curves merged into a few NaN-separated traces, draw in a tenth of that. A cell maps its
# own value range onto its unit height (scale per panel: a response's shape stays readable however
# small it is next to the own-shock response of its row) and says that range above itself.

#: Gaps between the cells of a one-axis grid: between columns in cell widths, between rows in
#: cell heights (room for the scale label above each cell).
CELL_GAP_X = 0.16
CELL_GAP_Y = 0.30
#: A cell's background and its zero line.
CELL_FILL = "#f3f5f8"
CELL_ZERO = "#9aa2ac"
#: How a one-axis grid's scale reads, for its subtitle.
#: Margins (px) beside the labels that plotly's automargin would add on its own: a chart asking
#: for less is widened by automargin, and each widening redraws it whole (a first draw of the
#: Compare windows heatmaps ran ~2× longer). Measured in chromium on the demo and on labels of 2
#: to 24 characters: the heatmaps' left margin is the widest name + 34 px (the axis title and
#: padding), their bottom is the half of it the −30° tick labels stand + 48 px (the axis title),
#: their right margin the change's colour bar; a grid's left margin is its widest row name + 13 px.
#: Two px more than measured, so a rounding never triggers a widening.
PAIRS_PAD_LEFT = 36
PAIRS_PAD_BOTTOM = 50
PAIRS_PAD_RIGHT = 76
CELL_PAD_LEFT = 15
CELL_SCALE_NOTE = "each panel on its own scale: bottom…top edge printed above it; hover for values"


def _cell_ranges(values: Sequence[np.ndarray]) -> tuple[np.ndarray, np.ndarray]:
    """Per cell (n, m) of arrays (H+1, n, m): the range its panel is drawn on — round numbers
    (multiples of a step of 1, 2 or 5 × 10^k, about a fifth of the span) at or below the lowest
    value and zero, at or above the highest value and zero. A cell of zeros spans −1 to 1."""
    stack = np.concatenate([np.asarray(v, dtype=float) for v in values])
    stack = np.where(np.isfinite(stack), stack, np.nan)
    lo = np.fmin(np.fmin.reduce(stack, axis=0), 0.0)  # fmin skips NaN: an all-NaN cell gives 0
    hi = np.fmax(np.fmax.reduce(stack, axis=0), 0.0)
    flat = hi - lo <= 0
    lo, hi = np.where(flat, -1.0, lo), np.where(flat, 1.0, hi)
    raw = (hi - lo) / 5.0
    power = 10.0 ** np.floor(np.log10(raw))
    f = raw / power
    step = np.where(f <= 1.0, 1.0, np.where(f <= 2.0, 2.0, np.where(f <= 5.0, 5.0, 10.0))) * power
    return np.floor(lo / step + 1e-9) * step, np.ceil(hi / step - 1e-9) * step  # 1e-9: float noise


def _short(v: float) -> str:
    """A cell's range end: three significant digits, a true minus sign, a short exponent."""
    text = f"{v + 0.0:.3g}".replace("e-0", "e-").replace("e+0", "e").replace("e+", "e")
    return text.replace("-", "−")


def _with_gaps(values: np.ndarray) -> list[Any]:
    """(n, m, k) positions → one flat list, cell after cell, each cell's k points then a gap
    (None). Rounded to 1e-4 of a cell (under a pixel): positions, not values, and fewer bytes."""
    n, m, _ = values.shape
    return th.as_list(np.round(np.concatenate([values, np.full((n, m, 1), np.nan)], axis=2), 4))


def _cell_grid(
    curves: Sequence[tuple[str, np.ndarray, dict[str, Any], str]],
    rows: Sequence[str],
    cols: Sequence[str],
    *,
    band: tuple[np.ndarray, np.ndarray] | None = None,
    band_label: str = "band",
) -> tuple[list[dict[str, Any]], dict[str, Any], list[dict[str, Any]]]:
    """Traces, axes and column titles of a rows × cols grid of panels drawn on one pair of axes.

    curves : (name, values (H+1, rows, cols), line style, hover text) — one trace each, cell after
    cell (row-major), cells separated by a gap; each point's customdata is ``[row name, column
    name, horizon, true value]``, followed by the band's ``lower, upper`` for the first curve when
    `band` (lower, upper) is given. The band is one filled trace (a polygon per cell, upper then
    lower reversed). Under them: one trace of cell backgrounds, one of zero lines; over them one
    text trace with each cell's range (`_cell_ranges`). Rows are named by the y-axis tick labels,
    columns by annotations above the top row (the titles every grid has, on screen and in print).
    """
    H1, n, m = curves[0][1].shape
    H = H1 - 1
    w = max(H, 1)
    xb = np.arange(m) * w * (1 + CELL_GAP_X)  # left edge of each column's cells
    yb = (n - 1 - np.arange(n)) * (1 + CELL_GAP_Y)  # bottom edge of each row's cells (row 0 on top)
    drawn = [c[1] for c in curves] + (list(band) if band is not None else [])
    lo, hi = _cell_ranges(drawn)
    span = hi - lo

    def scaled(values: np.ndarray) -> np.ndarray:
        """(H+1, n, m) true values → (n, m, H+1) heights on the shared y axis."""
        return np.moveaxis((np.asarray(values, dtype=float) - lo) / span, 0, -1) + yb[:, None, None]

    hs = np.arange(H1, dtype=float)
    xs = np.broadcast_to(xb[None, :, None] + hs, (n, m, H1))
    corner = np.broadcast_to(xb[None, :], (n, m))
    bottom = np.broadcast_to(yb[:, None], (n, m))
    data: list[dict[str, Any]] = [{
        "type": "scatter", "mode": "lines", "fill": "toself", "fillcolor": CELL_FILL, "line": {"width": 0},
        "x": _with_gaps(np.stack([corner, corner + w, corner + w, corner, corner], axis=2)),
        "y": _with_gaps(np.stack([bottom, bottom, bottom + 1, bottom + 1, bottom], axis=2)),
        "hoverinfo": "skip", "showlegend": False, "name": "panels",
    }]  # fmt: skip
    if band is not None:
        upper, lower = scaled(band[1]), scaled(band[0])
        data.append({
            "type": "scatter", "mode": "lines", "fill": "toself", "fillcolor": BAND_FILL, "line": {"width": 0},
            "x": _with_gaps(np.concatenate([xs, xs[:, :, ::-1]], axis=2)),
            "y": _with_gaps(np.concatenate([upper, lower[:, :, ::-1]], axis=2)),
            "name": band_label, "legendgroup": "band", "hoverinfo": "skip",
        })  # fmt: skip
    zero = bottom - lo / span
    data.append({
        "type": "scatter", "mode": "lines", "line": {"color": CELL_ZERO, "width": 1},
        "x": _with_gaps(np.stack([corner, corner + w], axis=2)), "y": _with_gaps(np.stack([zero, zero], axis=2)),
        "hoverinfo": "skip", "showlegend": False, "name": "zero",
    })  # fmt: skip
    extra = None if band is None else (th.panels(band[0]), th.panels(band[1]))
    for k, (name, values, line, hover) in enumerate(curves):
        true = th.panels(values)
        custom: list[Any] = []
        for i in range(n):
            for c in range(m):
                cell = true[i][c]
                if k == 0 and extra is not None:
                    lows, highs = extra[0][i][c], extra[1][i][c]
                    custom += [[rows[i], cols[c], h, cell[h], lows[h], highs[h]] for h in range(H1)]
                else:
                    custom += [[rows[i], cols[c], h, cell[h]] for h in range(H1)]
                custom.append(None)
        band_hover = f"<br>{band_label}: %{{customdata[4]:.4g}} to %{{customdata[5]:.4g}}" if k == 0 and extra else ""
        data.append({
            "type": "scatter", "mode": "lines", "x": _with_gaps(xs), "y": _with_gaps(scaled(values)),
            "customdata": custom, "line": line, "name": name, "legendgroup": name,
            "hovertemplate": hover + band_hover + "<extra></extra>",
        })  # fmt: skip
    data.append({
        "type": "scatter", "mode": "text", "x": th.as_list(corner + w), "y": th.as_list(bottom + 1),
        "text": [f"{_short(a)}…{_short(b)}" for a, b in zip(lo.ravel().tolist(), hi.ravel().tolist(), strict=True)],
        "textposition": "top left", "textfont": {"size": 9 if m <= 9 else 8, "color": "#555"},
        "hoverinfo": "skip", "showlegend": False, "name": "scales",
    })  # fmt: skip
    ticks = sorted({0, H // 2, H}) if H >= 4 else list(range(H1))
    axes = {
        "xaxis": th.axis(
            range=[-w * CELL_GAP_X / 2, float(xb[-1]) + w * (1 + CELL_GAP_X / 2)], showgrid=False, zeroline=False,
            tickvals=[float(x) + t for x in xb for t in ticks], ticktext=[str(t) for _ in xb for t in ticks],
            tickfont={"size": 9}, title={"text": "horizon", "font": {"size": 11}},
        ),
        "yaxis": th.axis(
            range=[-CELL_GAP_Y / 4, float(yb[0]) + 1 + CELL_GAP_Y], showgrid=False, zeroline=False, showline=False,
            tickvals=[float(y) + 0.5 for y in yb], ticktext=list(rows), ticks="", tickfont={"size": 11},
        ),
    }  # fmt: skip
    size = 12 if m <= 5 else 10
    anns = [th.text(label, float(x) + w / 2, 1.0, xref="x", yanchor="bottom", font={"size": size})
            for label, x in zip(cols, xb, strict=True)]  # fmt: skip
    return data, axes, anns


def _cell_layout(height: int, title: str, subtitle: str, axes: dict[str, Any],
                 anns: list[dict[str, Any]]) -> dict[str, Any]:
    """Layout of a one-axis grid: its title hangs from the top of the figure and the top margin
    grows with the title's lines, so a long subtitle (a 40-series Cholesky order) never runs into
    the column titles under it."""
    layout = th.layout(height=height, title=title, subtitle=subtitle, legend=_BOTTOM_LEGEND,
                       annotations=anns, **axes)  # fmt: skip
    lines = layout["title"]["text"].count("<br>")  # beyond the first
    layout["title"].update(yref="container", y=1.0, yanchor="top", pad={"t": 14})
    # the row names' width, so that plotly's automargin has nothing to widen (`PAIRS_PAD_LEFT`)
    rows = axes["yaxis"].get("ticktext") or []
    widest = max((th.text_px(str(r), axes["yaxis"]["tickfont"]["size"]) for r in rows), default=0.0)
    left = max(20, math.ceil(widest + CELL_PAD_LEFT))
    layout["margin"] = {"l": left, "r": 20, "t": 14 + 22 + 19 * lines + 22, "b": 80}
    return layout


def responses_figure(
    response: np.ndarray,
    names: Sequence[str],
    *,
    lower: np.ndarray | None = None,
    upper: np.ndarray | None = None,
    shocks: Sequence[int] | None = None,
    title: str,
    subtitle: str | None = None,
    yunit: str,
    band_label: str = "band",
    medium: Medium = "screen",
) -> Figure:
    """Grid of impulse responses: rows are responding series, columns are shocked series.

    response, lower, upper : (H+1, n, n) [horizon, response, shock]. `shocks` picks the columns
    (all by default; the report draws one figure per shock for wide universes).

    On screen the grid is drawn on ONE pair of axes (`_cell_grid`): each panel a cell with its own
    scale, one trace for every response, one for every band. Each point's ``customdata`` is
    ``[response name, shock name, horizon, value]`` (plus ``lower, upper`` with a band): the true
    values, which hover shows. In print each panel is a subplot of its own with its own y axis
    (a static page has no hover: its ticks are the only way to read a value); each panel's
    response trace carries ``meta = [response name, shock name]`` and a band is one filled trace
    per panel (upper, then lower reversed) named `band_label`.
    """
    H1, n, _ = response.shape
    cols = list(range(n)) if shocks is None else [int(j) for j in shocks]
    if medium == "screen":
        band = None if lower is None or upper is None else (lower[:, :, cols], upper[:, :, cols])
        data, axes, anns = _cell_grid(
            [("response", response[:, :, cols], {"color": BLUE, "width": 1.6},
              "%{customdata[0]} after a shock to %{customdata[1]}<br>h=%{customdata[2]}: %{customdata[3]:.4g}")],
            list(names), [names[j] for j in cols], band=band, band_label=band_label,
        )  # fmt: skip
        sub = ((subtitle + "; " if subtitle else "")
               + f"rows: responding series; columns: shock to the series named above; units: {yunit}; {CELL_SCALE_NOTE}")  # fmt: skip
        return {"data": data, "layout": _cell_layout(max(380, 110 + 112 * n), title, sub, axes, anns)}
    h = list(range(H1))
    axes, refs = th.grid(n, len(cols), hgap=GRID_HGAP, vgap=0.04, share_x=True)
    data = []
    paths = th.panels(response)
    bands = None if lower is None or upper is None else (th.panels(lower), th.panels(upper))
    for i in range(n):
        for c, j in enumerate(cols):
            xr, yr = refs[i][c]
            first = i == 0 and c == 0
            if bands is not None:
                data.append({
                    "type": "scatter", "x": h + h[::-1],
                    "y": bands[1][i][j] + bands[0][i][j][::-1],
                    "fill": "toself", "fillcolor": BAND_FILL, "line": {"width": 0},
                    "name": band_label, "legendgroup": "band", "showlegend": first, "hoverinfo": "skip",
                    "meta": [names[i], names[j]], "xaxis": xr, "yaxis": yr,
                })  # fmt: skip
            data.append({
                "type": "scatter", "mode": "lines", "x": h, "y": paths[i][j],
                "line": {"color": BLUE, "width": 1.6}, "name": "response",
                "legendgroup": "response", "showlegend": first, "meta": [names[i], names[j]],
                "hovertemplate": f"{names[i]} after a shock to {names[j]}<br>h=%{{x}}: %{{y:.4g}}<extra></extra>",
                "xaxis": xr, "yaxis": yr,
            })  # fmt: skip
            _panel_axes(axes, xr, yr)
    for c in range(len(cols)):
        axes[th.axis_key(refs[n - 1][c][0])]["title"] = {"text": "horizon", "font": {"size": 11}}
    anns = _grid_titles(refs, axes, [names[j] for j in cols], list(names))
    layout = th.layout(
        height=max(380, 110 + 112 * n), medium=medium, title=title,
        subtitle=(subtitle + "; " if subtitle else "")
        + f"rows: responding series; columns: shock to the series named above; units: {yunit}",
        margin={"l": 70, "r": 20, "t": 110, "b": 80},
        legend=_BOTTOM_LEGEND, annotations=anns, **axes,
    )  # fmt: skip
    return {"data": data, "layout": layout}


def responses_compare_figure(
    first: np.ndarray, second: np.ndarray, names: Sequence[str], *, labels: tuple[str, str],
    title: str,
) -> Figure:
    """Two response grids (H+1, n, n) overlaid: the first date window solid, the second dashed.

    Drawn like the screen's `responses_figure` (`_cell_grid`, one pair of axes): one trace per
    window, each point's ``customdata`` ``[response name, shock name, horizon, value]``; a cell's
    scale covers both windows' paths.
    """
    n = first.shape[1]
    pair = "%{customdata[0]} ← %{customdata[1]}, h=%{customdata[2]}: %{customdata[3]:.4g}"
    data, axes, anns = _cell_grid(
        [(labels[0], first, {"color": BLUE, "width": 1.6}, f"{labels[0]}<br>{pair}"),
         (labels[1], second, {"color": ORANGE, "width": 1.6, "dash": "dash"}, f"{labels[1]}<br>{pair}")],
        list(names), list(names),
    )  # fmt: skip
    sub = f"rows: responding series; columns: shock to the series named above; {CELL_SCALE_NOTE}"
    return {"data": data, "layout": _cell_layout(max(380, 110 + 108 * n), title, sub, axes, anns)}


# ---------------------------------------------------------------------------------------------
# variance shares
# ---------------------------------------------------------------------------------------------


def shares_figure(
    panels: Sequence[tuple[str, np.ndarray]],
    names: Sequence[str],
    *,
    title: str,
    subtitle: str | None = None,
    medium: Medium = "screen",
) -> Figure:
    """Stacked horizontal bars, one panel per decomposition: per series, percent from each shock.

    panels : (panel title, (n, n) shares [variable, shock] in percent, rows summing to 100). The
    bar of shock j takes the style of series j (colour, and a fill pattern past eight series).
    """
    n = len(names)
    axes, refs = th.grid(1, len(panels), hgap=0.08, vgap=0.0, share_y=True)
    data: list[dict[str, Any]] = []
    anns = []
    for col, (panel_title, table) in enumerate(panels):
        xr, yr = refs[0][col]
        for j in range(n):
            style = series_style(j)
            data.append({
                "type": "bar", "orientation": "h", "y": list(names), "x": th.as_list(table[:, j]),
                "name": f"shock: {names[j]}", "legendgroup": names[j], "showlegend": col == 0,
                "meta": [names[j]],
                "marker": {"color": style["color"], "line": {"color": "white", "width": 0.5},
                           "pattern": {"shape": style["pattern"]}},
                "hovertemplate": f"%{{y}}: %{{x:.1f}}% from {names[j]}<extra></extra>",
                "xaxis": xr, "yaxis": yr,
            })  # fmt: skip
        axes[th.axis_key(xr)].update(range=[0, 100], title={"text": "share of forecast-error variance, %"})
        axes[th.axis_key(yr)].update(autorange="reversed")
        dom = axes[th.axis_key(xr)]["domain"]
        if len(panels) > 1:
            anns.append(th.text(panel_title, (dom[0] + dom[1]) / 2, 1.0, yanchor="bottom"))
    axes["yaxis"]["title"] = {"text": "series whose variance is split"}
    layout = th.layout(
        height=max(330, 130 + 46 * n), title=title, subtitle=subtitle, medium=medium,
        barmode="stack", annotations=anns,
        legend={"title": {"text": "source of the shock"}, "traceorder": "normal"},
        margin={"l": 60, "r": 20, "t": 120 if len(panels) > 1 else 80, "b": 40}, **axes,
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

    Cells significant at `level` carry `SIGNIFICANCE_MARK` in the first panel.
    """
    text = [
        ["" if not np.isfinite(v) else f"{v:.3f}{' ' + SIGNIFICANCE_MARK if v < level else ''}" for v in row]
        for row in pvalues
    ]
    axes, refs = th.grid(1, 2, hgap=0.2, vgap=0.0)
    pct = 100.0 * share
    data = [
        {
            "type": "heatmap", "z": th.matrix(pvalues), "x": list(names), "y": list(names),
            "zmin": 0, "zmax": 1, "colorscale": SEQUENTIAL, "reversescale": True, "text": text,
            "texttemplate": "%{text}", "colorbar": {"title": {"text": "p-value"}, "x": axes["xaxis"]["domain"][1] + 0.01,
                                              "xanchor": "left", "len": 0.9, "thickness": 12},
            "hovertemplate": "does %{x} lead %{y}?<br>p = %{z:.4f}<extra></extra>",
            "xaxis": refs[0][0][0], "yaxis": refs[0][0][1],
        },
        {
            "type": "heatmap", "z": th.matrix(pct), "x": list(names), "y": list(names),
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
        f"p-value, window ending {window_end}<br>{SIGNIFICANCE_MARK}: p < {level:g}",
        f"% of {n_windows} windows with p < {level:g}<br>{date_label}",
    )):
        xr, yr = refs[0][col]
        axes[th.axis_key(xr)].update(title={"text": "leading series (causing)"}, tickangle=-30)
        axes[th.axis_key(yr)].update(title={"text": "led series (caused)"}, autorange="reversed")
        dom = axes[th.axis_key(xr)]["domain"]
        anns.append(th.text(label, (dom[0] + dom[1]) / 2, 1.0, yanchor="bottom"))
    layout = th.layout(
        height=max(360, 170 + 48 * len(names)),
        title="Granger causality: does the column series lead the row series?",
        annotations=anns, margin={"l": 60, "r": 20, "t": 100, "b": 40}, **axes,
    )  # fmt: skip
    return {"data": data, "layout": layout}


# ---------------------------------------------------------------------------------------------
# spillover network
# ---------------------------------------------------------------------------------------------


def node_positions(n: int) -> tuple[np.ndarray, np.ndarray, list[str]]:
    """Positions of `n` nodes on an ellipse filling the plot (first at the top, clockwise) and the
    text position that puts each node's label outside the ring, away from the arrows."""
    angle = np.pi / 2 - 2 * np.pi * np.arange(n) / n
    xs, ys = np.cos(angle), np.sin(angle)
    where = [
        "top center" if y > 0.5 else "bottom center" if y < -0.5 else "middle right" if x > 0 else "middle left"
        for x, y in zip(xs, ys, strict=True)
    ]
    return xs, ys, where


def network_figure(
    table: np.ndarray,
    names: Sequence[str],
    *,
    to_others: np.ndarray,
    from_others: np.ndarray,
    size_by: str,
    title: str,
    subtitle: str | None = None,
    medium: Medium = "screen",
) -> Figure:
    """Directed graph of net pairwise spillovers on a ring.

    table : (n, n) [target, source] percent. The net spillover from i to j is
    table[j, i] − table[i, j]; an arrow points from the net transmitter to the receiver, its width
    proportional to the size. Node size follows "to others" or "from others"; node colour is the net
    directional spillover (to − from), blue for net receivers, vermillion for net transmitters.
    Nodes spread over the whole plot (an ellipse, not a small circle in the middle); labels sit
    outside the ring; arrows stop short of both nodes.
    """
    n = len(names)
    xs, ys, where = node_positions(n)
    pairs = []
    for i in range(n):
        for j in range(i + 1, n):
            net = table[j, i] - table[i, j]
            if np.isfinite(net):
                src, dst = (i, j) if net >= 0 else (j, i)
                pairs.append((src, dst, abs(float(net))))
    biggest = max((p[2] for p in pairs), default=0.0) or 1.0
    anns: list[dict[str, Any]] = []
    hover_x, hover_y, hover_text = [], [], []
    for src, dst, size in pairs:
        dx, dy = float(xs[dst] - xs[src]), float(ys[dst] - ys[src])
        # the arrow runs from 12% to 86% of the way, clear of both node markers
        x0, y0 = float(xs[src]) + 0.12 * dx, float(ys[src]) + 0.12 * dy
        x1, y1 = float(xs[src]) + 0.86 * dx, float(ys[src]) + 0.86 * dy
        anns.append({
            "x": x1, "y": y1, "ax": x0, "ay": y0, "xref": "x", "yref": "y",
            "axref": "x", "ayref": "y", "showarrow": True, "arrowhead": 2, "arrowsize": 0.8,
            "arrowwidth": 0.8 + 6.0 * size / biggest, "text": "",
            "arrowcolor": f"rgba(40,40,40,{0.25 + 0.6 * size / biggest:.2f})",
        })  # fmt: skip
        # hover point a third of the way from the transmitter: chords through the centre do not
        # stack their hover points there
        hover_x.append(float(xs[src]) + 0.33 * dx)
        hover_y.append(float(ys[src]) + 0.33 * dy)
        hover_text.append(f"{names[src]} → {names[dst]}: net {size:.2f} pp")
    sizes = np.nan_to_num(np.asarray(to_others if size_by == "to" else from_others, dtype=float))
    top = float(sizes.max()) if sizes.size and sizes.max() > 0 else 1.0
    net = np.asarray(to_others, dtype=float) - np.asarray(from_others, dtype=float)
    lim = float(np.nanmax(np.abs(net))) if net.size and np.isfinite(net).any() else 1.0
    lim = lim or 1.0
    data = [
        {
            "type": "scatter", "mode": "markers", "x": hover_x, "y": hover_y, "text": hover_text,
            "marker": {"size": 12, "opacity": 0}, "hovertemplate": "%{text}<extra></extra>",
            "showlegend": False, "name": "pairs",
        },
        {
            "type": "scatter", "mode": "markers+text", "x": th.as_list(xs), "y": th.as_list(ys),
            "text": list(names), "textposition": where, "textfont": {"size": 13},
            "marker": {
                "size": th.as_list(22 + 34 * sizes / top), "color": th.as_list(net), "cmin": -lim,
                "cmax": lim, "colorscale": DIVERGING, "line": {"color": "#333", "width": 1},
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
    anns.append(th.text(
        "arrow: net transmitter → receiver, width ∝ net spillover; node size: spillover "
        f"{'to' if size_by == 'to' else 'from'} others", 0.0, 0.0, xanchor="left", yanchor="top",
        font={"size": 11, "color": "#444"},
    ))  # fmt: skip
    layout = th.layout(
        height=580, title=title, subtitle=subtitle, medium=medium, annotations=anns,
        margin={"l": 30, "r": 20, "t": 80, "b": 40},
        xaxis={"visible": False, "range": [-1.45, 1.45], "fixedrange": True},
        yaxis={"visible": False, "range": [-1.3, 1.3], "fixedrange": True},
    )  # fmt: skip
    return {"data": data, "layout": layout}


# ---------------------------------------------------------------------------------------------
# window comparison
# ---------------------------------------------------------------------------------------------


def pairwise_compare_figure(
    first: np.ndarray, second: np.ndarray, names: Sequence[str], *, labels: tuple[str, str]
) -> Figure:
    """Three heatmaps [target, source] in percent: first window, second window, second − first.

    A and B share one colour axis (``layout.coloraxis``: 0 to the larger of their maxima, one
    colour bar between B and the change); the change has its own (``coloraxis2``, symmetric about
    zero). Each colour bar costs the browser a drawn axis, so two identical bars were drawn once.
    """
    diff = second - first
    lim = float(np.nanmax(np.abs(diff))) if np.isfinite(diff).any() else 1.0
    lim = lim or 1.0
    both = np.concatenate([first.ravel(), second.ravel()])
    top = float(np.nanmax(both)) if np.isfinite(both).any() else 100.0
    axes, refs = th.grid(1, 3, hgap=0.14, vgap=0.0)
    data = []
    anns = []
    specs = (
        (first, "coloraxis", ".1f", f"A: {labels[0]}"),
        (second, "coloraxis", ".1f", f"B: {labels[1]}"),
        (diff, "coloraxis2", "+.1f", "change B − A, pp"),
    )
    for col, (z, colour_axis, fmt, label) in enumerate(specs):
        xr, yr = refs[0][col]
        data.append({
            "type": "heatmap", "z": th.matrix(z), "x": list(names), "y": list(names),
            "coloraxis": colour_axis, "text": _heat_text(z, fmt), "texttemplate": "%{text}",
            "hovertemplate": "%{y} ← %{x}: %{z:.2f}<extra></extra>", "xaxis": xr, "yaxis": yr,
        })  # fmt: skip
        axes[th.axis_key(yr)].update(autorange="reversed")
        axes[th.axis_key(xr)].update(tickangle=-30)
        dom = axes[th.axis_key(xr)]["domain"]
        anns.append(th.text(label, (dom[0] + dom[1]) / 2, 1.0, yanchor="bottom"))
    axes["yaxis"]["title"] = {"text": "receiving series (target)"}
    axes["xaxis2"]["title"] = {"text": "sending series (source)"}
    bar = {"xanchor": "left", "len": 0.9, "thickness": 10}
    # margins that already hold what plotly's automargin would push them to (`PAIRS_PAD_LEFT`); 12 px:
    # the theme font (`th.FONT`), which the tick labels use
    widest = max((th.text_px(str(x), 12) for x in names), default=0.0)
    margin = {"l": max(60, math.ceil(widest + PAIRS_PAD_LEFT)), "r": PAIRS_PAD_RIGHT, "t": 80,
              "b": max(40, math.ceil(widest * math.sin(math.radians(30)) + PAIRS_PAD_BOTTOM))}  # fmt: skip
    layout = th.layout(
        height=max(360, 160 + 45 * len(names)),
        title="Pairwise spillovers averaged over each date window (% of the target's forecast-error variance)",
        annotations=anns, margin=margin,
        coloraxis={"cmin": 0.0, "cmax": top, "colorscale": SEQUENTIAL,
                   "colorbar": {**bar, "x": axes["xaxis2"]["domain"][1] + 0.005, "title": {"text": "%"}}},
        coloraxis2={"cmin": -lim, "cmax": lim, "colorscale": DIVERGING,
                    "colorbar": {**bar, "x": 1.005, "title": {"text": "pp"}}},
        **axes,
    )  # fmt: skip
    return {"data": data, "layout": layout}


# ---------------------------------------------------------------------------------------------
# model health
# ---------------------------------------------------------------------------------------------


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
    medium: Medium = "screen",
) -> Figure:
    """Four stacked panels over window ends: lag order, spectral radius, residual-test p, observations.

    Spectral radii at or above `near_one` are drawn orange, at or above one vermillion (and ringed);
    skipped windows appear as ✕ on the lag-order panel with their reason on hover.
    """
    axes, refs = th.grid(4, 1, hgap=0.0, vgap=0.07, share_x=True)
    (x1, y1), (x2, y2), (x3, y3), (x4, y4) = (r[0] for r in refs)
    x = th.dates(ends)
    r = np.array([np.nan if v is None else float(v) for v in radius])
    colours = [VERMILLION if v >= 1 else ORANGE if v >= near_one else BLUE for v in np.nan_to_num(r)]
    flagged = [(d, v) for d, v in zip(x, r, strict=True) if np.isfinite(v) and v >= near_one]
    data: list[dict[str, Any]] = [
        {"type": "scatter", "mode": "lines", "x": x, "y": th.as_list([np.nan if v is None else v for v in lags]),
         "line": {"shape": "hv", "color": BLUE}, "name": "lag order", "showlegend": False,
         "hovertemplate": "%{x|%Y-%m-%d}: p = %{y}<extra></extra>", "xaxis": x1, "yaxis": y1},
        {"type": "scatter", "mode": "lines+markers", "x": x, "y": th.as_list(r),
         "line": {"color": "#9ecae1", "width": 1}, "marker": {"color": colours, "size": 5},
         "name": "spectral radius", "showlegend": False,
         "hovertemplate": "%{x|%Y-%m-%d}: %{y:.4f}<extra></extra>", "xaxis": x2, "yaxis": y2},
        {"type": "scatter", "mode": "markers", "x": [d for d, _ in flagged],
         "y": [float(v) for _, v in flagged], "name": f"radius ≥ {near_one:g} ({len(flagged)})",
         "marker": {"color": VERMILLION, "size": 9, "symbol": "diamond-open"},
         "hovertemplate": "%{x|%Y-%m-%d}: radius %{y:.4f}<extra></extra>", "xaxis": x2, "yaxis": y2},
        {"type": "scatter", "mode": "markers", "x": x,
         "y": th.as_list([np.nan if v is None else v for v in portmanteau]),
         "marker": {"color": GREEN, "size": 4}, "name": "p-value", "showlegend": False,
         "hovertemplate": "%{x|%Y-%m-%d}: p = %{y:.3f}<extra></extra>", "xaxis": x3, "yaxis": y3},
        {"type": "scatter", "mode": "lines", "x": x, "y": th.as_list([np.nan if v is None else v for v in nobs]),
         "line": {"color": PURPLE}, "name": "observations", "showlegend": False,
         "hovertemplate": "%{x|%Y-%m-%d}: %{y} rows<extra></extra>", "xaxis": x4, "yaxis": y4},
    ]  # fmt: skip
    if skipped:
        data.append({
            "type": "scatter", "mode": "markers", "x": th.dates([d for d, _ in skipped]),
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
        dom = axes[th.axis_key(yr)]["domain"]
        anns.append(th.text(label, 0.0, dom[1], xanchor="left", yanchor="bottom", font={"size": 12}))
    axes[th.axis_key(y1)].update(title={"text": "lags"}, rangemode="tozero")
    axes[th.axis_key(y2)].update(title={"text": "radius"})
    axes[th.axis_key(y3)].update(title={"text": "p"}, range=[0, 1])
    axes[th.axis_key(y4)].update(title={"text": "rows"}, rangemode="tozero")
    axes[th.axis_key(x4)].update(title={"text": "window end (date)"}, type="date")
    for xr in (x1, x2, x3):
        axes[th.axis_key(xr)]["type"] = "date"
    shapes = [
        th.hline(1.0, x2, y2, VERMILLION, "dash"),
        th.hline(near_one, x2, y2, ORANGE, "dot"),
        th.hline(0.05, x3, y3, GREY, "dot"),
    ]
    layout = th.layout(
        height=660, title=title, medium=medium, annotations=anns, shapes=shapes,
        legend=_BOTTOM_LEGEND, margin={"l": 60, "r": 20, "t": 80, "b": 80}, **axes,
    )  # fmt: skip
    return {"data": data, "layout": layout}


# ---------------------------------------------------------------------------------------------
# own cycles
# ---------------------------------------------------------------------------------------------


def cycles_figure(
    frequencies: np.ndarray,
    spectra: Sequence[tuple[int, str, np.ndarray, float | None]],
    *,
    title: str,
    medium: Medium = "screen",
) -> Figure:
    """Each series' AR spectral density against frequency, with its dominant cycle marked.

    frequencies : (F,) in cycles per observation, 0..0.5.
    spectra : (position of the series in its universe, name, (F,) density divided by the series'
    variance, peak period or None); the position picks the series' style. On this
    scale white noise is flat at 1/(2π) (drawn dashed) whatever the series' units, so series of
    different units share one axis.
    """
    freqs = np.asarray(frequencies, dtype=float)
    periods = [None if f <= 0 else 1.0 / f for f in freqs]
    data: list[dict[str, Any]] = []
    for k, name, density, period in spectra:
        style = series_style(k)
        data.append({
            "type": "scatter", "mode": "lines", "x": th.as_list(freqs), "y": th.as_list(density), "name": name,
            "line": {"color": style["color"], "dash": style["dash"], "width": 1.8},
            "customdata": periods, "meta": [name],
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
                "marker": {"color": style["color"], "size": 12, "symbol": "diamond",
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
    layout = th.layout(
        height=470, title=title, medium=medium,
        xaxis=th.axis(title={"text": "frequency (cycles per observation; period = 1 / frequency)"},
                    range=[0, 0.5]),
        yaxis=th.axis(title={"text": "spectral density ÷ variance (log scale)"}, type="log"),
    )  # fmt: skip
    return {"data": data, "layout": layout}


# ---------------------------------------------------------------------------------------------
# connectedness by cycle length (frequency bands) and joint connectedness
# ---------------------------------------------------------------------------------------------

#: One colour per frequency band, shortest cycles first (Okabe–Ito colours, warm = fast).
BAND_COLOURS = (VERMILLION, ORANGE, GREEN, BLUE, PURPLE, GREY)


def band_label(lo: float, hi: float, unit: str = "rows") -> str:
    """'cycles ≤ 5 rows', '5–20 rows', '> 20 rows' for the band (lo, hi] of cycle lengths."""
    if lo <= 2:
        return f"cycles ≤ {hi:g} {unit}"
    if math.isinf(hi):
        return f"cycles > {lo:g} {unit}"
    return f"cycles {lo:g}–{hi:g} {unit}"


def _band_stack(
    x: list[Any], totals: np.ndarray, periods: Sequence[tuple[float, float]], unit: str, group: str, hover: str
) -> list[dict[str, Any]]:
    """One stacked area per band (W, d) in the band colours, stack group `group`, hover prefix `hover`."""
    arr = np.asarray(totals, dtype=float)
    out = []
    for b, (lo, hi) in enumerate(periods):
        name = band_label(lo, hi, unit)
        c = BAND_COLOURS[b % len(BAND_COLOURS)]
        out.append({
            "type": "scatter", "x": x, "y": th.as_list(arr[:, b]), "mode": "lines", "name": name,
            "stackgroup": group, "line": {"color": c, "width": 1.0}, "fillcolor": c,
            "hovertemplate": f"{hover}{name}: " + "%{y:.1f}%<extra></extra>",
        })  # fmt: skip
    return out


def band_index_figure(
    dates: Sequence[dt.date],
    totals: np.ndarray,
    periods: Sequence[tuple[float, float]],
    *,
    universe: str,
    truncation: int,
    within: np.ndarray | None = None,
    unit: str = "rows",
    medium: Medium = "screen",
) -> Figure:
    """Connectedness split by cycle length over every window (Baruník–Křehlík 2018), stacked.

    totals : (W, d) frequency connectedness per band in percent; stacked, the bands add up to the
    total index at horizon `truncation`. within : optional (W, d) within-band connectedness,
    drawn as dotted lines on a second axis.
    """
    x = th.dates(dates)
    data: list[dict[str, Any]] = []
    for b, ((lo, hi), trace) in enumerate(zip(periods, _band_stack(x, totals, periods, unit, "bands", ""), strict=True)):
        name = band_label(lo, hi, unit)
        c = BAND_COLOURS[b % len(BAND_COLOURS)]
        data.append(trace)
        if within is not None:
            data.append({
                "type": "scatter", "x": x, "y": th.as_list(np.asarray(within, dtype=float)[:, b]),
                "mode": "lines", "name": f"within {name}", "yaxis": "y2", "visible": "legendonly",
                "line": {"color": c, "dash": "dot", "width": 1.4},
                "hovertemplate": f"within {name}: " + "%{y:.1f}%<extra></extra>",
            })  # fmt: skip
    layout = th.layout(
        height=380, medium=medium,
        title=f"Connectedness by cycle length, {universe}",
        subtitle=(f"% of forecast-error variance from other series, stacked by band: the bands add up to "
                  f"the index at {truncation} steps" + ("; within-band lines (right axis) from the legend"
                                                        if within is not None else "")),
        legend={"orientation": "h", "x": 0.0, "xanchor": "left", "yref": "container", "y": 0.0,
                "yanchor": "bottom"},
        margin={"l": 60, "r": 60, "t": 70, "b": 90},
        xaxis=th.axis(type="date"),
        yaxis=th.axis(title={"text": "index share, %"}),
    )  # fmt: skip
    if within is not None:
        # the within-band lines start hidden: a fixed range from the data keeps the right axis
        # readable (plotly's default for an axis with no visible trace is −1…4)
        top = float(np.nanmax(np.asarray(within, dtype=float), initial=0.0))
        layout["yaxis2"] = {"overlaying": "y", "side": "right", "showgrid": False, "rangemode": "tozero",
                            "range": [0.0, 1.05 * top if top > 0 else 1.0], "title": {"text": "within band, %"}}
    return {"data": data, "layout": layout}


def band_net_figure(
    net: np.ndarray,
    periods: Sequence[tuple[float, float]],
    names: Sequence[str],
    *,
    title: str,
    unit: str = "rows",
    medium: Medium = "screen",
) -> Figure:
    """Net connectedness (to − from, percentage points) per series and band at one window.

    net : (d, n) [band, series]; one group of bars per series, one bar per band.
    """
    arr = np.asarray(net, dtype=float)
    data = [
        {
            "type": "bar", "x": list(names), "y": th.as_list(arr[b]), "name": band_label(lo, hi, unit),
            "marker": {"color": BAND_COLOURS[b % len(BAND_COLOURS)]},
            "hovertemplate": "%{x}: %{y:.2f} pp<extra>" + band_label(lo, hi, unit) + "</extra>",
        }
        for b, (lo, hi) in enumerate(periods)
    ]  # fmt: skip
    layout = th.layout(
        height=360, title=title, medium=medium, barmode="group",
        legend={"orientation": "h", "x": 0.0, "xanchor": "left", "yref": "container", "y": 0.0,
                "yanchor": "bottom"},
        margin={"l": 60, "r": 20, "t": 60, "b": 90},
        xaxis=th.axis(), yaxis=th.axis(title={"text": "net (to − from), percentage points"}),
    )  # fmt: skip
    return {"data": data, "layout": layout}


def band_pairs_figure(
    tables: np.ndarray,
    periods: Sequence[tuple[float, float]],
    names: Sequence[str],
    *,
    window_end: dt.date,
    unit: str = "rows",
    medium: Medium = "screen",
) -> Figure:
    """One heatmap per band: the band table [receiving, sending] at one window, in percent.

    tables : (d, n, n) band tables θ̃_d (Baruník–Křehlík 2018, eq. 12) in percent of the receiver's
    forecast-error variance; summed over bands they are the Diebold–Yilmaz table. One colour scale
    (0 to the largest off-diagonal entry of any band) for every panel, so a band whose cells are
    pale carries little spillover; the diagonal (own shares) is written, not coloured.
    """
    arr = np.asarray(tables, dtype=float)
    d, n = len(periods), len(names)
    off = ~np.eye(n, dtype=bool)
    top = float(max(np.nanmax(arr[:, off]), 1.0)) if n > 1 else 100.0
    axes, refs = th.grid(1, d, hgap=0.07, vgap=0.0, share_y=True)
    data, anns = [], []
    for b, (lo, hi) in enumerate(periods):
        xr, yr = refs[0][b]
        name = band_label(lo, hi, unit)
        data.append({
            "type": "heatmap", "z": th.matrix(np.where(off, arr[b], np.nan)), "x": list(names),
            "y": list(names), "zmin": 0, "zmax": top, "colorscale": SEQUENTIAL, "showscale": b == d - 1,
            "text": _heat_text(arr[b], ".1f"), "texttemplate": "%{text}",
            "colorbar": {"title": {"text": "% of variance"}, "x": 1.01, "xanchor": "left", "len": 0.9,
                         "thickness": 12},
            "hovertemplate": f"{name}: " + "%{z:.2f}% of %{y}'s variance from %{x}<extra></extra>",
            "xaxis": xr, "yaxis": yr,
        })  # fmt: skip
        axes[th.axis_key(xr)].update(title={"text": "shock from"}, tickangle=-30)
        axes[th.axis_key(yr)].update(autorange="reversed")
        dom = axes[th.axis_key(xr)]["domain"]
        anns.append(th.text(name, (dom[0] + dom[1]) / 2, 1.0, yanchor="bottom"))
    axes["yaxis"]["title"] = {"text": "series whose variance is split"}
    layout = th.layout(
        height=max(360, 170 + 40 * n), medium=medium, annotations=anns,
        title=f"Pairwise spillovers by cycle length, window ending {window_end} (diagonal: own share)",
        margin={"l": 60, "r": 20, "t": 100, "b": 60}, **axes,
    )  # fmt: skip
    return {"data": data, "layout": layout}


def joint_index_figure(
    dates: Sequence[dt.date],
    joint: np.ndarray,
    generalized: np.ndarray,
    *,
    universe: str,
    horizon: int,
    medium: Medium = "screen",
) -> Figure:
    """Joint (Lastrapes–Wiesen 2021) and generalized (Diebold–Yilmaz 2012) total index over time."""
    x = th.dates(dates)
    data = [
        {"type": "scatter", "x": x, "y": th.as_list(joint), "mode": "lines", "name": "joint",
         "line": {"color": BLUE, "width": 1.8},
         "hovertemplate": "joint %{y:.1f}%<extra></extra>"},
        {"type": "scatter", "x": x, "y": th.as_list(generalized), "mode": "lines",
         "name": "generalized (row-normalised)", "line": {"color": ORANGE, "width": 1.4, "dash": "dash"},
         "hovertemplate": "generalized %{y:.1f}%<extra></extra>"},
    ]  # fmt: skip
    layout = th.layout(
        height=340, medium=medium,
        title=f"Joint vs generalized total connectedness, {universe}, {horizon}-step horizon",
        legend={"orientation": "h", "x": 0.0, "xanchor": "left", "yref": "container", "y": 0.0,
                "yanchor": "bottom"},
        margin={"l": 60, "r": 20, "t": 60, "b": 80},
        xaxis=th.axis(type="date"), yaxis=th.axis(title={"text": "% of forecast-error variance"}),
    )  # fmt: skip
    return {"data": data, "layout": layout}


def joint_band_figure(
    dates: Sequence[dt.date],
    totals: np.ndarray,
    periods: Sequence[tuple[float, float]],
    *,
    universe: str,
    truncation: int,
    generalized: np.ndarray | None = None,
    unit: str = "rows",
    medium: Medium = "screen",
) -> Figure:
    """The joint index split by cycle length over every window (Lastrapes–Wiesen 2021 by
    Baruník–Křehlík 2018 band), stacked in the band colours of `band_index_figure`.

    totals : (W, d) band d's part of the joint index in percent; stacked, the bands add up to the
    joint index at horizon `truncation`. generalized : optional (W,) the generalized
    (row-normalised) index at the same horizon, drawn as a dashed line for comparison.
    """
    x = th.dates(dates)
    data = _band_stack(x, totals, periods, unit, "joint", "joint, ")
    if generalized is not None:
        data.append({
            "type": "scatter", "x": x, "y": th.as_list(generalized), "mode": "lines",
            "name": "generalized, all bands", "line": {"color": "#333333", "width": 1.2, "dash": "dash"},
            "hovertemplate": "generalized %{y:.1f}%<extra></extra>",
        })  # fmt: skip
    layout = th.layout(
        height=360, medium=medium,
        title=f"Joint connectedness by cycle length, {universe}",
        subtitle=(f"% of forecast-error variance due to all other shocks together, stacked by band: the "
                  f"bands add up to the joint index at {truncation} steps"),
        legend={"orientation": "h", "x": 0.0, "xanchor": "left", "yref": "container", "y": 0.0,
                "yanchor": "bottom"},
        margin={"l": 60, "r": 20, "t": 70, "b": 90},
        xaxis=th.axis(type="date"),
        yaxis=th.axis(title={"text": "joint index share, %"}),
    )  # fmt: skip
    return {"data": data, "layout": layout}


def tightness_figure(
    dates: Sequence[dt.date],
    tightness: Sequence[float] | np.ndarray,
    *,
    universe: str,
    chosen: bool = True,
    medium: Medium = "screen",
) -> Figure:
    """The shrinkage prior's overall tightness λ per window end (log scale): smaller λ pulls the
    coefficients harder towards the prior mean (random walk or white noise per series)."""
    how = "chosen per window by the marginal likelihood" if chosen else "fixed by the configuration"
    data = [
        {"type": "scatter", "x": th.dates(dates), "y": th.as_list(tightness), "mode": "lines",
         "name": "λ", "line": {"color": BLUE, "width": 1.6},
         "hovertemplate": "λ %{y:.4g}<extra></extra>"},
    ]  # fmt: skip
    layout = th.layout(
        height=320, medium=medium,
        title=f"Shrinkage tightness λ ({how}), {universe}",
        margin={"l": 60, "r": 20, "t": 60, "b": 50},
        xaxis=th.axis(type="date"),
        yaxis=th.axis(type="log", title={"text": "λ (log scale; smaller = more shrinkage)"}),
    )  # fmt: skip
    return {"data": data, "layout": layout}


#: How each universe model reads in titles and notes.
MODEL_LABELS = {"rolling": "rolling-window VAR", "tvp": "time-varying-parameter VAR (filtered per date)"}


def model_compare_figure(
    rolling: tuple[Sequence[dt.date], Sequence[float] | np.ndarray],
    tvp: tuple[Sequence[dt.date], Sequence[float] | np.ndarray],
    *,
    names: tuple[str, str],
    horizon: int | None = None,
    medium: Medium = "screen",
) -> Figure:
    """Total connectedness of the same series from a rolling-window VAR and a TVP-VAR, side by side.

    `rolling` and `tvp` are (dates, totals in percent) of the two universes; `names` their names
    (rolling first). The TVP line has a value for every filtered date, the rolling one per window end.
    """
    data = [
        {"type": "scatter", "x": th.dates(rolling[0]), "y": th.as_list(rolling[1]), "mode": "lines",
         "name": f"rolling windows ({names[0]})", "line": {"color": BLUE, "width": 1.6},
         "hovertemplate": "rolling %{y:.1f}%<extra></extra>"},
        {"type": "scatter", "x": th.dates(tvp[0]), "y": th.as_list(tvp[1]), "mode": "lines",
         "name": f"TVP filter ({names[1]})", "line": {"color": ORANGE, "width": 1.4, "dash": "dash"},
         "hovertemplate": "TVP %{y:.1f}%<extra></extra>"},
    ]  # fmt: skip
    at = f", {horizon}-step horizon" if horizon is not None else ""
    layout = th.layout(
        height=340, medium=medium,
        title=f"Total connectedness: rolling-window vs time-varying-parameter VAR{at}",
        legend={"orientation": "h", "x": 0.0, "xanchor": "left", "yref": "container", "y": 0.0,
                "yanchor": "bottom"},
        margin={"l": 60, "r": 20, "t": 60, "b": 80},
        xaxis=th.axis(type="date"), yaxis=th.axis(title={"text": "% of forecast-error variance"}),
    )  # fmt: skip
    return {"data": data, "layout": layout}


# ---------------------------------------------------------------------------------------------
# quantile (tail) connectedness
# ---------------------------------------------------------------------------------------------


def quantile_label(tau: float) -> str:
    """How a quantile level reads: "τ = 0.05 (lower tail)", "τ = 0.5 (median)", "τ = 0.95 (upper tail)"."""
    side = "median" if tau == 0.5 else "lower tail" if tau < 0.5 else "upper tail"
    return f"τ = {tau:g} ({side})"


def _quantile_colour(tau: float) -> str:
    return GREY if tau == 0.5 else VERMILLION if tau < 0.5 else BLUE


def quantile_index_figure(
    dates: Sequence[dt.date],
    totals: np.ndarray,
    quantiles: Sequence[float],
    *,
    universe: str,
    horizon: int,
    window_end: dt.date | None = None,
    medium: Medium = "screen",
) -> Figure:
    """Total connectedness at each quantile level over time (Ando, Greenwood-Nimmo & Shin 2022).

    totals : (W, Q) percent, column q at level quantiles[q]; lower tail red, median grey, upper
    tail blue (dashed), the chosen window end marked.
    """
    x = th.dates(dates)
    data = []
    for q, tau in enumerate(quantiles):
        data.append({
            "type": "scatter", "x": x, "y": th.as_list(totals[:, q]), "mode": "lines",
            "name": quantile_label(float(tau)),
            "line": {"color": _quantile_colour(float(tau)), "width": 1.8 if tau != 0.5 else 1.4,
                     "dash": "solid" if tau <= 0.5 else "dash"},
            "hovertemplate": f"τ = {float(tau):g}: %{{y:.1f}}%<extra></extra>",
        })  # fmt: skip
    shapes = []
    if window_end is not None:
        shapes.append({"type": "line", "xref": "x", "yref": "paper", "x0": window_end.isoformat(),
                       "x1": window_end.isoformat(), "y0": 0, "y1": 1,
                       "line": {"color": GREY, "width": 1, "dash": "dot"}})  # fmt: skip
    layout = th.layout(
        height=360, medium=medium, shapes=shapes,
        title=f"Total connectedness in the tails and at the median, {universe}, {horizon}-step horizon",
        legend={"orientation": "h", "x": 0.0, "xanchor": "left", "yref": "container", "y": 0.0,
                "yanchor": "bottom"},
        margin={"l": 60, "r": 20, "t": 60, "b": 80},
        xaxis=th.axis(type="date"), yaxis=th.axis(title={"text": "% of forecast-error variance"}),
    )  # fmt: skip
    return {"data": data, "layout": layout}


def quantile_tables_figure(
    tables: np.ndarray,
    quantiles: Sequence[float],
    names: Sequence[str],
    *,
    window_end: dt.date,
    medium: Medium = "screen",
) -> Figure:
    """One heatmap per quantile level: the generalized table at τ [variable, shock], percent.

    tables : (Q, n, n), rows summing to 100; one colour scale (0 to the largest off-diagonal
    entry) for every panel so the panels compare; the diagonal (own shares) is written, not coloured.
    """
    Q, n = len(quantiles), len(names)
    off = ~np.eye(n, dtype=bool)
    top = float(max(np.nanmax(tables[:, off]), 1.0)) if n > 1 else 100.0
    axes, refs = th.grid(1, Q, hgap=0.07, vgap=0.0, share_y=True)
    data, anns = [], []
    for q, tau in enumerate(quantiles):
        xr, yr = refs[0][q]
        z = np.where(off, tables[q], np.nan)
        data.append({
            "type": "heatmap", "z": th.matrix(z), "x": list(names), "y": list(names),
            "zmin": 0, "zmax": top, "colorscale": SEQUENTIAL, "showscale": q == Q - 1,
            "text": _heat_text(np.asarray(tables[q]), ".0f"), "texttemplate": "%{text}",
            "colorbar": {"title": {"text": "% of variance"}, "x": 1.01, "xanchor": "left", "len": 0.9,
                         "thickness": 12},
            "hovertemplate": f"τ = {float(tau):g}: %{{z:.1f}}% of %{{y}}'s variance from %{{x}}<extra></extra>",
            "xaxis": xr, "yaxis": yr,
        })  # fmt: skip
        axes[th.axis_key(xr)].update(title={"text": "shock from"}, tickangle=-30)
        axes[th.axis_key(yr)].update(autorange="reversed")
        dom = axes[th.axis_key(xr)]["domain"]
        anns.append(th.text(quantile_label(float(tau)), (dom[0] + dom[1]) / 2, 1.0, yanchor="bottom"))
    axes["yaxis"]["title"] = {"text": "series whose variance is split"}
    layout = th.layout(
        height=max(360, 170 + 40 * n), medium=medium, annotations=anns,
        title=f"Spillover tables at each quantile level, window ending {window_end} (diagonal: own share)",
        margin={"l": 60, "r": 20, "t": 100, "b": 60}, **axes,
    )  # fmt: skip
    return {"data": data, "layout": layout}
