"""Plotly figures of the report. Pure: data in, `go.Figure` out; nothing here touches files.

Colours are the Okabe–Ito set (Okabe & Ito 2008, "Color Universal Design"), distinguishable
under the common colour-vision deficiencies; beyond eight series the colours repeat with another
dash pattern, so no two lines look alike.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

import numpy as np
import plotly.graph_objects as go
import polars as pl
from plotly.subplots import make_subplots

if TYPE_CHECKING:
    from pipeline.export._data import DecompositionSet, ResponseSet

__all__ = [
    "PALETTE",
    "colour",
    "connectedness_figure",
    "decomposition_figure",
    "health_figure",
    "net_figure",
    "response_figures",
]

#: Okabe–Ito, black first moved last (it reads as "axis", so series start with orange).
PALETTE = ("#E69F00", "#56B4E9", "#009E73", "#0072B2", "#D55E00", "#CC79A7", "#F0E442", "#000000")
_DASHES = ("solid", "dash", "dot", "dashdot")
_LINE = "#0072B2"  # single-series lines: Okabe–Ito blue
_BAND = "rgba(86, 180, 233, 0.30)"  # Okabe–Ito sky blue, translucent
_REFERENCE = "#D55E00"  # reference lines (zero, unit circle): vermillion
#: Largest n drawn as one n × n grid of responses; above it, one figure per shock.
GRID_MAX = 6


def colour(i: int) -> str:
    return PALETTE[i % len(PALETTE)]


def dash(i: int) -> str:
    return _DASHES[(i // len(PALETTE)) % len(_DASHES)]


def _base(fig: go.Figure, *, title: str, height: int) -> go.Figure:
    fig.update_layout(
        template="simple_white",
        title={"text": title, "x": 0.0, "xanchor": "left", "font": {"size": 15}},
        height=height,
        margin={"l": 60, "r": 20, "t": 50, "b": 70},
        font={"family": "Helvetica, Arial, sans-serif", "size": 12},
        legend={"orientation": "h", "yanchor": "top", "y": -0.2, "x": 0.0,
                "traceorder": "normal"},
        hovermode="x unified",
    )
    return fig


def connectedness_figure(conn: pl.DataFrame, *, universe: str) -> go.Figure:
    """Total connectedness (percent) against window end."""
    fig = go.Figure(go.Scatter(
        x=conn["window_end"].to_list(), y=conn["total"].to_list(), mode="lines",
        line={"color": _LINE, "width": 2}, name="total connectedness",
        hovertemplate="%{x|%Y-%m-%d}: %{y:.2f}%<extra></extra>",
    ))
    if conn.height <= 40:
        fig.update_traces(mode="lines+markers")
    fig.update_yaxes(title_text="percent of forecast-error variance", rangemode="tozero")
    return _base(fig, title=f"Total connectedness, {universe}", height=340)


def net_figure(direc: pl.DataFrame, names: tuple[str, ...]) -> go.Figure:
    """Net directional connectedness (to others − from others) per series against window end."""
    fig = go.Figure()
    for i, s in enumerate(names):
        d = direc.filter(pl.col("series") == s)
        fig.add_trace(go.Scatter(
            x=d["window_end"].to_list(), y=d["net"].to_list(), mode="lines", name=s,
            line={"color": colour(i), "dash": dash(i), "width": 1.6},
            hovertemplate=f"{s}: " + "%{y:.2f}<extra></extra>",
        ))
    fig.add_hline(y=0, line={"color": "#888888", "width": 1})
    fig.update_yaxes(title_text="net, percentage points")
    return _base(fig, title="Net transmitter (+) or receiver (−), by series", height=360)


def _band_traces(fig: go.Figure, h: np.ndarray, mid: np.ndarray, lo: np.ndarray | None,
                 hi: np.ndarray | None, *, row: int, col: int, show_legend: bool,
                 coverage: float | None) -> None:
    if lo is not None and hi is not None:
        label = f"{coverage:.0%} band" if coverage else "band"
        fig.add_trace(go.Scatter(x=h, y=hi, mode="lines", line={"width": 0}, hoverinfo="skip",
                                 showlegend=False, legendgroup="band"), row=row, col=col)
        fig.add_trace(go.Scatter(x=h, y=lo, mode="lines", line={"width": 0}, fill="tonexty",
                                 fillcolor=_BAND, name=label, showlegend=show_legend,
                                 legendgroup="band", hoverinfo="skip"), row=row, col=col)
    fig.add_trace(go.Scatter(x=h, y=mid, mode="lines", line={"color": _LINE, "width": 1.8},
                             name="response", showlegend=show_legend, legendgroup="resp",
                             hovertemplate="h=%{x}: %{y:.4g}<extra></extra>"), row=row, col=col)
    fig.add_hline(y=0, line={"color": _REFERENCE, "width": 0.8, "dash": "dot"}, row=row, col=col)


def response_figures(rs: ResponseSet, names: tuple[str, ...]) -> list[go.Figure]:
    """Impulse responses with bands: one n × n grid (rows: response, columns: shock) when
    n <= GRID_MAX, otherwise one figure per shock with the responses wrapped four to a row."""
    n = len(names)
    h = np.arange(rs.horizon + 1)

    def series(i: int, j: int) -> tuple[np.ndarray, np.ndarray | None, np.ndarray | None]:
        lo = None if rs.lower is None else rs.lower[:, i, j]
        hi = None if rs.upper is None else rs.upper[:, i, j]
        return rs.response[:, i, j], lo, hi

    if n <= GRID_MAX:
        titles = [f"{names[i]} ← {names[j]}" for i in range(n) for j in range(n)]
        fig = make_subplots(rows=n, cols=n, subplot_titles=titles, shared_xaxes=True,
                            horizontal_spacing=0.06, vertical_spacing=0.09 if n > 1 else 0.1)
        for i in range(n):
            for j in range(n):
                mid, lo, hi = series(i, j)
                _band_traces(fig, h, mid, lo, hi, row=i + 1, col=j + 1,
                             show_legend=(i == 0 and j == 0), coverage=rs.coverage)
        fig.update_annotations(font_size=11)
        fig.update_xaxes(title_text="horizon", row=n)
        _base(fig, title=f"Response (row) to a shock in (column), {rs.identification} shocks",
              height=max(320, 190 * n))
        fig.update_layout(hovermode="closest")
        return [fig]

    figs = []
    cols = 4
    rows = math.ceil(n / cols)
    for j in range(n):
        fig = make_subplots(rows=rows, cols=cols, subplot_titles=[f"{s}" for s in names],
                            shared_xaxes=True, horizontal_spacing=0.06, vertical_spacing=0.12)
        for i in range(n):
            mid, lo, hi = series(i, j)
            _band_traces(fig, h, mid, lo, hi, row=i // cols + 1, col=i % cols + 1,
                         show_legend=(i == 0), coverage=rs.coverage)
        fig.update_annotations(font_size=11)
        _base(fig, title=f"Responses to a shock in {names[j]} ({rs.identification} shocks)",
              height=max(300, 180 * rows))
        fig.update_layout(hovermode="closest")
        figs.append(fig)
    return figs


def decomposition_figure(ds: DecompositionSet, names: tuple[str, ...]) -> go.Figure:
    """Stacked bars: each series' H-step forecast-error variance split by shock, in percent."""
    last = 100.0 * ds.share[-1]  # (n, n) [variable, shock]
    fig = go.Figure()
    for j, s in enumerate(names):
        fig.add_trace(go.Bar(
            y=list(names), x=last[:, j], orientation="h", name=f"shock in {s}",
            marker={"color": colour(j), "pattern": {"shape": ["", "/", "\\", "x"][(j // 8) % 4]}},
            hovertemplate=f"%{{y}} from {s}: " + "%{x:.1f}%<extra></extra>",
        ))
    fig.update_layout(barmode="stack")
    fig.update_xaxes(range=[0, 100], ticksuffix="%")
    fig.update_yaxes(autorange="reversed")
    return _base(fig, title=(f"{ds.method.capitalize()} decomposition at {ds.horizon} steps: "
                             "percent of each series' forecast-error variance, by shock"),
                 height=max(280, 110 + 34 * len(names)))


def health_figure(fits: pl.DataFrame) -> go.Figure:
    """Spectral radius of each window's companion matrix (stable below 1) and the lag order."""
    fitted = fits.filter(pl.col("skip_reason").is_null())
    skipped = fits.filter(pl.col("skip_reason").is_not_null())
    fig = make_subplots(rows=2, cols=1, shared_xaxes=True, row_heights=[0.65, 0.35],
                        vertical_spacing=0.08)
    fig.add_trace(go.Scatter(
        x=fitted["window_end"].to_list(), y=fitted["spectral_radius"].to_list(), mode="lines",
        line={"color": _LINE, "width": 1.8}, name="spectral radius",
        hovertemplate="%{x|%Y-%m-%d}: %{y:.4f}<extra></extra>"), row=1, col=1)
    if skipped.height:
        fig.add_trace(go.Scatter(
            x=skipped["window_end"].to_list(), y=[0.0] * skipped.height, mode="markers",
            marker={"symbol": "x", "color": _REFERENCE, "size": 8}, name="skipped window",
            text=skipped["skip_reason"].to_list(),
            hovertemplate="%{x|%Y-%m-%d}: %{text}<extra></extra>"), row=1, col=1)
    fig.add_hline(y=1.0, line={"color": _REFERENCE, "width": 1, "dash": "dash"}, row=1, col=1,
                  annotation_text="stability limit", annotation_position="top left")
    fig.add_trace(go.Scatter(
        x=fitted["window_end"].to_list(), y=fitted["lags"].to_list(), mode="lines",
        line={"color": PALETTE[2], "width": 1.5, "shape": "hv"}, name="lag order",
        hovertemplate="%{x|%Y-%m-%d}: p=%{y}<extra></extra>"), row=2, col=1)
    fig.update_yaxes(title_text="spectral radius", rangemode="tozero", row=1, col=1)
    fig.update_yaxes(title_text="lags", rangemode="tozero", dtick=1, row=2, col=1)
    return _base(fig, title="Model health by window", height=420)
