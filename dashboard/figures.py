"""Plotly figure builders: arrays and labels in, `go.Figure` out. No data access, no Dash.

Colours are colour-blind safe: series use the Okabe–Ito palette (Okabe & Ito 2008, "Color
Universal Design"), sequential maps use cividis (Nuñez, Anderton & Renslow 2018), and diverging maps
run blue → white → vermillion from the same Okabe–Ito set. Every axis says what it measures and its
unit.
"""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Sequence

import numpy as np
import plotly.graph_objects as go
from plotly.subplots import make_subplots

__all__ = [
    "DIVERGING",
    "OKABE_ITO",
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
#: Diverging blue → white → vermillion (negative → zero → positive).
DIVERGING = [[0.0, BLUE], [0.5, "#f7f7f7"], [1.0, VERMILLION]]
SEQUENTIAL = "Cividis"
FONT = dict(family="system-ui, -apple-system, Segoe UI, Roboto, sans-serif", size=12)


def _base(fig: go.Figure, *, height: int, title: str | None = None) -> go.Figure:
    fig.update_layout(
        template="plotly_white",
        font=FONT,
        height=height,
        margin=dict(l=60, r=20, t=60 if title else 30, b=40),
        title=dict(text=title, x=0.0, xanchor="left", font=dict(size=14)) if title else None,
        hoverlabel=dict(font=FONT),
    )
    return fig


def colour(i: int) -> str:
    return OKABE_ITO[i % len(OKABE_ITO)]


def message_figure(text: str, *, height: int = 300) -> go.Figure:
    """An empty chart that says why it is empty (no data, bad input, missing snapshot)."""
    fig = go.Figure()
    fig.add_annotation(
        text=text, x=0.5, y=0.5, xref="paper", yref="paper", showarrow=False,
        font=dict(size=14, color="#333"),
    )  # fmt: skip
    fig.update_xaxes(visible=False)
    fig.update_yaxes(visible=False)
    return _base(fig, height=height)


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
) -> go.Figure:
    """The total connectedness index (percent) over every stored window, with a range slider.

    The x-range shows the chosen date window; the slider below shows the whole history with the
    window highlighted. Windows whose index is at or above `threshold` (a high quantile of the
    history) are shaded as stress periods; a dashed line marks the window the other views use.
    """
    fig = go.Figure()
    fig.add_trace(
        go.Scatter(
            x=list(dates), y=list(totals), mode="lines", name="total connectedness",
            line=dict(color=BLUE, width=1.8),
            hovertemplate="window ending %{x|%Y-%m-%d}<br>index %{y:.1f}%<extra></extra>",
        )
    )  # fmt: skip
    if threshold is not None:
        for a, b in stress_runs(dates, totals, threshold):
            fig.add_vrect(x0=a, x1=b if b != a else b + dt.timedelta(days=1), fillcolor=ORANGE,
                          opacity=0.25, line_width=0, layer="below")
        fig.add_trace(
            go.Scatter(
                x=[None], y=[None], mode="markers", name=f"stress: index ≥ {threshold:.1f}%",
                marker=dict(symbol="square", size=12, color=ORANGE, opacity=0.5),
            )
        )
    if reference_end is not None:
        fig.add_vline(x=reference_end, line=dict(color=VERMILLION, dash="dash", width=1.5))
        fig.add_trace(
            go.Scatter(
                x=[None], y=[None], mode="lines", name="window used by the views",
                line=dict(color=VERMILLION, dash="dash"),
            )
        )
    _base(fig, height=270, title=f"Total connectedness, {universe} (percent of forecast-error variance from other series)")
    fig.update_layout(
        margin=dict(l=60, r=20, t=50, b=10),
        legend=dict(orientation="h", y=1.02, x=1.0, xanchor="right", yanchor="bottom"),
        uirevision=universe,
    )
    fig.update_xaxes(
        range=[start.isoformat(), end.isoformat()],
        rangeslider=dict(visible=True, thickness=0.18),
        type="date", title=None,
    )  # fmt: skip
    fig.update_yaxes(title="index, %", rangemode="tozero")
    return fig


