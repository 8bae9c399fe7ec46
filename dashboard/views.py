"""The dashboard's views, and the table that declares them.

A view is a plain function ``view(snap, state, *inputs) -> (figure, rows, note)`` (or a tuple of
those, one per chart): it parses its inputs (`dashboard._inputs`), reads the snapshot through
`dashboard.data`, derives with arlib what the snapshot does not store (responses at another
horizon or ordering, cumulative paths, bootstrap bands, own-AR spectra), builds its figure with
`charts` and returns the rows behind it (the CSV download) and one line of text.

`VIEWS` is the table: view → tab, inputs (component ids), figure builder (the view function),
CSV builder, its own controls and the defaults a new universe brings. Component ids, the tabs of
the page (`dashboard.layout`) and the callbacks (`dashboard.callbacks.register`) are generated from
it, so adding a view is a function and a row here plus its figure builder in `charts`.
"""

from __future__ import annotations

import datetime as dt
import math
import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

import charts

from . import ids
from ._components import as_json, label, skipped_table
from ._errors import WindowError
from ._inputs import (
    BAND_CHOICES,
    IDENTIFICATIONS,
    Rows,
    ViewResult,
    flag,
    grid_index,
    guard,
    iso,
    num,
    nums,
    parse_choice,
    parse_fraction,
    parse_horizon,
    parse_order,
)
from .data import (
    DateWindow,
    Snapshot,
    Universe,
    parse_date,
    response_band,
    response_paths,
    shares_at,
)

__all__ = [
    "VIEWS",
    "View",
    "band_index_view",
    "band_net_view",
    "band_pairs_view",
    "bands_view",
    "compare_pairs_view",
    "compare_paths_view",
    "compare_view",
    "cycles_view",
    "empty_note",
    "health_view",
    "index_view",
    "joint_bands_view",
    "joint_tab",
    "joint_view",
    "leadlag_view",
    "models_view",
    "network_view",
    "paths_view",
    "shares_view",
    "skipped_rows",
    "tails_index_view",
    "tails_tables_view",
    "tails_view",
]

def empty_note(universe: str) -> str:
    """What every view says for a universe without fitted windows."""
    return (
        f"Universe {universe!r} has no fitted windows in the serving snapshot yet, so there is "
        "nothing to show for it. Run the pipeline for it (shockflow run), or pick another universe."
    )


def has_fitted(snap: Snapshot, universe: str) -> bool:
    """True when `universe` has at least one fitted (not skipped) window stored."""
    try:
        lo, hi = snap.date_bounds(universe)
        snap.fitted_end(DateWindow(universe, lo, hi))
    except WindowError:
        return False
    return True


def _window(snap: Snapshot, state: Any, *, fitted: bool = True) -> DateWindow:
    """`snap.window(state)`; a universe with no windows (or, with `fitted`, no fitted window)
    raises the one empty-universe message instead."""
    if isinstance(state, dict) and isinstance(state.get("universe"), str):
        u = snap.universe(state["universe"])
        try:
            snap.date_bounds(u.name)
        except WindowError:
            raise WindowError(empty_note(u.name)) from None
        if fitted and not has_fitted(snap, u.name):
            raise WindowError(empty_note(u.name))
    return snap.window(state)



# ---------------------------------------------------------------------------------------------
# views
# ---------------------------------------------------------------------------------------------


