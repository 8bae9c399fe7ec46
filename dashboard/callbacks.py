"""Callbacks: each parses the browser's inputs, asks `data` and arlib, calls `figures`, returns.

Every ``*_view`` function is a plain function of a `Snapshot` and the raw input values, testable
without Dash; `register` wires them to component ids. A view returns ``(figure, rows, note)``:
the chart, the rows behind it (kept in a store for the CSV download) and one line of text saying
which windows it shows. Bad or hostile input (unknown universe, malformed dates, odd options) never
reaches SQL text: it fails validation and the view shows a message instead of a chart.

Quantities the snapshot does not store (responses at a longer horizon, another Cholesky ordering,
cumulative paths, a univariate AR spectrum, bootstrap bands) are derived by arlib on request.
"""

from __future__ import annotations

import csv
import datetime as dt
import io
import logging
import math
import re
import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from . import figures
from ._errors import DashboardError, WindowError
from .data import DateWindow, Snapshot, Universe, parse_date

__all__ = [
    "BAND_CHOICES",
    "IDENTIFICATIONS",
    "compare_view",
    "csv_file",
    "cycles_view",
    "health_view",
    "index_view",
    "leadlag_view",
    "network_view",
    "paths_view",
    "register",
    "safe_filename",
    "shares_view",
    "sync_window",
]

log = logging.getLogger(__name__)

IDENTIFICATIONS = {"generalized": "generalized (order-free)", "cholesky": "Cholesky (recursive ordering)"}
BAND_CHOICES = {"none": "no band", "stored": "stored band", "bootstrap": "compute a bootstrap band now"}
MAX_HORIZON = 60
BOOTSTRAP_DRAWS = 199
BOOTSTRAP_COVERAGE = 0.90
Rows = list[dict[str, Any]]
ViewResult = tuple[figures.Figure, Rows, str]


# ---------------------------------------------------------------------------------------------
# input parsing (everything from the browser is untrusted)
# ---------------------------------------------------------------------------------------------


def parse_horizon(value: Any) -> int:
    try:
        h = int(value)
    except (TypeError, ValueError, OverflowError):
        h = -1
    if isinstance(value, bool) or not 1 <= h <= MAX_HORIZON or (isinstance(value, float) and h != value):
        msg = f"`horizon` must be a whole number from 1 to {MAX_HORIZON}, got {str(value)[:20]!r}"
        raise WindowError(msg)
    return h


def parse_choice(value: Any, choices: Sequence[str] | dict[str, str], name: str) -> str:
    if not isinstance(value, str) or value not in choices:
        msg = f"`{name}` must be one of {list(choices)}, got {str(value)[:40]!r}"
        raise WindowError(msg)
    return value


def parse_fraction(value: Any, name: str, lo: float, hi: float) -> float:
    try:
        x = float(value)
    except (TypeError, ValueError):
        x = math.nan
    if isinstance(value, bool) or not (lo < x <= hi):
        msg = f"`{name}` must be a number in ({lo:g}, {hi:g}], got {str(value)[:20]!r}"
        raise WindowError(msg)
    return x


def parse_order(value: Any, universe: Universe) -> tuple[str, ...]:
    """A Cholesky ordering: the chosen series first (in the chosen order), the rest as stored."""
    chosen: list[str] = []
    if isinstance(value, (list, tuple)):
        for s in value:
            if isinstance(s, str) and s in universe.series and s not in chosen:
                chosen.append(s)
    return (*chosen, *[s for s in universe.series if s not in chosen])


def _flag(value: Any, name: str) -> bool:
    if isinstance(value, bool):
        return value
    if isinstance(value, (list, tuple)):
        return name in value
    return False


def _iso(d: Any) -> str:
    return d.isoformat() if isinstance(d, dt.date) else str(d)


def _num(x: Any) -> float | None:
    """A float for the CSV rows; NaN and None become empty cells."""
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def _nums(values: Any) -> list[float | None]:
    """`_num` of every element of an array, in C order (one `tolist`, a loop only over gaps)."""
    arr = np.asarray(values, dtype=np.float64).ravel()
    out: list[float | None] = arr.tolist()
    if not np.isfinite(arr).all():
        out = [v if math.isfinite(v) else None for v in arr.tolist()]
    return out


def _grid_index(H1: int, n: int) -> list[tuple[int, int, int]]:
    """(h, i, j) in the C order of an (H1, n, n) array."""
    return [(h, i, j) for h in range(H1) for i in range(n) for j in range(n)]


def _guard(
    view: Callable[..., ViewResult], *, height: int = 320
) -> Callable[..., ViewResult]:
    """Turn expected trouble into a message chart; never show a traceback or internals to the page."""

    def wrapper(*args: Any, **kwargs: Any) -> ViewResult:
        import arlib

        try:
            return view(*args, **kwargs)
        except (DashboardError, arlib.ArlibError) as exc:
            text = str(exc)
            return figures.message_figure(_wrap(text), height=height), [], text
        except Exception:
            log.exception("view %s failed", view.__name__)
            text = "This view could not be computed; the server log has the details."
            return figures.message_figure(text, height=height), [], text

    wrapper.__name__ = view.__name__
    wrapper.__doc__ = view.__doc__
    wrapper.__wrapped__ = view  # type: ignore[attr-defined]
    return wrapper