# ---------------------------------------------------------------------------------------------
# shock paths
# ---------------------------------------------------------------------------------------------


def responses_figure(
    response: np.ndarray,
    names: Sequence[str],
    *,
    lower: np.ndarray | None = None,
    upper: np.ndarray | None = None,
    title: str,
    yunit: str,
) -> go.Figure:
    """Grid of impulse responses: rows are responding series, columns are shocked series.

    response, lower, upper : (H+1, n, n) [horizon, response, shock].
    """
    H1, n, _ = response.shape
    h = list(range(H1))
    fig = make_subplots(
        rows=n, cols=n, shared_xaxes=True,
        column_titles=[f"shock: {s}" for s in names], row_titles=[f"{s}" for s in names],
        horizontal_spacing=0.03, vertical_spacing=0.03,
    )  # fmt: skip
    for i in range(n):
        for j in range(n):
            first = i == 0 and j == 0
            if lower is not None and upper is not None:
                fig.add_trace(
                    go.Scatter(
                        x=h + h[::-1],
                        y=list(upper[:, i, j]) + list(lower[::-1, i, j]),
                        fill="toself", fillcolor="rgba(86,180,233,0.30)", line=dict(width=0),
                        name="band", legendgroup="band", showlegend=first, hoverinfo="skip",
                    ),
                    row=i + 1, col=j + 1,
                )  # fmt: skip
            fig.add_trace(
                go.Scatter(
                    x=h, y=response[:, i, j], mode="lines", line=dict(color=BLUE, width=1.6),
                    name="response", legendgroup="response", showlegend=first,
                    meta=[names[i], names[j]],
                    hovertemplate=(
                        f"{names[i]} after a shock to {names[j]}<br>"
                        "h=%{x}: %{y:.4g}<extra></extra>"
                    ),
                ),
                row=i + 1, col=j + 1,
            )  # fmt: skip
            fig.add_hline(y=0, line=dict(color=GREY, width=0.8), row=i + 1, col=j + 1)
    height = max(360, 40 + 115 * n)
    _base(fig, height=height, title=title)
    fig.update_layout(
        legend=dict(orientation="h", y=1.0, x=1.0, xanchor="right", yanchor="bottom"),
        margin=dict(l=50, r=60, t=90, b=50),
    )
    fig.update_xaxes(title=None, tickfont=dict(size=10))
    fig.update_yaxes(tickfont=dict(size=10), exponentformat="e", showexponent="all")
    for j in range(n):
        fig.update_xaxes(title_text="horizon (observations)", row=n, col=j + 1)
    fig.add_annotation(
        text=f"rows: responding series; columns: shocked series; units: {yunit}",
        x=0, y=-0.06 if n > 2 else -0.15, xref="paper", yref="paper", showarrow=False,
        xanchor="left", font=dict(size=11, color="#444"),
    )  # fmt: skip
    return fig


def responses_compare_figure(
    first: np.ndarray, second: np.ndarray, names: Sequence[str], *, labels: tuple[str, str],
    title: str,
) -> go.Figure:
    """Two response grids (H+1, n, n) overlaid: the first date window solid, the second dashed."""
    H1, n, _ = first.shape
    h = list(range(H1))
    fig = make_subplots(
        rows=n, cols=n, shared_xaxes=True,
        column_titles=[f"shock: {s}" for s in names], row_titles=list(names),
        horizontal_spacing=0.03, vertical_spacing=0.03,
    )  # fmt: skip
    for i in range(n):
        for j in range(n):
            for k, (arr, label, style) in enumerate(
                ((first, labels[0], dict(color=BLUE)), (second, labels[1], dict(color=ORANGE, dash="dash")))
            ):
                fig.add_trace(
                    go.Scatter(
                        x=h, y=arr[:, i, j], mode="lines", line=dict(width=1.6, **style),
                        name=label, legendgroup=str(k), showlegend=(i == 0 and j == 0),
                        hovertemplate=f"{label}<br>{names[i]} ← {names[j]}, h=%{{x}}: %{{y:.4g}}<extra></extra>",
                    ),
                    row=i + 1, col=j + 1,
                )  # fmt: skip
            fig.add_hline(y=0, line=dict(color=GREY, width=0.8), row=i + 1, col=j + 1)
    _base(fig, height=max(360, 40 + 110 * n), title=title)
    fig.update_layout(
        legend=dict(orientation="h", y=1.0, x=1.0, xanchor="right", yanchor="bottom"),
        margin=dict(l=50, r=60, t=90, b=50),
    )
    fig.update_xaxes(tickfont=dict(size=10))
    fig.update_yaxes(tickfont=dict(size=10))
    for j in range(n):
        fig.update_xaxes(title_text="horizon (observations)", row=n, col=j + 1)
    return fig