@guard
def index_view(snap: Snapshot, state: Any, quantile: Any = 0.9) -> ViewResult:
    """The connectedness index over the whole history, x-range on the chosen window, stress shaded."""
    window = _window(snap, state)
    q = parse_fraction(quantile, "stress quantile", 0.5, 0.999)
    history = snap.index_history(window.universe)
    if not history:
        raise WindowError(empty_note(window.universe))
    u = snap.universe(window.universe)
    dates = [d for d, _ in history]
    totals = [float(v) for _, v in history]
    threshold = float(np.quantile(totals, q)) if totals else None
    try:
        used = snap.fitted_end(window)
    except WindowError:
        used = None
    fig = charts.index_figure(
        dates, totals, start=window.start, end=window.end, reference_end=used,
        threshold=threshold, universe=window.universe, horizon=u.horizon, model=u.model,
    )  # fmt: skip
    rows = [
        {"window_end": iso(d), "total_percent": num(v),
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
    if u.model == "tvp":
        note += " Model: time-varying-parameter VAR, one value per filtered date (no window)."
    if u.estimator == "quantile":
        note += (" Estimator: quantile regression per equation; this index is the level nearest the "
                 "median (the Tails tab shows every level).")
    return fig, rows, note


#: Most series a shock-path grid draws. A grid is n × n panels: the demo's 40-series universe
#: would be 1,600 cells of a few pixels each (drawn as subplots they kept the browser busy for
#: over 30 s; as cells of one pair of axes they draw quickly but cannot be read). Larger universes
#: show the first ones of the ordering control, where the user picks which; the CSV keeps every
#: series.
GRID_SERIES_MAX = 12


def _grid_series(order: tuple[str, ...], series: tuple[str, ...]) -> tuple[list[int], str]:
    """Positions (in `series`) of the series a grid draws, and a note when that is not all."""
    if len(series) <= GRID_SERIES_MAX:
        return list(range(len(series))), ""
    shown = [series.index(s) for s in order[:GRID_SERIES_MAX]]
    return shown, (f" The grid shows {GRID_SERIES_MAX} of {len(series)} series: the first "
                   f"{GRID_SERIES_MAX} of the ordering control (choose series there to see others); "
                   f"the CSV has all {len(series)}.")


def _sub(a: np.ndarray, idx: list[int]) -> np.ndarray:
    """(H+1, n, n) → (H+1, m, m): the responses and shocks at positions `idx`."""
    return a[:, idx][:, :, idx]


@guard
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
    window = _window(snap, state)
    u = snap.universe(window.universe)
    ident = parse_choice(identification, IDENTIFICATIONS, "identification")
    band = parse_choice(bands or "none", BAND_CHOICES, "bands")
    H = parse_horizon(horizon)
    cum = flag(cumulative, "cumulative")
    order = parse_order(ordering, u)
    end = snap.fitted_end(window)
    resp, lower, upper, source = response_paths(
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
        lower, upper, band_note = response_band(
            snap, u, end, identification=ident, order=order, horizon=H, cumulative=cum
        )
    if band == "none":
        lower = upper = None
    label = "generalized" if ident == "generalized" else "Cholesky"
    kind = "cumulative response" if cum else "response"
    title = f"Shock paths at the window ending {end} — {label}, {kind}, horizons 0–{H}"
    order_text = (
        "Cholesky order (first = most exogenous): " + " → ".join(order)
        if ident == "cholesky" else None
    )  # fmt: skip
    unit = (
        "cumulated change of the responding series per one-s.d. shock"
        if cum
        else "change of the responding series (as prepared) per one-s.d. shock"
    )
    shown, shown_note = _grid_series(order, u.series)
    fig = charts.responses_figure(
        _sub(resp, shown), [u.series[i] for i in shown],
        lower=None if lower is None else _sub(lower, shown), upper=None if upper is None else _sub(upper, shown),
        title=title, subtitle=order_text, yunit=unit,
    )  # fmt: skip
    end_text, names = iso(end), u.series
    values = nums(resp)
    lows = [None] * len(values) if lower is None else nums(lower)
    highs = [None] * len(values) if upper is None else nums(upper)
    rows = [
        {"window_end": end_text, "identification": ident, "cumulative": cum, "horizon": h,
         "response": names[i], "shock": names[j], "value": v, "lower": lo, "upper": hi}
        for (h, i, j), v, lo, hi in zip(grid_index(H + 1, len(names)), values, lows, highs, strict=True)
    ]  # fmt: skip
    note = f"Window ending {end}; responses {source}; {band_note}.{shown_note}"
    return fig, rows, note


@guard
def shares_view(snap: Snapshot, state: Any, ordering: Any, horizon: Any) -> ViewResult:
    """Generalized and Cholesky variance shares per series at the chosen horizon."""
    window = _window(snap, state)
    u = snap.universe(window.universe)
    H = parse_horizon(horizon)
    order = parse_order(ordering, u)
    end = snap.fitted_end(window)
    gen, gsrc = shares_at(snap, u, end, "generalized", order, H)
    chol, csrc = shares_at(snap, u, end, "cholesky", order, H)
    fig = charts.shares_figure(
        [("generalized<br>(rows normalised to 100%)", gen),
         ("Cholesky<br>(recursive order in the title)", chol)],
        u.series,
        title=f"Variance shares at {H} steps ahead, window ending {end}",
        subtitle=f"Cholesky order (first = most exogenous): {' → '.join(order)}",
    )  # fmt: skip
    rows = [
        {"window_end": iso(end), "steps": H, "method": m, "series": u.series[i],
         "shock": u.series[j], "share_percent": num(t[i, j])}
        for m, t in (("generalized", gen), ("cholesky", chol))
        for i in range(len(u.series)) for j in range(len(u.series))
    ]  # fmt: skip
    note = f"Window ending {end}; generalized {gsrc}, Cholesky {csrc}. Each bar sums to 100%."
    return fig, rows, note


@guard
def leadlag_view(snap: Snapshot, state: Any, level: Any) -> ViewResult:
    """Granger p-values at the window end, and the share of windows significant in the date window."""
    window = _window(snap, state)
    u = snap.universe(window.universe)
    if u.model == "tvp":
        other = snap.counterpart(u)
        msg = (f"Universe '{u.name}' is a time-varying-parameter VAR: Granger tests belong to a least-squares "
               "fit per window, so none are stored for its dates"
               + (f"; see its rolling counterpart '{other.name}'." if other is not None else "."))  # fmt: skip
        raise WindowError(msg)
    if u.estimator == "quantile":
        msg = (f"Universe '{u.name}' is fitted by quantile regression at each τ: Granger tests are "
               "least-squares F tests, so none are stored for its windows; the Tails tab shows how "
               "its spillovers differ between the tails and the median.")  # fmt: skip
        raise WindowError(msg)
    if u.estimator == "shrinkage":
        msg = (f"Universe '{u.name}' is a shrinkage VAR (Minnesota prior, posterior mean): Granger F tests "
               "belong to a least-squares fit and are not defined for it, so none are stored. Lead–lag "
               "spillovers show instead in the pairwise shares of the Spillover network tab (who drives "
               "whose forecast-error variance), and the prior's pull in the Shrinkage tab (λ per window).")  # fmt: skip
        raise WindowError(msg)
    alpha = parse_fraction(level, "significance level", 0.0, 0.5)
    end = snap.fitted_end(window)
    pvals = snap.granger_at(u, end)
    share, count = snap.granger_share(window, u, alpha)
    fig = charts.granger_figure(
        pvals, share, u.series, level=alpha, window_end=end, n_windows=count, date_label=window.label
    )
    n = len(u.series)
    rows = [
        {"window_end": iso(end), "caused": u.series[i], "causing": u.series[j],
         "p_value": num(pvals[i, j]), "level": alpha, "date_window": window.label,
         "windows": count, "share_significant": num(share[i, j])}
        for i in range(n) for j in range(n) if i != j
    ]  # fmt: skip
    note = f"Window ending {end}; {count} windows from {window.label}; level {alpha:g}."
    return fig, rows, note


@guard
def network_view(snap: Snapshot, state: Any, mode: Any, size_by: Any) -> ViewResult:
    """Directed graph of net pairwise spillovers, at the window end or averaged over the window."""
    window = _window(snap, state)
    u = snap.universe(window.universe)
    how = parse_choice(mode, ("end", "mean"), "network mode")
    size = parse_choice(size_by, ("to", "from"), "node size")
    if how == "end":
        end = snap.fitted_end(window)
        table = snap.pairwise_at(u, end)
        to_others, from_others, _ = snap.spillover_sums(u, end)  # arlib's sums, as stored
        what = f"at the window ending {end}"
        span: dict[str, str | int] = {"window_end": iso(end)}
    else:
        table, count = snap.pairwise_mean(window, u)
        if count == 0:
            raise WindowError(f"no spillover tables between {window.label}")
        to_others, from_others, _, _ = snap.spillover_sums_mean(window, u)
        what = f"averaged over {count} windows, {window.label}"
        span = {"date_window": window.label, "windows": count}
    fig = charts.network_figure(
        table, u.series, to_others=to_others, from_others=from_others, size_by=size,
        title=f"Net pairwise spillovers {what}, {u.horizon}-step horizon",
        subtitle=(f"stored at the universe's {u.horizon}-step horizon (the horizon control does not "
                  "change it)"),
    )  # fmt: skip
    n = len(u.series)
    rows = [
        {**span, "source": u.series[j], "target": u.series[i], "share_percent": num(table[i, j]),
         "net_source_to_target_pp": num(table[i, j] - table[j, i])}
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


@guard
def compare_pairs_view(
    snap: Snapshot, state: Any, a_start: Any, a_end: Any, b_start: Any, b_end: Any
) -> ViewResult:
    """Pairwise spillovers averaged over date window A and B, and their change B − A."""
    window = _window(snap, state)
    u = snap.universe(window.universe)
    first, second = _compare_windows(snap, window, (a_start, a_end), (b_start, b_end))
    ta, ca = snap.pairwise_mean(first, u)
    tb, cb = snap.pairwise_mean(second, u)
    if ca == 0 or cb == 0:
        raise WindowError(
            f"window {'A' if ca == 0 else 'B'} ({(first if ca == 0 else second).label}) holds no "
            "fitted windows; widen it"
        )
    fig = charts.pairwise_compare_figure(ta, tb, u.series, labels=(first.label, second.label))
    n = len(u.series)
    rows = [
        {"target": u.series[i], "source": u.series[j], "a_window": first.label, "a_windows": ca,
         "a_share_percent": num(ta[i, j]), "b_window": second.label, "b_windows": cb,
         "b_share_percent": num(tb[i, j]), "change_pp": num(tb[i, j] - ta[i, j])}
        for i in range(n) for j in range(n)
    ]  # fmt: skip
    total_a = float(np.nansum(ta) - np.nansum(np.diag(ta))) / n
    total_b = float(np.nansum(tb) - np.nansum(np.diag(tb))) / n
    note = (
        f"A: {first.label} ({ca} windows), B: {second.label} ({cb} windows); "
        f"total connectedness of the averaged tables {total_a:.1f}% → {total_b:.1f}%."
    )
    return fig, rows, note


@guard
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
    window = _window(snap, state)
    u = snap.universe(window.universe)
    first, second = _compare_windows(snap, window, (a_start, a_end), (b_start, b_end))
    ident = parse_choice(identification, IDENTIFICATIONS, "identification")
    H = parse_horizon(horizon)
    order = parse_order(ordering, u)
    ends = (snap.fitted_end(first), snap.fitted_end(second))
    paths = [
        response_paths(snap, u, e, identification=ident, order=order, horizon=H, cumulative=False)[0]
        for e in ends
    ]
    labels = (f"A: window ending {ends[0]}", f"B: window ending {ends[1]}")
    shown, shown_note = _grid_series(order, u.series)
    fig = charts.responses_compare_figure(
        _sub(paths[0], shown), _sub(paths[1], shown), [u.series[i] for i in shown], labels=labels,
        title=f"Shock paths, {ident}: A (solid) against B (dashed)",
    )  # fmt: skip
    n = len(u.series)
    names, a_end, b_end = u.series, iso(ends[0]), iso(ends[1])
    rows = [
        {"identification": ident, "horizon": h, "response": names[i], "shock": names[j],
         "a_window_end": a_end, "a_value": a, "b_window_end": b_end, "b_value": b, "change": d}
        for (h, i, j), a, b, d in zip(
            grid_index(H + 1, n), nums(paths[0]), nums(paths[1]), nums(paths[1] - paths[0]),
            strict=True,
        )
    ]  # fmt: skip
    note = f"A: window ending {ends[0]}; B: window ending {ends[1]}; {ident} shocks.{shown_note}"
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


@guard
def health_view(snap: Snapshot, state: Any, near_one: Any = 0.98) -> ViewResult:
    """Lag order, spectral radius, residual test and observations over the date window."""
    window = _window(snap, state, fitted=False)
    near = parse_fraction(near_one, "near-one threshold", 0.0, 1.0)
    rows_db = snap.health(window)
    if not rows_db:
        raise WindowError(f"no windows between {window.label}")
    cols = ["window_end", "window_start", "nobs", "lags", "spectral_radius", "stable",
            "portmanteau_p", "aic", "condition_number", "skip_reason"]  # fmt: skip
    records = [dict(zip(cols, r, strict=True)) for r in rows_db]
    fitted = [r for r in records if r["skip_reason"] is None]
    skipped = [(r["window_end"], str(r["skip_reason"])) for r in records if r["skip_reason"] is not None]
    fig = charts.health_figure(
        [r["window_end"] for r in fitted], [r["lags"] for r in fitted],
        [r["spectral_radius"] for r in fitted], [r["portmanteau_p"] for r in fitted],
        [r["nobs"] for r in fitted], skipped=skipped, near_one=near,
        title=f"Model health, {window.universe}, windows ending {window.label}",
    )  # fmt: skip
    flagged = sum(1 for r in fitted if r["spectral_radius"] is not None and r["spectral_radius"] >= near)
    rows = [
        {**{k: (iso(v) if isinstance(v, dt.date) else v) for k, v in r.items()},
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

    return snap.cached(("own-cycles", u.name, end), compute)


@guard
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
    window = _window(snap, state)
    u = snap.universe(window.universe)
    end = snap.fitted_end(window)
    freqs = CYCLE_FREQUENCIES
    spectra: list[tuple[int, str, np.ndarray, float | None]] = []
    rows: Rows = []
    notes: list[str] = []
    end_text = end.isoformat()
    freq_list = freqs.tolist()
    for k, c in enumerate(_own_cycles(snap, u, end)):
        if c.density is None:
            notes.append(f"{c.name}: own AR({c.lags}) not stationary (radius {c.radius:.3f}), no spectrum")
            continue
        spectra.append((k, c.name, c.density / c.variance, c.period))
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
    fig = charts.cycles_figure(
        freqs, spectra,
        title=f"Own-dynamics spectrum per series (univariate AR, order by AIC; window ending {end})",
    )  # fmt: skip
    note = f"Window ending {end}. Dominant cycle (period in observations): " + "; ".join(notes) + "."
    return fig, rows, note



def _band_history(snap: Snapshot, state: Any) -> tuple[Universe, Any, dt.date]:
    """(universe, its band history, the window end the views use); a clear message when none."""
    window = _window(snap, state)
    u = snap.universe(window.universe)
    bh = snap.band_history(u)
    if bh is None:
        msg = (f"Universe '{u.name}' stores no frequency bands; set `frequency_bands = [5, 20]` "
               "(cycle lengths in rows) in its [[universes]] table and run again.")
        raise WindowError(msg)
    return u, bh, snap.fitted_end(window)


@guard
def band_index_view(snap: Snapshot, state: Any) -> ViewResult:
    """Connectedness by cycle length over every window (stacked bands, Baruník–Křehlík 2018)."""
    u, bh, end = _band_history(snap, state)
    k = bh.at(end)
    fig = charts.band_index_figure(bh.ends, bh.total, bh.periods, universe=u.name,
                                   truncation=bh.truncation, within=bh.within)  # fmt: skip
    labels = [charts.band_label(lo, hi) for lo, hi in bh.periods]
    rows = [
        {"window_end": iso(e), "band": labels[b], "period_lo": lo, "period_hi": hi,
         "total_percent": num(bh.total[w, b]), "within_percent": num(bh.within[w, b]),
         "band_share": num(bh.share[w, b])}
        for w, e in enumerate(bh.ends) for b, (lo, hi) in enumerate(bh.periods)
    ]  # fmt: skip
    shares = ", ".join(f"{lab}: {100 * bh.share[k, b]:.0f}%" for b, lab in enumerate(labels))
    note = (f"Baruník–Křehlík frequency connectedness; the bands add up to the index at "
            f"{bh.truncation} steps. Variance by band at {end}: {shares}.")  # fmt: skip
    return fig, rows, note


@guard
def band_net_view(snap: Snapshot, state: Any) -> ViewResult:
    """Each series' net role (to − from) by cycle length at the window end."""
    u, bh, end = _band_history(snap, state)
    k = bh.at(end)
    net = bh.to_others[k] - bh.from_others[k]
    fig = charts.band_net_figure(
        net, bh.periods, u.series,
        title=f"Net transmitter (+) or receiver (−) by cycle length, window ending {end}",
    )  # fmt: skip
    labels = [charts.band_label(lo, hi) for lo, hi in bh.periods]
    rows = [
        {"window_end": iso(end), "band": labels[b], "series": s, "to_others": num(bh.to_others[k, b, i]),
         "from_others": num(bh.from_others[k, b, i]), "net": num(net[b, i])}
        for b in range(len(labels)) for i, s in enumerate(u.series)
    ]  # fmt: skip
    return fig, rows, f"Window ending {end}; percentage points."


@guard
def band_pairs_view(snap: Snapshot, state: Any) -> ViewResult:
    """The pairwise spillover table of each band at the window end (one heatmap per band)."""
    u, bh, end = _band_history(snap, state)
    k = bh.at(end)
    table = bh.table[k]  # (d, n, n) [band, variable, shock], percent
    fig = charts.band_pairs_figure(table, bh.periods, u.series, window_end=end)
    labels = [charts.band_label(lo, hi) for lo, hi in bh.periods]
    rows = [
        {"window_end": iso(end), "band": labels[b], "series": s, "shock": t,
         "share_percent": num(table[b, i, j])}
        for b in range(len(labels)) for i, s in enumerate(u.series) for j, t in enumerate(u.series)
    ]  # fmt: skip
    n = len(u.series)
    off = ~np.eye(n, dtype=bool)
    tops = []
    for b, lab in enumerate(labels):
        if n < 2:
            break
        i, j = np.unravel_index(int(np.argmax(np.where(off, table[b], -np.inf))), (n, n))
        tops.append(f"{lab}: {u.series[j]} → {u.series[i]} ({table[b, i, j]:.1f}%)")
    note = ("Pairwise tables: percent of the receiving series' forecast-error variance, one colour "
            "scale for every band; summed over the bands, the cells are the spillover table at "
            f"{bh.truncation} steps." + (f" Largest pair per band at {end}: " + "; ".join(tops) + "."
                                         if tops else ""))  # fmt: skip
    return fig, rows, note


def bands_view(snap: Snapshot, state: Any) -> tuple[ViewResult, ViewResult, ViewResult]:
    """The three charts of the cycle-length tab."""
    return band_index_view(snap, state), band_net_view(snap, state), band_pairs_view(snap, state)


@guard
def joint_view(snap: Snapshot, state: Any) -> ViewResult:
    """Joint (all other shocks together) vs generalized total connectedness over time."""
    window = _window(snap, state)
    u = snap.universe(window.universe)
    jh = snap.joint_history(u)
    if jh is None:
        msg = (f"Universe '{u.name}' stores no joint connectedness; set `joint = true` in its "
               "[[universes]] table and run again.")
        raise WindowError(msg)
    fig = charts.joint_index_figure(jh.ends, jh.total, jh.generalized_total, universe=u.name,
                                    horizon=u.horizon)  # fmt: skip
    rows = [
        {"window_end": iso(e), "joint_percent": num(jh.total[w]),
         "generalized_percent": num(jh.generalized_total[w]),
         **{f"joint_from_{s}": num(jh.from_others[w, i]) for i, s in enumerate(u.series)}}
        for w, e in enumerate(jh.ends)
    ]  # fmt: skip
    gap = jh.total - jh.generalized_total
    note = (f"Lastrapes–Wiesen joint index: each series' share of variance due to all other shocks "
            f"together, averaged. Joint − generalized over the history: mean {np.mean(gap):+.1f}, "
            f"range {np.min(gap):+.1f} to {np.max(gap):+.1f} points.")  # fmt: skip
    return fig, rows, note


@guard
def joint_bands_view(snap: Snapshot, state: Any) -> ViewResult:
    """The joint index split by cycle length over every window, next to the generalized index."""
    window = _window(snap, state)
    u = snap.universe(window.universe)
    jb = snap.results("joint_band_connectedness", u)
    if jb is None:
        msg = (f"Universe '{u.name}' stores no joint connectedness by cycle length; it needs both "
               "`joint = true` and `frequency_bands = [5, 20]` in its [[universes]] table.")
        raise WindowError(msg)
    bh = snap.band_history(u)
    general = bh.index_like(jb) if bh is not None else None
    truncation = int(jb.truncation or 0)
    fig = charts.joint_band_figure(jb.ends, jb["total"], jb.periods, universe=u.name,
                                   truncation=truncation, generalized=general)  # fmt: skip
    labels = [charts.band_label(lo, hi) for lo, hi in jb.periods]
    rows = [
        {"window_end": iso(e), "band": labels[b], "joint_percent": num(jb["total"][w, b]),
         **{f"joint_from_{s}": num(jb["from_others"][w, b, i]) for i, s in enumerate(u.series)},
         **{f"variance_share_{s}": num(jb["variance_share"][w, b, i]) for i, s in enumerate(u.series)}}
        for w, e in enumerate(jb.ends) for b in range(len(labels))
    ]  # fmt: skip
    end = snap.fitted_end(window)
    k = jb.at(end)
    parts = ", ".join(f"{lab}: {jb['total'][k, b]:.1f}" for b, lab in enumerate(labels))
    note = (f"Each band's part of the joint index at {truncation} steps (the bands add up to it); at "
            f"{end}: {parts} percent. A series' band part divided by its variance share in the band "
            "is the joint share within that band (CSV).")  # fmt: skip
    return fig, rows, note


def joint_tab(snap: Snapshot, state: Any) -> tuple[ViewResult, ViewResult]:
    """The two charts of the joint tab."""
    return joint_view(snap, state), joint_bands_view(snap, state)


def _quantile_history(snap: Snapshot, state: Any) -> tuple[Universe, Any, dt.date]:
    window = _window(snap, state)
    u = snap.universe(window.universe)
    qh = snap.quantile_history(u)
    if qh is None:
        msg = (f"Universe '{u.name}' stores no quantile connectedness; set `estimator = \"quantile\"` "
               "(and the levels in [universes.quantile] quantiles) in its [[universes]] table and run "
               "again.")  # fmt: skip
        raise WindowError(msg)
    return u, qh, snap.fitted_end(window)


@guard
def tails_index_view(snap: Snapshot, state: Any) -> ViewResult:
    """Lower-tail, median and upper-tail total connectedness over time."""
    u, qh, end = _quantile_history(snap, state)
    taus = [float(t) for t in qh.quantiles]
    fig = charts.quantile_index_figure(qh.ends, qh.total, taus, universe=u.name, horizon=u.horizon,
                                       window_end=end)  # fmt: skip
    rows = [
        {"window_end": iso(e), "quantile": t, "total_percent": num(qh.total[w, q])}
        for w, e in enumerate(qh.ends) for q, t in enumerate(taus)
    ]  # fmt: skip
    k = qh.at(end)
    at = ", ".join(f"τ = {t:g}: {qh.total[k, q]:.1f}%" for q, t in enumerate(taus))
    low, high = qh.total[:, 0], qh.total[:, -1]
    mid = qh.total[:, taus.index(min(taus, key=lambda t: (abs(t - 0.5), t)))]
    note = (f"Quantile connectedness (Ando, Greenwood-Nimmo & Shin 2022): each equation fitted by "
            f"quantile regression at τ. At {qh.ends[k]}: {at}. Over the history, lowest τ − central "
            f"τ: mean {np.mean(low - mid):+.1f} points; highest τ − central: {np.mean(high - mid):+.1f}.")  # fmt: skip
    return fig, rows, note


@guard
def tails_tables_view(snap: Snapshot, state: Any) -> ViewResult:
    """The spillover table at each quantile level at the window end."""
    u, qh, end = _quantile_history(snap, state)
    k = qh.at(end)
    taus = [float(t) for t in qh.quantiles]
    fig = charts.quantile_tables_figure(qh.table[k], taus, u.series, window_end=qh.ends[k])
    rows = [
        {"window_end": iso(qh.ends[k]), "quantile": t, "series": u.series[i], "shock": u.series[j],
         "share_percent": num(qh.table[k, q, i, j])}
        for q, t in enumerate(taus) for i in range(len(u.series)) for j in range(len(u.series))
    ]  # fmt: skip
    net = ", ".join(
        f"τ = {t:g}: {u.series[int(np.argmax(qh.net[k, q]))]} ({np.max(qh.net[k, q]):+.1f})"
        for q, t in enumerate(taus)
    )
    return fig, rows, f"Window ending {qh.ends[k]}; largest net transmitter per level: {net}."


def tails_view(snap: Snapshot, state: Any) -> tuple[ViewResult, ViewResult]:
    """Both charts of the tails tab."""
    return tails_index_view(snap, state), tails_tables_view(snap, state)


@guard
def models_view(snap: Snapshot, state: Any) -> ViewResult:
    """Total connectedness of the universe and its counterpart of the other model, side by side.

    The counterpart is the universe with the same series in the same order and the other `model`
    (`Snapshot.counterpart`): a rolling universe and a tvp one configured on the same series.
    """
    window = _window(snap, state)
    u = snap.universe(window.universe)
    other = snap.counterpart(u)
    if other is None:
        want = "tvp" if u.model == "rolling" else "rolling"
        msg = (f"Universe '{u.name}' ({u.model}) has no counterpart: add a universe with the same series "
               f"in the same order and model = \"{want}\" to compare the two, and run again.")
        raise WindowError(msg)
    rolling, tvp = (u, other) if u.model == "rolling" else (other, u)
    hist = {x.name: snap.index_history(x.name) for x in (rolling, tvp)}
    if not hist[tvp.name] or not hist[rolling.name]:
        raise WindowError(empty_note(tvp.name if not hist[tvp.name] else rolling.name))
    series = {k: ([d for d, _ in h], np.asarray([float(v) for _, v in h])) for k, h in hist.items()}
    fig = charts.model_compare_figure(series[rolling.name], series[tvp.name], names=(rolling.name, tvp.name),
                                      horizon=u.horizon if rolling.horizon == tvp.horizon else None)  # fmt: skip
    tvp_at = dict(hist[tvp.name])
    rows = [{"date": iso(d), "model": m, "universe": x.name, "total_percent": num(v)}
            for m, x in (("rolling", rolling), ("tvp", tvp)) for d, v in hist[x.name]]  # fmt: skip
    common = [(v, tvp_at[d]) for d, v in hist[rolling.name] if d in tvp_at]
    if common:
        a, b = np.asarray(common).T
        corr = float(np.corrcoef(a, b)[0, 1]) if a.size > 2 and a.std() > 0 and b.std() > 0 else float("nan")
        note = (f"On the {a.size} dates both store: TVP − rolling mean {np.mean(b - a):+.1f} points, "
                f"correlation {corr:.2f}. The rolling index weighs every row of a window alike; the "
                f"filter forgets old rows gradually, so it moves sooner after a break.")  # fmt: skip
    else:
        note = "The two universes store no common date."
    return fig, rows, note


# ---------------------------------------------------------------------------------------------
# the table of views
# ---------------------------------------------------------------------------------------------

# component ids of the views' own controls (shared ones live in `dashboard.ids`)
IDENTIFICATION = "identification"
CUMULATIVE = "cumulative"
BANDS = "bands"
LEVEL = "granger-level"
NETWORK_MODE = "network-mode"
NETWORK_SIZE = "network-size"
A_START = "compare-a-start"
A_END = "compare-a-end"
B_START = "compare-b-start"
B_END = "compare-b-end"
NEAR_ONE = "near-one"
SKIPPED_TABLE = "skipped-table"

Defaults = dict[tuple[str, str], Any]


@dataclass(frozen=True)
class View:
    """One row of the table: a view and everything the page needs to show it.

    name : tab value, and the prefix of its ids (``{chart}-graph``, ``{name}-note``).
    build : the figure builder, ``build(snap, state, *input values)`` → ``(figure, rows, note)``,
        or one such triple per chart when `charts` names several.
    inputs : component ids whose ``value`` goes to `build` after the window state, in order.
    tab : the tab's label; None for a view shown above the tabs (the connectedness index).
    charts : (chart name, height in px) per chart; the chart name keys its CSV download.
    csv : the CSV builder: rows of the view → rows of its CSV file (default: the rows as they are).
    controls : the tab's own controls, given the first universe (or None) at page build.
    defaults : (component id, property) → value a newly picked universe brings to the controls.
    extra : (component id, rows → children) for one more output, e.g. the skipped-window table.
    intro : a line of text at the top of the tab.
    note : the id of the line of text under the view (default ``{name}-note``).
    """

    name: str
    build: Callable[..., Any]
    inputs: tuple[str, ...] = ()
    tab: str | None = None
    charts: tuple[tuple[str, int], ...] = ()
    csv: Callable[[Rows], Rows] | None = None
    controls: Callable[[Universe | None], list[Any]] | None = None
    defaults: Callable[[Universe], Defaults] | None = None
    extra: tuple[str, Callable[[Rows], Any]] | None = None
    intro: str | None = None
    note: str | None = None
    chart_list: tuple[tuple[str, int], ...] = field(init=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "chart_list", self.charts or ((self.name, 420),))

    @property
    def note_id(self) -> str:
        return self.note or ids.note_id(self.name)

    def results(self, snap: Snapshot, state: Any, *values: Any) -> list[ViewResult]:
        """The view's (figure, CSV rows, note) per chart."""
        out = self.build(snap, state, *values)
        triples = list(out) if len(self.chart_list) > 1 else [out]
        if self.csv is not None:
            triples = [(fig, self.csv(rows), text) for fig, rows, text in triples]
        return triples


def _radio(cid: str, value: Any, options: dict[Any, str]) -> Any:
    from dash import dcc

    return dcc.RadioItems(id=cid, value=value, inline=True,
                          options=[{"label": v, "value": k} for k, v in options.items()])  # fmt: skip


def _identification(u: Universe | None) -> str:
    return u.identification if u is not None and u.identification in IDENTIFICATIONS else "generalized"


def _paths_controls(u: Universe | None) -> list[Any]:
    from dash import dcc

    return [
        label("Identification", _radio(IDENTIFICATION, _identification(u), IDENTIFICATIONS)),
        label("Paths", dcc.Checklist(
            id=CUMULATIVE, value=[], inline=True,
            options=[{"label": "cumulative (level response for returns)", "value": "cumulative"}],
        )),
        label("Band", _radio(BANDS, "stored", BAND_CHOICES)),
    ]  # fmt: skip


def _levels(level: float) -> list[dict[str, Any]]:
    return [{"label": f"{x:g}", "value": x} for x in sorted({0.01, 0.05, 0.10, level})]


def _leadlag_controls(u: Universe | None) -> list[Any]:
    from dash import dcc

    level = u.granger_level if u is not None else 0.05
    return [label("Significance level", dcc.Dropdown(id=LEVEL, clearable=False, value=level,
                                                     options=_levels(level)), width="180px")]  # fmt: skip


def _network_controls(u: Universe | None) -> list[Any]:
    return [
        label("Spillovers", _radio(NETWORK_MODE, "end", {
            "end": "at the window end", "mean": "averaged over the date window"})),
        label("Node size", _radio(NETWORK_SIZE, "to", {
            "to": "spillover to others", "from": "spillover from others"})),
    ]  # fmt: skip


def _compare_controls(u: Universe | None) -> list[Any]:
    from dash import dcc, html

    def date(cid: str, placeholder: str) -> Any:
        return dcc.Input(id=cid, type="text", debounce=True, placeholder=placeholder, className="date-input")

    return [
        label("A from", date(A_START, "first half")), label("A to", date(A_END, "YYYY-MM-DD")),
        label("B from", date(B_START, "second half")), label("B to", date(B_END, "YYYY-MM-DD")),
        html.Span("Blank dates: the two halves of the date window.", className="note"),
    ]  # fmt: skip


def _health_controls(u: Universe | None) -> list[Any]:
    from dash import dcc

    return [label("Flag spectral radius from", dcc.Dropdown(
        id=NEAR_ONE, clearable=False, value=0.98,
        options=[{"label": f"{x:g}", "value": x} for x in (0.95, 0.98, 0.99, 0.995)],
    ), width="220px")]  # fmt: skip


def _skipped(rows: Rows) -> Any:
    return as_json(skipped_table(skipped_rows(rows)))


@guard
def tightness_view(snap: Snapshot, state: Any) -> ViewResult:
    """The shrinkage prior's tightness λ per window end in the date window (shrinkage universes)."""
    window = _window(snap, state)
    u = snap.universe(window.universe)
    if u.estimator != "shrinkage":
        msg = (f"Universe '{u.name}' is fitted by least squares per window: it has no shrinkage prior. "
               'Set estimator = "shrinkage" in its [[universes]] table to see the tightness λ here.')  # fmt: skip
        raise WindowError(msg)
    rows_in = snap.tightness_in(window)
    if not rows_in:
        raise WindowError(f"No fitted window of '{u.name}' ends between {window.label}; widen the range.")
    ends = [r[0] for r in rows_in]
    lam = np.array([r[1] for r in rows_in], dtype=float)
    chosen = bool(rows_in[-1][2])
    fig = charts.tightness_figure(ends, lam, universe=u.name, chosen=chosen)
    rows = [{"window_end": iso(e), "tightness": num(v), "chosen": bool(c), "log_marginal_likelihood": num(m)}
            for e, v, c, m in rows_in]  # fmt: skip
    note = (f"λ over {len(ends)} windows from {window.label}: median {np.median(lam):.3g}, range "
            f"{lam.min():.3g} to {lam.max():.3g}. Smaller λ pulls each equation harder towards the prior "
            "(random walk for level series, white noise for changes and returns); "
            + ("λ is chosen per window by maximising the marginal likelihood over [0.001, 10]."
               if chosen else "λ is fixed by the configuration."))  # fmt: skip
    return fig, rows, note


def _compare_build(snap: Snapshot, state: Any, *values: Any) -> tuple[ViewResult, ViewResult]:
    return compare_view(snap, state, *values)


#: The dashboard's views, in tab order (the index, shown above the tabs, first).
VIEWS: tuple[View, ...] = (
    View("index", index_view, inputs=(ids.STRESS_QUANTILE,), charts=(("index", 300),), note=ids.STATUS),
    View("paths", paths_view, tab="Shock paths",
         inputs=(IDENTIFICATION, ids.ORDERING, CUMULATIVE, ids.HORIZON, BANDS),
         charts=(("paths", 520),), controls=_paths_controls,
         defaults=lambda u: {(IDENTIFICATION, "value"): _identification(u)}),
    View("shares", shares_view, tab="Variance shares", inputs=(ids.ORDERING, ids.HORIZON)),
    View("leadlag", leadlag_view, tab="Lead–lag", inputs=(LEVEL,), controls=_leadlag_controls,
         defaults=lambda u: {(LEVEL, "value"): u.granger_level, (LEVEL, "options"): _levels(u.granger_level)}),
    View("network", network_view, tab="Spillover network", inputs=(NETWORK_MODE, NETWORK_SIZE),
         charts=(("network", 580),), controls=_network_controls),
    View("compare", _compare_build, tab="Compare windows",
         inputs=(A_START, A_END, B_START, B_END, IDENTIFICATION, ids.ORDERING, ids.HORIZON),
         charts=(("compare-pairs", 380), ("compare-paths", 520)), controls=_compare_controls),
    View("health", health_view, tab="Model health", inputs=(NEAR_ONE,), charts=(("health", 640),),
         controls=_health_controls, extra=(SKIPPED_TABLE, _skipped)),
    View("bands", bands_view, tab="By cycle length", charts=(("bands", 400), ("bands-net", 380), ("bands-pairs", 420)),
         intro=("How much of the connectedness travels in short cycles and how much in long ones "
                "(Baruník–Křehlík 2018): the stored index split by cycle length, in rows of the "
                "universe's calendar; each series' net role by cycle length at the window end; and "
                "who sends to whom in each band at the window end.")),
    View("joint", joint_tab, tab="Joint index", charts=(("joint", 360), ("joint-bands", 360)),
         intro=("The share of each series' forecast-error variance due to all other shocks together "
                "(Lastrapes–Wiesen 2021), next to the row-normalised generalized index; below, the "
                "same joint index split by cycle length (with frequency bands).")),
    View("models", models_view, tab="Rolling vs TVP", charts=(("models", 360),),
         intro=("The same series estimated both ways: total connectedness from rolling windows of "
                "least squares next to the time-varying-parameter VAR filtered per date, for a "
                "universe configured with a counterpart (same series, the other `model`).")),
    View("tails", tails_view, tab="Tails", charts=(("tails", 360), ("tails-tables", 420)),
         intro=("Connectedness in the tails (Ando, Greenwood-Nimmo & Shin 2022), for a universe with "
                "`estimator = \"quantile\"`: each equation fitted by quantile regression at τ, so the "
                "lower-tail index shows how shocks spread when markets fall hardest, next to the median "
                "and the upper tail; below, the spillover tables at the window end.")),
    View("shrinkage", tightness_view, tab="Shrinkage", charts=(("shrinkage", 340),),
         intro=("For a shrinkage universe (estimator = \"shrinkage\"): the tightness λ of its Minnesota "
                "prior per window. Its coefficients are posterior means, pulled towards a random walk "
                "(level series) or white noise (changes, returns); smaller λ, harder pull.")),
    View("cycles", cycles_view, tab="Own cycles", charts=(("cycles", 460),),
         intro=("Each series on its own: a univariate AR (order chosen by AIC) fitted on the prepared "
                "data of the window the views use; its implied spectral density and, where the "
                "density peaks away from frequency zero, the dominant cycle length in observations.")),
)  # fmt: skip