def _wrap(text: str, width: int = 90) -> str:
    words, lines, line = text.split(), [], ""
    for w in words:
        if len(line) + len(w) + 1 > width:
            lines.append(line)
            line = w
        else:
            line = f"{line} {w}".strip()
    lines.append(line)
    return "<br>".join(lines)


def _model(fit: Any, universe: Universe) -> Any:
    """The stored window's VAR as an arlib process (an unstable window still gives its responses)."""
    import arlib

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", arlib.UnstableProcessWarning)
        return arlib.var_process(fit.coefs, fit.sigma_u, fit.intercept, names=universe.series)


# ---------------------------------------------------------------------------------------------
# the date window
# ---------------------------------------------------------------------------------------------


def _relayout_range(relayout: Any) -> tuple[Any, Any] | str | None:
    """The x-range a plotly relayout event sets: (start, end), "auto", or None when it sets none."""
    if not isinstance(relayout, dict):
        return None
    if relayout.get("xaxis.autorange") or relayout.get("xaxis.rangeslider.autorange"):
        return "auto"
    rng = relayout.get("xaxis.range")
    if isinstance(rng, (list, tuple)) and len(rng) == 2:
        return rng[0], rng[1]
    if "xaxis.range[0]" in relayout and "xaxis.range[1]" in relayout:
        return relayout["xaxis.range[0]"], relayout["xaxis.range[1]"]
    return None


def sync_window(
    snap: Snapshot,
    universe: Any,
    start: Any,
    end: Any,
    relayout: Any,
    trigger: str | None,
) -> tuple[str, str, dict[str, str], str]:
    """One source of truth for the date window: date inputs, the chart's range slider, the universe.

    Returns (start input, end input, window state, note). A new universe resets the window to its
    whole history; a range-slider move or zoom sets both dates; typed dates are parsed strictly and
    clamped to the stored history.
    """
    u = snap.universe(universe)
    lo, hi = snap.date_bounds(u.name)
    if trigger == "relayout":
        rng = _relayout_range(relayout)
        if rng == "auto":
            start, end = lo, hi
        elif isinstance(rng, tuple):
            start, end = parse_date(rng[0], name="range start"), parse_date(rng[1], name="range end")
        else:
            raise WindowError("the chart's range did not change")
    elif trigger in (None, "universe"):
        start, end = lo, hi
    window = snap.window({"universe": u.name, "start": start, "end": end})
    used = snap.fitted_end(window)
    count = len(snap.index_in(window))
    note = (
        f"Date window {window.label} ({count} windows). Views at one window use the window ending "
        f"{used.isoformat()}."
    )
    return window.start.isoformat(), window.end.isoformat(), window.as_store(), note


# ---------------------------------------------------------------------------------------------
# views
# ---------------------------------------------------------------------------------------------


@_guard
def index_view(snap: Snapshot, state: Any, quantile: Any = 0.9) -> ViewResult:
    """The connectedness index over the whole history, x-range on the chosen window, stress shaded."""
    window = snap.window(state)
    q = parse_fraction(quantile, "stress quantile", 0.5, 0.999)
    history = snap.index_history(window.universe)
    dates = [d for d, _ in history]
    totals = [float(v) for _, v in history]
    threshold = float(np.quantile(totals, q)) if totals else None
    try:
        used = snap.fitted_end(window)
    except WindowError:
        used = None
    fig = figures.index_figure(
        dates, totals, start=window.start, end=window.end, reference_end=used,
        threshold=threshold, universe=window.universe,
    )  # fmt: skip
    rows = [
        {"window_end": _iso(d), "total_percent": _num(v),
         "stress": bool(threshold is not None and v >= threshold),
         "in_date_window": window.start <= d <= window.end}
        for d, v in history
    ]  # fmt: skip
    inside = [v for d, v in history if window.start <= d <= window.end]
    note = (
        f"Stress: index at or above its {100 * q:g}th percentile ({threshold:.1f}%) over the whole "
        f"history. Inside the window: mean {np.mean(inside):.1f}%, max {np.max(inside):.1f}%."
        if inside and threshold is not None
        else "No index values in this window."
    )
    return fig, rows, note


def _responses(
    snap: Snapshot,
    u: Universe,
    end: dt.date,
    *,
    identification: str,
    order: tuple[str, ...],
    horizon: int,
    cumulative: bool,
) -> tuple[np.ndarray, np.ndarray | None, np.ndarray | None, str]:
    """Responses (H+1, n, n) at window `end`: stored when they fit the request, else from arlib.

    Returns (response, stored lower, stored upper, where from). Stored bands are only offered for
    the stored identification and ordering, non-cumulative, up to the stored horizon.
    """
    import arlib

    default_order = order == u.series
    stored = snap.responses(u, end, identification)
    if stored is not None and stored[0].shape[0] - 1 >= horizon and (
        identification == "generalized" or default_order
    ):
        resp, lower, upper, _ = stored
        resp = resp[: horizon + 1]
        lower = None if lower is None else lower[: horizon + 1]
        upper = None if upper is None else upper[: horizon + 1]
        source = "stored"
    else:
        proc = _model(snap.fit(u, end), u)
        resp = arlib.impulse_responses(
            proc, horizon, shocks=identification,
            order=list(order) if identification == "cholesky" and not default_order else None,
        )  # fmt: skip
        lower = upper = None
        source = "derived by arlib from the stored coefficients"
    if cumulative:
        resp = np.cumsum(resp, axis=0)
        lower = upper = None
    return resp, lower, upper, source