# ---------------------------------------------------------------------------------------------
# variance shares
# ---------------------------------------------------------------------------------------------


def shares_figure(
    panels: Sequence[tuple[str, np.ndarray]], names: Sequence[str], *, title: str
) -> go.Figure:
    """Stacked horizontal bars, one panel per decomposition: per series, percent from each shock.

    panels : (panel title, (n, n) shares [variable, shock] in percent, rows summing to 100).
    """
    n = len(names)
    fig = make_subplots(
        rows=1, cols=len(panels), shared_yaxes=True, subplot_titles=[t for t, _ in panels],
        horizontal_spacing=0.06,
    )  # fmt: skip
    for col, (_, table) in enumerate(panels, start=1):
        for j in range(n):
            fig.add_trace(
                go.Bar(
                    y=list(names), x=table[:, j], orientation="h", name=f"shock: {names[j]}",
                    marker=dict(color=colour(j), line=dict(color="white", width=0.5)),
                    legendgroup=names[j], showlegend=col == 1,
                    hovertemplate=f"%{{y}}: %{{x:.1f}}% from {names[j]}<extra></extra>",
                ),
                row=1, col=col,
            )  # fmt: skip
        fig.update_xaxes(title_text="share of forecast-error variance, %", range=[0, 100], row=1, col=col)
    _base(fig, height=max(320, 120 + 45 * n), title=title)
    fig.update_layout(barmode="stack", legend=dict(traceorder="normal", title="source of the shock"))
    fig.update_yaxes(autorange="reversed", title_text="series")
    return fig


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
) -> go.Figure:
    """Two heatmaps [caused, causing]: p-values at the window end, and percent of windows significant.

    Cells significant at `level` carry a ★ in the first panel.
    """
    text = [
        ["" if not np.isfinite(v) else f"{v:.3f}{' ★' if v < level else ''}" for v in row]
        for row in pvalues
    ]
    fig = make_subplots(
        rows=1, cols=2, horizontal_spacing=0.16,
        subplot_titles=[
            f"p-value at the window ending {window_end} (★: p < {level:g})",
            f"% of {n_windows} windows with p < {level:g}, {date_label}",
        ],
    )  # fmt: skip
    fig.add_trace(
        go.Heatmap(
            z=pvalues, x=list(names), y=list(names), zmin=0, zmax=1, colorscale=SEQUENTIAL,
            reversescale=True, text=text, texttemplate="%{text}",
            colorbar=dict(title="p-value", x=0.42, len=0.9),
            hovertemplate="does %{x} lead %{y}?<br>p = %{z:.4f}<extra></extra>",
        ),
        row=1, col=1,
    )  # fmt: skip
    pct = 100.0 * share
    fig.add_trace(
        go.Heatmap(
            z=pct, x=list(names), y=list(names), zmin=0, zmax=100, colorscale=SEQUENTIAL,
            text=_heat_text(pct, ".0f"), texttemplate="%{text}%",
            colorbar=dict(title="% of windows", x=1.0, len=0.9),
            hovertemplate="%{x} leads %{y} in %{z:.1f}% of windows<extra></extra>",
        ),
        row=1, col=2,
    )  # fmt: skip
    n = len(names)
    _base(fig, height=max(340, 150 + 48 * n), title="Granger causality: does the column series lead the row series?")
    for col in (1, 2):
        fig.update_xaxes(title_text="leading series (causing)", row=1, col=col, tickangle=-30)
        fig.update_yaxes(title_text="led series (caused)", row=1, col=col, autorange="reversed")
    return fig


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
) -> go.Figure:
    """Directed graph of net pairwise spillovers on a circle.

    table : (n, n) [target, source] percent. The net spillover from i to j is
    table[j, i] − table[i, j]; an arrow points from the net transmitter to the receiver, its width
    proportional to the size. Node size follows "to others" or "from others"; node colour is the net
    directional spillover (to − from), blue for net receivers, vermillion for net transmitters.
    """
    n = len(names)
    angle = np.pi / 2 - 2 * np.pi * np.arange(n) / n
    xs, ys = np.cos(angle), np.sin(angle)
    fig = go.Figure()
    pairs = []
    for i in range(n):
        for j in range(i + 1, n):
            net = table[j, i] - table[i, j]
            if np.isfinite(net):
                src, dst = (i, j) if net >= 0 else (j, i)
                pairs.append((src, dst, abs(float(net))))
    biggest = max((p[2] for p in pairs), default=0.0) or 1.0
    mid_x, mid_y, mid_text = [], [], []
    for src, dst, size in pairs:
        width = 0.8 + 7.0 * size / biggest
        # stop the arrow short of the target node's centre
        tx = xs[dst] - 0.12 * (xs[dst] - xs[src])
        ty = ys[dst] - 0.12 * (ys[dst] - ys[src])
        fig.add_annotation(
            x=tx, y=ty, ax=xs[src], ay=ys[src], xref="x", yref="y", axref="x", ayref="y",
            showarrow=True, arrowhead=2, arrowsize=0.8, arrowwidth=width,
            arrowcolor=f"rgba(0,0,0,{0.25 + 0.6 * size / biggest:.2f})", text="",
        )  # fmt: skip
        mid_x.append(0.5 * (xs[src] + tx))
        mid_y.append(0.5 * (ys[src] + ty))
        mid_text.append(f"{names[src]} → {names[dst]}: net {size:.2f} pp")
    fig.add_trace(
        go.Scatter(
            x=mid_x, y=mid_y, mode="markers", marker=dict(size=10, opacity=0), text=mid_text,
            hovertemplate="%{text}<extra></extra>", showlegend=False, name="pairs",
        )
    )  # fmt: skip
    sizes = np.asarray(to_others if size_by == "to" else from_others, dtype=float)
    top = np.nanmax(sizes) if sizes.size and np.isfinite(sizes).any() else 1.0
    top = top or 1.0
    net = np.asarray(to_others, dtype=float) - np.asarray(from_others, dtype=float)
    lim = float(np.nanmax(np.abs(net))) if net.size and np.isfinite(net).any() else 1.0
    lim = lim or 1.0
    fig.add_trace(
        go.Scatter(
            x=xs, y=ys, mode="markers+text", text=list(names), textposition="top center",
            textfont=dict(size=13),
            marker=dict(
                size=22 + 38 * np.nan_to_num(sizes) / top, color=net, cmin=-lim, cmax=lim,
                colorscale=DIVERGING, line=dict(color="#333", width=1),
                colorbar=dict(title="net, pp<br>(to − from)"),
            ),
            customdata=np.column_stack([to_others, from_others, net]),
            hovertemplate=(
                "%{text}<br>to others %{customdata[0]:.1f}%<br>from others %{customdata[1]:.1f}%"
                "<br>net %{customdata[2]:+.1f} pp<extra></extra>"
            ),
            showlegend=False, name="series",
        )
    )  # fmt: skip
    _base(fig, height=520, title=title)
    fig.update_xaxes(visible=False, range=[-1.35, 1.35])
    fig.update_yaxes(visible=False, range=[-1.3, 1.35], scaleanchor="x", scaleratio=1)
    fig.add_annotation(
        text=(
            f"arrow: net transmitter → receiver, width ∝ net spillover; node size: "
            f"spillover {'to' if size_by == 'to' else 'from'} others"
        ),
        x=0, y=-0.02, xref="paper", yref="paper", showarrow=False, xanchor="left",
        font=dict(size=11, color="#444"),
    )  # fmt: skip
    return fig


# ---------------------------------------------------------------------------------------------
# window comparison
# ---------------------------------------------------------------------------------------------


def pairwise_compare_figure(
    first: np.ndarray, second: np.ndarray, names: Sequence[str], *, labels: tuple[str, str]
) -> go.Figure:
    """Three heatmaps [target, source] in percent: first window, second window, second − first."""
    diff = second - first
    lim = float(np.nanmax(np.abs(diff))) if np.isfinite(diff).any() else 1.0
    top = float(np.nanmax([np.nanmax(first), np.nanmax(second)])) if np.isfinite(first).any() else 100.0
    fig = make_subplots(
        rows=1, cols=3, horizontal_spacing=0.09,
        subplot_titles=[f"A: {labels[0]}", f"B: {labels[1]}", "change B − A, pp"],
    )  # fmt: skip
    for col, (z, scale, zmin, zmax, cb_x, fmt) in enumerate(
        (
            (first, SEQUENTIAL, 0, top, 0.27, ".1f"),
            (second, SEQUENTIAL, 0, top, 0.635, ".1f"),
            (diff, DIVERGING, -(lim or 1), lim or 1, 1.0, "+.1f"),
        ),
        start=1,
    ):
        fig.add_trace(
            go.Heatmap(
                z=z, x=list(names), y=list(names), zmin=zmin, zmax=zmax, colorscale=scale,
                text=_heat_text(z, fmt), texttemplate="%{text}",
                colorbar=dict(x=cb_x, len=0.9, thickness=10, title="%" if col < 3 else "pp"),
                hovertemplate="%{y} ← %{x}: %{z:.2f}<extra></extra>",
            ),
            row=1, col=col,
        )  # fmt: skip
        fig.update_yaxes(autorange="reversed", row=1, col=col)
        fig.update_xaxes(tickangle=-30, row=1, col=col)
    fig.update_yaxes(title_text="receiving series (target)", row=1, col=1)
    fig.update_xaxes(title_text="sending series (source)", row=1, col=2)
    _base(
        fig, height=max(340, 150 + 45 * len(names)),
        title="Pairwise spillovers averaged over each date window (% of the target's forecast-error variance)",
    )
    return fig


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
) -> go.Figure:
    """Four stacked panels over window ends: lag order, spectral radius, residual-test p, observations.

    Spectral radii at or above `near_one` are drawn orange, at or above one vermillion; skipped
    windows appear as ✕ on the lag-order panel with their reason on hover.
    """
    fig = make_subplots(
        rows=4, cols=1, shared_xaxes=True, vertical_spacing=0.05,
        subplot_titles=[
            "lag order p", "spectral radius of the companion matrix (≥ 1: not stationary)",
            "residual autocorrelation test p-value (portmanteau)", "observations in the window",
        ],
    )  # fmt: skip
    x = list(ends)
    fig.add_trace(go.Scatter(x=x, y=list(lags), mode="lines", line=dict(shape="hv", color=BLUE),
                             name="lag order", showlegend=False,
                             hovertemplate="%{x|%Y-%m-%d}: p = %{y}<extra></extra>"), row=1, col=1)
    r = np.array([np.nan if v is None else float(v) for v in radius])
    colours = [VERMILLION if v >= 1 else ORANGE if v >= near_one else BLUE for v in np.nan_to_num(r)]
    fig.add_trace(go.Scatter(x=x, y=r, mode="lines+markers", line=dict(color="#9ecae1", width=1),
                             marker=dict(color=colours, size=5), name="spectral radius",
                             showlegend=False,
                             hovertemplate="%{x|%Y-%m-%d}: %{y:.4f}<extra></extra>"), row=2, col=1)
    fig.add_hline(y=1.0, line=dict(color=VERMILLION, dash="dash", width=1), row=2, col=1)
    fig.add_hline(y=near_one, line=dict(color=ORANGE, dash="dot", width=1), row=2, col=1)
    flagged = [(d, v) for d, v in zip(x, r, strict=True) if np.isfinite(v) and v >= near_one]
    fig.add_trace(go.Scatter(x=[d for d, _ in flagged], y=[v for _, v in flagged], mode="markers",
                             marker=dict(color=VERMILLION, size=9, symbol="diamond-open"),
                             name=f"radius ≥ {near_one:g}", showlegend=True), row=2, col=1)
    fig.add_trace(go.Scatter(x=x, y=list(portmanteau), mode="markers", marker=dict(color=GREEN, size=4),
                             name="p-value", showlegend=False,
                             hovertemplate="%{x|%Y-%m-%d}: p = %{y:.3f}<extra></extra>"), row=3, col=1)
    fig.add_hline(y=0.05, line=dict(color=GREY, dash="dot", width=1), row=3, col=1)
    fig.add_trace(go.Scatter(x=x, y=list(nobs), mode="lines", line=dict(color=PURPLE),
                             name="observations", showlegend=False), row=4, col=1)
    if skipped:
        fig.add_trace(
            go.Scatter(
                x=[d for d, _ in skipped], y=[0] * len(skipped), mode="markers",
                marker=dict(symbol="x", size=10, color=VERMILLION), text=[r for _, r in skipped],
                name=f"skipped window ({len(skipped)})",
                hovertemplate="%{x|%Y-%m-%d} skipped: %{text}<extra></extra>",
            ),
            row=1, col=1,
        )  # fmt: skip
    _base(fig, height=640, title=title)
    fig.update_layout(legend=dict(orientation="h", y=1.0, x=1.0, xanchor="right", yanchor="bottom"))
    fig.update_yaxes(title_text="lags", row=1, col=1, rangemode="tozero")
    fig.update_yaxes(title_text="radius", row=2, col=1)
    fig.update_yaxes(title_text="p", row=3, col=1, range=[0, 1])
    fig.update_yaxes(title_text="rows", row=4, col=1, rangemode="tozero")
    fig.update_xaxes(title_text="window end (date)", row=4, col=1)
    return fig