def _bootstrap_band(
    snap: Snapshot,
    u: Universe,
    end: dt.date,
    *,
    identification: str,
    order: tuple[str, ...],
    horizon: int,
    cumulative: bool,
) -> tuple[np.ndarray, np.ndarray, str]:
    """A residual-bootstrap band from arlib, refitting the window's own prepared rows.

    Percentile intervals of `BOOTSTRAP_DRAWS` replications (arlib.irf_bands); the seed is fixed so
    the same request always draws the same band.
    """
    import arlib

    fit = snap.fit(u, end)
    y = snap.prepared(u, fit.window_start, fit.window_end)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", arlib.UnstableProcessWarning)
        model = arlib.fit_var(y, fit.lags, trend=u.trend, names=u.series)
        bands = arlib.irf_bands(
            model, horizon, shocks=identification, cumulative=cumulative,
            order=list(order) if identification == "cholesky" else None,
            coverage=BOOTSTRAP_COVERAGE, draws=BOOTSTRAP_DRAWS, rng=0,
        )  # fmt: skip
    return (
        np.asarray(bands.lower),
        np.asarray(bands.upper),
        f"{100 * BOOTSTRAP_COVERAGE:.0f}% residual-bootstrap band ({BOOTSTRAP_DRAWS} draws, "
        f"refitted on the window's {y.shape[0]} prepared rows)",
    )


@_guard
def paths_view(
    snap: Snapshot,
    state: Any,
    identification: Any,
    ordering: Any,
    cumulative: Any,
    horizon: Any,
    bands: Any,
) -> ViewResult:
    """Impulse-response grid (responses × shocks) at the reference window end."""
    window = snap.window(state)
    u = snap.universe(window.universe)
    ident = parse_choice(identification, IDENTIFICATIONS, "identification")
    band = parse_choice(bands or "none", BAND_CHOICES, "bands")
    H = parse_horizon(horizon)
    cum = _flag(cumulative, "cumulative")
    order = parse_order(ordering, u)
    end = snap.fitted_end(window)
    resp, lower, upper, source = _responses(
        snap, u, end, identification=ident, order=order, horizon=H, cumulative=cum
    )
    band_note = "no band"
    if band == "stored":
        if lower is None or upper is None:
            band_note = (
                "no stored band for this window and choice (the pipeline stores bands for its own "
                "identification, non-cumulative, usually at the latest window); pick 'compute a "
                "bootstrap band now'"
            )
        else:
            band_note = "stored band"
    elif band == "bootstrap":
        lower, upper, band_note = _bootstrap_band(
            snap, u, end, identification=ident, order=order, horizon=H, cumulative=cum
        )
    if band == "none":
        lower = upper = None
    label = "generalized" if ident == "generalized" else "Cholesky, order " + " → ".join(order)
    kind = "cumulative response" if cum else "response"
    title = f"Shock paths at the window ending {end} — {label}, {kind}, horizons 0–{H}"
    unit = (
        "cumulated change of the responding series per one-s.d. shock"
        if cum
        else "change of the responding series (as prepared) per one-s.d. shock"
    )
    fig = figures.responses_figure(resp, u.series, lower=lower, upper=upper, title=title, yunit=unit)
    end_text, names = _iso(end), u.series
    values = _nums(resp)
    lows = [None] * len(values) if lower is None else _nums(lower)
    highs = [None] * len(values) if upper is None else _nums(upper)
    rows = [
        {"window_end": end_text, "identification": ident, "cumulative": cum, "horizon": h,
         "response": names[i], "shock": names[j], "value": v, "lower": lo, "upper": hi}
        for (h, i, j), v, lo, hi in zip(_grid_index(H + 1, len(names)), values, lows, highs, strict=True)
    ]  # fmt: skip
    note = f"Window ending {end}; responses {source}; {band_note}."
    return fig, rows, note


def _shares(
    snap: Snapshot, u: Universe, end: dt.date, method: str, order: tuple[str, ...], horizon: int
) -> tuple[np.ndarray, str]:
    """(n, n) shares [variable, shock] in percent at `horizon` steps: stored, or from arlib."""
    import arlib

    stored = snap.decomposition(u, end, method)
    if stored is not None and stored.shape[0] >= horizon and (
        method == "generalized" or order == u.series
    ):
        return 100.0 * stored[horizon - 1], "stored"
    proc = _model(snap.fit(u, end), u)
    dec = arlib.variance_decomposition(
        proc, horizon, method=method,
        order=list(order) if method == "cholesky" and order != u.series else None,
    )  # fmt: skip
    return 100.0 * dec[-1], "derived by arlib"