# ---------------------------------------------------------------------------------------------
# own cycles
# ---------------------------------------------------------------------------------------------


def cycles_figure(
    frequencies: np.ndarray,
    spectra: Sequence[tuple[str, np.ndarray, float | None]],
    *,
    title: str,
) -> go.Figure:
    """Each series' AR spectral density against frequency, with its dominant cycle marked.

    frequencies : (F,) in cycles per observation, 0..0.5.
    spectra : (name, (F,) density, peak period in observations or None).
    """
    fig = go.Figure()
    for k, (name, density, period) in enumerate(spectra):
        fig.add_trace(
            go.Scatter(
                x=frequencies, y=density, mode="lines", name=name,
                line=dict(color=colour(k), width=1.8),
                hovertemplate=(
                    f"{name}<br>%{{x:.3f}} cycles/obs (period %{{customdata:.1f}} obs)"
                    "<br>density %{y:.3g}<extra></extra>"
                ),
                customdata=np.where(frequencies > 0, 1.0 / np.maximum(frequencies, 1e-12), np.inf),
            )
        )  # fmt: skip
        if period is not None:
            f = 1.0 / period
            y = float(np.interp(f, frequencies, density))
            fig.add_trace(
                go.Scatter(
                    x=[f], y=[y], mode="markers", marker=dict(color=colour(k), size=10, symbol="star"),
                    name=f"{name}: cycle {period:.1f} obs", showlegend=True,
                    hovertemplate=f"{name}: dominant cycle {period:.1f} observations<extra></extra>",
                )
            )  # fmt: skip
    _base(fig, height=460, title=title)
    fig.update_xaxes(title="frequency (cycles per observation; period = 1 / frequency)", range=[0, 0.5])
    fig.update_yaxes(title="spectral density (log scale, squared units per cycle)", type="log")
    return fig