@_guard
def shares_view(snap: Snapshot, state: Any, ordering: Any, horizon: Any) -> ViewResult:
    """Generalized and Cholesky variance shares per series at the chosen horizon."""
    window = snap.window(state)
    u = snap.universe(window.universe)
    H = parse_horizon(horizon)
    order = parse_order(ordering, u)
    end = snap.fitted_end(window)
    gen, gsrc = _shares(snap, u, end, "generalized", order, H)
    chol, csrc = _shares(snap, u, end, "cholesky", order, H)
    fig = figures.shares_figure(
        [("generalized<br>(rows normalised to 100%)", gen),
         ("Cholesky<br>(recursive order in the title)", chol)],
        u.series,
        title=(
            f"Variance shares at {H} steps ahead, window ending {end}<br><span style='font-size:11px;"
            f"color:#444'>Cholesky order (first = most exogenous): {' → '.join(order)}</span>"
        ),
    )  # fmt: skip
    rows = [
        {"window_end": _iso(end), "steps": H, "method": m, "series": u.series[i],
         "shock": u.series[j], "share_percent": _num(t[i, j])}
        for m, t in (("generalized", gen), ("cholesky", chol))
        for i in range(len(u.series)) for j in range(len(u.series))
    ]  # fmt: skip
    note = f"Window ending {end}; generalized {gsrc}, Cholesky {csrc}. Each bar sums to 100%."
    return fig, rows, note


@_guard
def leadlag_view(snap: Snapshot, state: Any, level: Any) -> ViewResult:
    """Granger p-values at the window end, and the share of windows significant in the date window."""
    window = snap.window(state)
    u = snap.universe(window.universe)
    alpha = parse_fraction(level, "significance level", 0.0, 0.5)
    end = snap.fitted_end(window)
    pvals = snap.granger_at(u, end)
    share, count = snap.granger_share(window, u, alpha)
    fig = figures.granger_figure(
        pvals, share, u.series, level=alpha, window_end=end, n_windows=count, date_label=window.label
    )
    n = len(u.series)
    rows = [
        {"window_end": _iso(end), "caused": u.series[i], "causing": u.series[j],
         "p_value": _num(pvals[i, j]), "level": alpha, "date_window": window.label,
         "windows": count, "share_significant": _num(share[i, j])}
        for i in range(n) for j in range(n) if i != j
    ]  # fmt: skip
    note = f"Window ending {end}; {count} windows from {window.label}; level {alpha:g}."
    return fig, rows, note


def _directional_from(table: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """to_others[j] = Σ_{i≠j} table[i, j], from_others[i] = Σ_{j≠i} table[i, j] (Diebold–Yilmaz 2012)."""
    off = np.where(np.eye(table.shape[0], dtype=bool), 0.0, np.nan_to_num(table))
    return off.sum(axis=0), off.sum(axis=1)


@_guard
def network_view(snap: Snapshot, state: Any, mode: Any, size_by: Any) -> ViewResult:
    """Directed graph of net pairwise spillovers, at the window end or averaged over the window."""
    window = snap.window(state)
    u = snap.universe(window.universe)
    how = parse_choice(mode, ("end", "mean"), "network mode")
    size = parse_choice(size_by, ("to", "from"), "node size")
    if how == "end":
        end = snap.fitted_end(window)
        table = snap.pairwise_at(u, end)
        what = f"at the window ending {end}"
        span = {"window_end": _iso(end)}
    else:
        table, count = snap.pairwise_mean(window, u)
        if count == 0:
            raise WindowError(f"no spillover tables between {window.label}")
        what = f"averaged over {count} windows, {window.label}"
        span = {"date_window": window.label, "windows": count}
    to_others, from_others = _directional_from(table)
    fig = figures.network_figure(
        table, u.series, to_others=to_others, from_others=from_others, size_by=size,
        title=f"Net pairwise spillovers {what}",
    )  # fmt: skip
    n = len(u.series)
    rows = [
        {**span, "source": u.series[j], "target": u.series[i], "share_percent": _num(table[i, j]),
         "net_source_to_target_pp": _num(table[i, j] - table[j, i])}
        for i in range(n) for j in range(n) if i != j
    ]  # fmt: skip
    note = f"Spillovers {what}. Node colour: net (to − from) in percentage points."
    return fig, rows, note


def _compare_windows(
    snap: Snapshot, window: DateWindow, a: Sequence[Any], b: Sequence[Any]
) -> tuple[DateWindow, DateWindow]:
    """The two date windows to compare; blank inputs default to the halves of the chosen window."""
    mid = window.start + (window.end - window.start) / 2
    defaults = (window.start, mid, mid + dt.timedelta(days=1), window.end)
    values = []
    for raw, default, name in zip(
        (*a, *b), defaults, ("A start", "A end", "B start", "B end"), strict=True
    ):
        values.append(default if raw in (None, "") else parse_date(raw, name=name))
    first = snap.window({"universe": window.universe, "start": values[0], "end": values[1]})
    second = snap.window({"universe": window.universe, "start": values[2], "end": values[3]})
    return first, second


@_guard
def compare_pairs_view(
    snap: Snapshot, state: Any, a_start: Any, a_end: Any, b_start: Any, b_end: Any
) -> ViewResult:
    """Pairwise spillovers averaged over date window A and B, and their change B − A."""
    window = snap.window(state)
    u = snap.universe(window.universe)
    first, second = _compare_windows(snap, window, (a_start, a_end), (b_start, b_end))
    ta, ca = snap.pairwise_mean(first, u)
    tb, cb = snap.pairwise_mean(second, u)
    if ca == 0 or cb == 0:
        raise WindowError(
            f"window {'A' if ca == 0 else 'B'} ({(first if ca == 0 else second).label}) holds no "
            "fitted windows; widen it"
        )
    fig = figures.pairwise_compare_figure(ta, tb, u.series, labels=(first.label, second.label))
    n = len(u.series)
    rows = [
        {"target": u.series[i], "source": u.series[j], "a_window": first.label, "a_windows": ca,
         "a_share_percent": _num(ta[i, j]), "b_window": second.label, "b_windows": cb,
         "b_share_percent": _num(tb[i, j]), "change_pp": _num(tb[i, j] - ta[i, j])}
        for i in range(n) for j in range(n)
    ]  # fmt: skip
    total_a = float(np.nansum(ta) - np.nansum(np.diag(ta))) / n
    total_b = float(np.nansum(tb) - np.nansum(np.diag(tb))) / n
    note = (
        f"A: {first.label} ({ca} windows), B: {second.label} ({cb} windows); "
        f"total connectedness of the averaged tables {total_a:.1f}% → {total_b:.1f}%."
    )
    return fig, rows, note


@_guard
def compare_paths_view(
    snap: Snapshot,
    state: Any,
    a_start: Any,
    a_end: Any,
    b_start: Any,
    b_end: Any,
    identification: Any,
    ordering: Any,
    horizon: Any,
) -> ViewResult:
    """Impulse responses at the last fitted window of A and of B, overlaid."""
    window = snap.window(state)
    u = snap.universe(window.universe)
    first, second = _compare_windows(snap, window, (a_start, a_end), (b_start, b_end))
    ident = parse_choice(identification, IDENTIFICATIONS, "identification")
    H = parse_horizon(horizon)
    order = parse_order(ordering, u)
    ends = (snap.fitted_end(first), snap.fitted_end(second))
    paths = [
        _responses(snap, u, e, identification=ident, order=order, horizon=H, cumulative=False)[0]
        for e in ends
    ]
    labels = (f"A: window ending {ends[0]}", f"B: window ending {ends[1]}")
    fig = figures.responses_compare_figure(
        paths[0], paths[1], u.series, labels=labels,
        title=f"Shock paths, {ident}: A (solid) against B (dashed)",
    )  # fmt: skip
    n = len(u.series)
    names, a_end, b_end = u.series, _iso(ends[0]), _iso(ends[1])
    rows = [
        {"identification": ident, "horizon": h, "response": names[i], "shock": names[j],
         "a_window_end": a_end, "a_value": a, "b_window_end": b_end, "b_value": b, "change": d}
        for (h, i, j), a, b, d in zip(
            _grid_index(H + 1, n), _nums(paths[0]), _nums(paths[1]), _nums(paths[1] - paths[0]),
            strict=True,
        )
    ]  # fmt: skip
    note = f"A: window ending {ends[0]}; B: window ending {ends[1]}; {ident} shocks."
    return fig, rows, note


def compare_view(
    snap: Snapshot, state: Any, a_start: Any, a_end: Any, b_start: Any, b_end: Any,
    identification: Any, ordering: Any, horizon: Any,
) -> tuple[ViewResult, ViewResult]:
    """Both comparison charts (spillover tables and shock paths)."""
    return (
        compare_pairs_view(snap, state, a_start, a_end, b_start, b_end),
        compare_paths_view(snap, state, a_start, a_end, b_start, b_end, identification, ordering, horizon),
    )


@_guard
def health_view(snap: Snapshot, state: Any, near_one: Any = 0.98) -> ViewResult:
    """Lag order, spectral radius, residual test and observations over the date window."""
    window = snap.window(state)
    near = parse_fraction(near_one, "near-one threshold", 0.0, 1.0)
    rows_db = snap.health(window)
    if not rows_db:
        raise WindowError(f"no windows between {window.label}")
    cols = ["window_end", "window_start", "nobs", "lags", "spectral_radius", "stable",
            "portmanteau_p", "aic", "condition_number", "skip_reason"]  # fmt: skip
    records = [dict(zip(cols, r, strict=True)) for r in rows_db]
    fitted = [r for r in records if r["skip_reason"] is None]
    skipped = [(r["window_end"], str(r["skip_reason"])) for r in records if r["skip_reason"] is not None]
    fig = figures.health_figure(
        [r["window_end"] for r in fitted], [r["lags"] for r in fitted],
        [r["spectral_radius"] for r in fitted], [r["portmanteau_p"] for r in fitted],
        [r["nobs"] for r in fitted], skipped=skipped, near_one=near,
        title=f"Model health, {window.universe}, windows ending {window.label}",
    )  # fmt: skip
    flagged = sum(1 for r in fitted if r["spectral_radius"] is not None and r["spectral_radius"] >= near)
    rows = [
        {**{k: (_iso(v) if isinstance(v, dt.date) else v) for k, v in r.items()},
         "radius_flag": (
             "" if r["spectral_radius"] is None
             else "at or above one" if r["spectral_radius"] >= 1
             else "near one" if r["spectral_radius"] >= near else "")}
        for r in records
    ]  # fmt: skip
    note = (
        f"{len(fitted)} fitted windows, {len(skipped)} skipped, {flagged} with spectral radius ≥ "
        f"{near:g}."
    )
    return fig, rows, note


def skipped_rows(rows: Rows) -> list[tuple[str, str]]:
    """(window end, reason) of the skipped windows among the health rows."""
    return [(str(r["window_end"]), str(r["skip_reason"])) for r in rows if r.get("skip_reason")]


#: Frequencies of the own-cycle spectra, cycles per observation (ω = 2π f radians).
CYCLE_FREQUENCIES = np.linspace(0.0, 0.5, 161)
#: Largest own-AR order tried (AIC picks among 1..max(this, the window's VAR lag order)).
OWN_MAX_LAGS = 6


@dataclass(frozen=True)
class _OwnCycle:
    """One series' own-AR spectrum: AR order, density (F,), variance, dominant period or None."""

    name: str
    lags: int
    density: np.ndarray | None
    variance: float
    period: float | None
    radius: float


def _own_cycles(snap: Snapshot, u: Universe, end: dt.date) -> list[_OwnCycle]:
    """Fit each series' own AR on the window's prepared rows (cached per snapshot file and window)."""
    import arlib

    def compute() -> list[_OwnCycle]:
        fit = snap.fit(u, end)
        y = snap.prepared(u, fit.window_start, fit.window_end)
        out = []
        for i, name in enumerate(u.series):
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", arlib.UnstableProcessWarning)
                choice = arlib.select_lags(y[:, i], max(OWN_MAX_LAGS, fit.lags), names=[name])
                p = max(1, int(choice.best["aic"]))
                own = arlib.fit_var(y[:, i], p, names=[name])
            if not own.is_stable:
                out.append(_OwnCycle(name, p, None, math.nan, None, float(own.spectral_radius)))
                continue
            density = np.asarray(arlib.spectral_density(own, 2 * np.pi * CYCLE_FREQUENCIES))[:, 0, 0].real
            variance = float(np.asarray(arlib.stationary_covariance(own))[0, 0])
            peak = arlib.spectral_peak(own, grid=1024)
            period = float(peak.period) if peak.has_cycle else None
            out.append(_OwnCycle(name, p, density, variance, period, float(own.spectral_radius)))
        return out

    return snap.cached(("own-cycles", u.name, end), compute)  # type: ignore[no-any-return]


@_guard
def cycles_view(snap: Snapshot, state: Any) -> ViewResult:
    """Per series: the spectral density implied by its own AR, fitted on the reference window.

    Each series gets a univariate AR fitted on the window's prepared rows, its order chosen by AIC
    among 1..max(`OWN_MAX_LAGS`, the VAR's lag order); arlib gives its spectral density f(ω)
    (Hamilton 1994, eq. 10.4.43 with n = 1) and the frequency where it peaks. A peak strictly
    between 0 and π is a dominant cycle of period 2π/ω* observations; a peak at 0 means
    persistence without a cycle. The chart divides each density by the series' variance γ(0) (the
    density integrates to it over [−π, π]), so series in different units share an axis on which
    white noise is flat at 1/(2π).
    """
    window = snap.window(state)
    u = snap.universe(window.universe)
    end = snap.fitted_end(window)
    freqs = CYCLE_FREQUENCIES
    spectra: list[tuple[str, np.ndarray, float | None]] = []
    rows: Rows = []
    notes: list[str] = []
    end_text = end.isoformat()
    freq_list = freqs.tolist()
    for c in _own_cycles(snap, u, end):
        if c.density is None:
            notes.append(f"{c.name}: own AR({c.lags}) not stationary (radius {c.radius:.3f}), no spectrum")
            continue
        spectra.append((c.name, c.density / c.variance, c.period))
        notes.append(f"{c.name} AR({c.lags}): " + (f"{c.period:.1f} obs" if c.period is not None else "no cycle"))
        scaled = (c.density / c.variance).tolist()
        rows.extend(
            {"window_end": end_text, "series": c.name, "ar_lags": c.lags,
             "frequency_cycles_per_obs": f, "density": d, "density_over_variance": r,
             "dominant_period_obs": c.period}
            for f, d, r in zip(freq_list, c.density.tolist(), scaled, strict=True)
        )  # fmt: skip
    if not spectra:
        raise WindowError(f"no series has a stationary own AR in the window ending {end}")
    fig = figures.cycles_figure(
        freqs, spectra,
        title=f"Own-dynamics spectrum per series (univariate AR, order by AIC; window ending {end})",
    )  # fmt: skip
    note = f"Window ending {end}. Dominant cycle (period in observations): " + "; ".join(notes) + "."
    return fig, rows, note


# ---------------------------------------------------------------------------------------------
# downloads
# ---------------------------------------------------------------------------------------------

_SAFE = re.compile(r"[^A-Za-z0-9_.-]+")
_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")
MAX_CSV_ROWS = 200_000
MAX_CSV_CELLS = 4_000_000  # rows x columns of one download: MAX_CSV_ROWS rows of 20 columns


def safe_filename(*parts: Any, suffix: str = ".csv") -> str:
    """A download name made only of letters, digits, ``_ . -``; no path separators, no leading dot."""
    cleaned = (_SAFE.sub("-", str(p)).strip(".-") for p in parts if p not in (None, ""))
    text = "_".join(c for c in cleaned if c)
    text = re.sub(r"\.{2,}", ".", text).lstrip(".") or "shockflow"
    return text[:120] + suffix


def _cell(value: Any) -> Any:
    """A CSV cell; text that a spreadsheet would run as a formula is prefixed with a quote."""
    if value is None:
        return ""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return repr(float(value)) if isinstance(value, float) else str(value)
    text = str(value)
    return "'" + text if text.startswith(_FORMULA_START) else text


def csv_file(rows: Any, chart: Any, state: Any) -> dict[str, Any] | None:
    """The download for one chart: its rows as CSV and a safe file name, or None without rows."""
    if not isinstance(rows, list) or not rows or not all(isinstance(r, dict) for r in rows):
        return None
    rows = rows[:MAX_CSV_ROWS]
    # column names in first-seen order; a dict is the ordered set (a list's `in` made a request
    # with many keys quadratic: 100k keys held a server thread for 109 s)
    columns = list(dict.fromkeys(str(k) for r in rows for k in r))
    if len(columns) * len(rows) > MAX_CSV_CELLS:  # sparse rows would be written out dense
        return None
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow([_cell(c) for c in columns])
    for r in rows:
        writer.writerow([_cell(r.get(c)) for c in columns])
    s = state if isinstance(state, dict) else {}
    name = safe_filename("shockflow", s.get("universe"), chart, s.get("start"), s.get("end"))
    return {"content": buf.getvalue(), "filename": name, "type": "text/csv", "base64": False}


# ---------------------------------------------------------------------------------------------
# wiring
# ---------------------------------------------------------------------------------------------


def register(app: Any, snap: Snapshot, settings: Any = None) -> None:
    """Attach every callback to `app` (a `dash.Dash` whose layout comes from `layout.build`)."""
    from dash import MATCH, Input, Output, State, ctx, no_update
    from dash.exceptions import PreventUpdate

    from . import ids
    from .layout import as_json, report_links, skipped_table

    @app.callback(Output(ids.REPORTS, "children"), Input(ids.UNIVERSE, "value"))
    def _reports(universe):  # type: ignore[no-untyped-def]
        export_dir = getattr(settings, "export_dir", None)
        return report_links(export_dir, universe if isinstance(universe, str) else None)

    @app.callback(
        Output(ids.START, "value"), Output(ids.END, "value"), Output(ids.WINDOW, "data"),
        Output(ids.WINDOW_NOTE, "children"),
        Input(ids.UNIVERSE, "value"), Input(ids.START, "value"), Input(ids.END, "value"),
        Input(ids.INDEX_GRAPH, "relayoutData"), State(ids.WINDOW, "data"),
    )  # fmt: skip
    def _sync(universe, start, end, relayout, current):  # type: ignore[no-untyped-def]
        trigger = {ids.UNIVERSE: "universe", ids.INDEX_GRAPH: "relayout"}.get(
            ctx.triggered_id, "dates" if ctx.triggered_id else None
        )
        if trigger == "universe" and isinstance(current, dict) and current.get("universe") == universe:
            raise PreventUpdate
        try:
            out = sync_window(snap, universe, start, end, relayout, trigger)
        except DashboardError as exc:
            if trigger == "relayout":
                raise PreventUpdate from None
            return no_update, no_update, no_update, str(exc)
        if current == out[2] and trigger != "dates":
            raise PreventUpdate
        return out

    @app.callback(
        Output(ids.ORDERING, "options"), Output(ids.ORDERING, "value"), Output(ids.HORIZON, "value"),
        Output(ids.LEVEL, "value"), Output(ids.IDENTIFICATION, "value"),
        Input(ids.UNIVERSE, "value"), prevent_initial_call=True,
    )  # fmt: skip
    def _universe_defaults(universe):  # type: ignore[no-untyped-def]
        """A new universe brings its own series, horizon, test level and identification."""
        try:
            u = snap.universe(universe)
        except DashboardError:
            raise PreventUpdate from None
        ident = u.identification if u.identification in IDENTIFICATIONS else "generalized"
        return list(u.series), list(u.series), u.horizon, u.granger_level, ident

    @app.callback(
        Output(ids.INDEX_GRAPH, "figure"), Output(ids.chart_data("index"), "data"),
        Output(ids.STATUS, "children"),
        Input(ids.WINDOW, "data"), Input(ids.STRESS_QUANTILE, "value"),
    )  # fmt: skip
    def _index(state, quantile):  # type: ignore[no-untyped-def]
        return index_view(snap, state, quantile)

    def tab_gate(tab: str, active: Any) -> None:
        if active != tab:
            raise PreventUpdate

    @app.callback(
        Output(ids.PATHS_GRAPH, "figure"), Output(ids.chart_data("paths"), "data"),
        Output(ids.PATHS_NOTE, "children"),
        Input(ids.WINDOW, "data"), Input(ids.IDENTIFICATION, "value"), Input(ids.ORDERING, "value"),
        Input(ids.CUMULATIVE, "value"), Input(ids.HORIZON, "value"), Input(ids.BANDS, "value"),
        Input(ids.TABS, "value"),
    )  # fmt: skip
    def _paths(state, ident, order, cum, horizon, bands, tab):  # type: ignore[no-untyped-def]
        tab_gate(ids.TAB_PATHS, tab)
        return paths_view(snap, state, ident, order, cum, horizon, bands)

    @app.callback(
        Output(ids.SHARES_GRAPH, "figure"), Output(ids.chart_data("shares"), "data"),
        Output(ids.SHARES_NOTE, "children"),
        Input(ids.WINDOW, "data"), Input(ids.ORDERING, "value"), Input(ids.HORIZON, "value"),
        Input(ids.TABS, "value"),
    )  # fmt: skip
    def _shares_cb(state, order, horizon, tab):  # type: ignore[no-untyped-def]
        tab_gate(ids.TAB_SHARES, tab)
        return shares_view(snap, state, order, horizon)

    @app.callback(
        Output(ids.LEADLAG_GRAPH, "figure"), Output(ids.chart_data("leadlag"), "data"),
        Output(ids.LEADLAG_NOTE, "children"),
        Input(ids.WINDOW, "data"), Input(ids.LEVEL, "value"), Input(ids.TABS, "value"),
    )  # fmt: skip
    def _leadlag(state, level, tab):  # type: ignore[no-untyped-def]
        tab_gate(ids.TAB_LEADLAG, tab)
        return leadlag_view(snap, state, level)

    @app.callback(
        Output(ids.NETWORK_GRAPH, "figure"), Output(ids.chart_data("network"), "data"),
        Output(ids.NETWORK_NOTE, "children"),
        Input(ids.WINDOW, "data"), Input(ids.NETWORK_MODE, "value"), Input(ids.NETWORK_SIZE, "value"),
        Input(ids.TABS, "value"),
    )  # fmt: skip
    def _network(state, mode, size, tab):  # type: ignore[no-untyped-def]
        tab_gate(ids.TAB_NETWORK, tab)
        return network_view(snap, state, mode, size)

    @app.callback(
        Output(ids.COMPARE_PAIRS_GRAPH, "figure"), Output(ids.chart_data("compare-pairs"), "data"),
        Output(ids.COMPARE_PATHS_GRAPH, "figure"), Output(ids.chart_data("compare-paths"), "data"),
        Output(ids.COMPARE_NOTE, "children"),
        Input(ids.WINDOW, "data"), Input(ids.A_START, "value"), Input(ids.A_END, "value"),
        Input(ids.B_START, "value"), Input(ids.B_END, "value"), Input(ids.IDENTIFICATION, "value"),
        Input(ids.ORDERING, "value"), Input(ids.HORIZON, "value"), Input(ids.TABS, "value"),
    )  # fmt: skip
    def _compare(state, a0, a1, b0, b1, ident, order, horizon, tab):  # type: ignore[no-untyped-def]
        tab_gate(ids.TAB_COMPARE, tab)
        (f1, r1, n1), (f2, r2, n2) = compare_view(snap, state, a0, a1, b0, b1, ident, order, horizon)
        return f1, r1, f2, r2, " ".join(dict.fromkeys([n1, n2]))

    @app.callback(
        Output(ids.HEALTH_GRAPH, "figure"), Output(ids.chart_data("health"), "data"),
        Output(ids.HEALTH_NOTE, "children"), Output(ids.SKIPPED_TABLE, "children"),
        Input(ids.WINDOW, "data"), Input(ids.NEAR_ONE, "value"), Input(ids.TABS, "value"),
    )  # fmt: skip
    def _health(state, near, tab):  # type: ignore[no-untyped-def]
        tab_gate(ids.TAB_HEALTH, tab)
        fig, rows, note = health_view(snap, state, near)
        return fig, rows, note, as_json(skipped_table(skipped_rows(rows)))

    @app.callback(
        Output(ids.CYCLES_GRAPH, "figure"), Output(ids.chart_data("cycles"), "data"),
        Output(ids.CYCLES_NOTE, "children"),
        Input(ids.WINDOW, "data"), Input(ids.TABS, "value"),
    )  # fmt: skip
    def _cycles(state, tab):  # type: ignore[no-untyped-def]
        tab_gate(ids.TAB_CYCLES, tab)
        return cycles_view(snap, state)

    @app.callback(
        Output({"type": "csv-download", "chart": MATCH}, "data"),
        Input({"type": "csv-button", "chart": MATCH}, "n_clicks"),
        State({"type": "chart-data", "chart": MATCH}, "data"),
        State(ids.WINDOW, "data"),
        prevent_initial_call=True,
    )  # fmt: skip
    def _download(clicks, rows, state):  # type: ignore[no-untyped-def]
        if not clicks:
            raise PreventUpdate
        chart = ctx.triggered_id.get("chart") if isinstance(ctx.triggered_id, dict) else "chart"
        out = csv_file(rows, chart, state)
        if out is None:
            raise PreventUpdate
        return out
