"""The HTML report: one self-contained file per universe, built from Jinja templates.

Python builds plain context data — numbers, strings, lists of rows — one context function per
section (``_glance``, ``_connectedness``, … in `SECTIONS`); the templates under
``pipeline/export/templates/`` do all markup: ``report.html`` is the page and includes
``sections/<name>.html`` for every section present, in `SECTIONS` order; ``macros.html`` holds the
table cells and the chart wrapper. The environment autoescapes every ``.html`` template and uses
`StrictUndefined`, so a value reaches the page escaped exactly once, and a key a template names but
the context lacks raises instead of printing nothing. Templates are read through
`importlib.resources`, so they load the same from a checkout, an installed wheel or a zip.

The one trusted-HTML path: a chart's ``<div>`` and ``<script>``, made here by `plotly.io.to_html`
(`_Charts`), is handed to the templates as a string and inserted by the ``chart`` macro with
``|safe``; nothing else is marked safe. Plotly writes every figure string as JSON with ``<``,
``>`` and ``/`` as ``\\u`` escapes, so a series name cannot close the script; the div ids are ours.
The stylesheet ``report.css`` is included as a template, not passed as a value: its name does
not end in ``.html`` (no autoescaping) and the loader reads it as raw text (no Jinja syntax).

Plotly's JavaScript is inlined once, in the first chart (``include_plotlyjs=True``), and every
later chart reuses it (``include_plotlyjs=False``), so the file opens with no network. Chart
toolbars are off (``displayModeBar: False``) and every chart sits in a ``.chart`` block that the
print stylesheet keeps on one page (``break-inside: avoid``).

Every number in a table also carries its full-precision value in a ``data-value`` attribute, so
readers (and the tests) can check the shown figures against the snapshot exactly.
"""

from __future__ import annotations

import datetime as dt
import functools
import math
from collections.abc import Callable
from importlib import resources
from typing import TYPE_CHECKING, Any, cast

import jinja2
import numpy as np
import plotly.io as pio
import polars as pl

import charts

if TYPE_CHECKING:
    from pipeline.export._data import ReportData, ResponseSet

__all__ = ["CAUTION", "SECTIONS", "environment", "render_report", "report_context"]

CAUTION = ("A research tool, not financial advice. "
           "Estimated relations between markets change over time.")

_PLOTLY_CONFIG = {"displayModeBar": False, "responsive": True, "displaylogo": False,
                  "staticPlot": False}

#: The package whose ``templates/`` folder holds the report's templates.
TEMPLATE_PACKAGE = "pipeline.export"


# -- templates -----------------------------------------------------------------------------------

def _template_source(name: str) -> tuple[str, str, Callable[[], bool]]:
    """A template's text, read from the package's resources (a folder, a wheel or a zip)."""
    parts = name.split("/")
    if any(p in ("", ".", "..") for p in parts):
        raise jinja2.TemplateNotFound(name)
    node = resources.files(TEMPLATE_PACKAGE).joinpath("templates", *parts)
    if not node.is_file():
        raise jinja2.TemplateNotFound(name)
    text = node.read_text(encoding="utf-8")
    if not name.endswith(".html"):  # the stylesheet: literal text, whatever braces it holds
        text = "{% raw %}" + text + "{% endraw %}"
    # resources do not change while the process runs: a compiled template stays valid
    return text, f"{TEMPLATE_PACKAGE}:templates/{name}", lambda: True


@functools.cache
def environment() -> jinja2.Environment:
    """The report's Jinja environment: autoescaped ``.html`` templates, undefined names raise."""
    env = jinja2.Environment(
        loader=jinja2.FunctionLoader(_template_source),
        autoescape=jinja2.select_autoescape(enabled_extensions=("html",), default_for_string=True),
        undefined=jinja2.StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
    )
    env.globals["significance_mark"] = charts.SIGNIFICANCE_MARK
    return env


# -- plain values for the templates --------------------------------------------------------------

def _f(value: Any) -> float | None:
    """A number as a Python float (full precision for ``data-value``), None when missing or NaN."""
    if value is None:
        return None
    v = float(value)
    return None if math.isnan(v) else v


def _shade(v: float | None) -> float | None:
    """Cell background opacity growing with the share (Okabe–Ito blue at up to 45%); none when
    the cell has no number."""
    if v is None:
        return None
    return max(0.0, min(1.0, v / 100.0)) * 0.45


def _text_table(df: pl.DataFrame, columns: list[tuple[str, str]], *, caption: str = "",
                cls: str = "") -> dict[str, Any]:
    """A plain table of `df`'s rows; `columns` maps column name → header. Floats become number
    cells (four decimals), timestamps ISO text, anything else its text (None: empty)."""
    rows = []
    for row in df.iter_rows(named=True):
        cells: list[dict[str, Any]] = []
        for name, _ in columns:
            v = row[name]
            if isinstance(v, float):
                cells.append({"kind": "num", "value": _f(v), "digits": 4})
            elif isinstance(v, dt.datetime):
                cells.append({"kind": "text", "text": v.isoformat(sep=" ", timespec="seconds")})
            else:
                cells.append({"kind": "text", "text": "" if v is None else str(v)})
        rows.append(cells)
    return {"headers": [h for _, h in columns], "rows": rows, "caption": caption, "cls": cls}


class _Charts:
    """Turns figures into HTML (the trusted path, see the module docstring); the first one carries
    plotly.js inline."""

    def __init__(self) -> None:
        self.count = 0

    def __call__(self, fig: dict[str, Any], *, div_id: str) -> str:
        inner = pio.to_html(fig, full_html=False, include_plotlyjs=self.count == 0,
                            config=_PLOTLY_CONFIG, div_id=div_id, validate=False)
        self.count += 1
        return inner


# -- sections: one context function each, for templates/sections/<name>.html ---------------------

def _glance(d: ReportData, chart: _Charts) -> dict[str, Any]:
    info = d.info
    fits = d.fits
    n_skipped = fits.filter(pl.col("skip_reason").is_not_null()).height
    estimator = None
    if info.estimator == "quantile" and d.quantiles is not None:
        levels = ", ".join(f"{float(t):g}" for t in d.quantiles.quantiles)
        estimator = (f"quantile regression per equation at τ = {levels} "
                     "(figures outside the tails section: the level nearest 0.5)")
    return {
        "universe": info.name,
        "model": charts.MODEL_LABELS.get(info.model, info.model),
        "estimator": estimator,
        "series": ", ".join(f"{s} ({t})" for s, t in zip(info.series, info.transforms, strict=True)),
        "fitted_date": str(d.fitted_date) if d.fitted_date is not None else "none fitted",
        "windows": fits.height, "fitted": fits.height - n_skipped, "skipped": n_skipped,
        "total": _f(d.total),
        "horizon": info.horizon,
        "identification": info.identification,
        "granger_level": f"{info.granger_level:g}",
        "notes": list(d.notes),
    }


def _net_history(d: ReportData) -> tuple[list[dt.date], np.ndarray]:
    """Window ends and the (W, n) [window, series] net directional history, series in order."""
    wide = (d.directional.pivot(on="series", index="window_end", values="net")
            .sort("window_end"))
    cols = [wide[s].to_numpy().astype(float) if s in wide.columns
            else np.full(wide.height, np.nan) for s in d.info.series]
    return wide["window_end"].to_list(), np.column_stack(cols)


def _connectedness(d: ReportData, chart: _Charts) -> dict[str, Any]:
    figures: list[str] = []
    if d.connectedness.height:
        figures.append(chart(charts.index_figure(
            d.connectedness["window_end"].to_list(), d.connectedness["total"].to_numpy(),
            universe=d.info.name, horizon=d.info.horizon, model=d.info.model, medium="print"),
            div_id="fig-connectedness"))
        if d.directional.height:
            ends, net = _net_history(d)
            figures.append(chart(charts.net_figure(ends, net, d.info.series, medium="print"),
                                 div_id="fig-net"))
    return {"horizon": d.info.horizon, "tvp": d.info.model == "tvp", "charts": figures}


def _cycles(d: ReportData, chart: _Charts) -> dict[str, Any] | None:
    """Connectedness by cycle length (Baruník–Křehlík) and the joint index, when the universe stores them."""
    cut = d.report_date
    bands: dict[str, Any] | None = None
    joint: dict[str, Any] | None = None
    if d.bands is not None:
        bh = d.bands
        keep = [w for w, e in enumerate(bh.ends) if e <= cut]
        if keep:
            ends = [bh.ends[w] for w in keep]
            last = keep[-1]
            index_chart = chart(charts.band_index_figure(
                ends, bh.total[keep], bh.periods, universe=d.info.name, truncation=bh.truncation,
                medium="print"), div_id="fig-cycles")  # fmt: skip
            net = bh.to_others[last] - bh.from_others[last]
            net_chart = chart(charts.band_net_figure(
                net, bh.periods, d.info.series, medium="print",
                title=f"Net transmitter (+) or receiver (−) by cycle length, window ending {bh.ends[last]}"),
                div_id="fig-cycles-net")  # fmt: skip
            pairs_chart = chart(charts.band_pairs_figure(
                bh.table[last], bh.periods, d.info.series, window_end=bh.ends[last], medium="print"),
                div_id="fig-cycles-pairs")  # fmt: skip
            bands = {
                "truncation": bh.truncation, "window_end": str(bh.ends[last]),
                "charts": [index_chart, net_chart, pairs_chart],
                "rows": [{"label": charts.band_label(lo, hi), "total": _f(bh.total[last, b]),
                          "within": _f(bh.within[last, b]), "share": _f(100 * bh.share[last, b])}
                         for b, (lo, hi) in enumerate(bh.periods)],
            }
    if d.joint is not None:
        jh = d.joint
        keep = [w for w, e in enumerate(jh.ends) if e <= cut]
        if keep:
            joint_charts = [chart(charts.joint_index_figure(
                [jh.ends[w] for w in keep], jh.total[keep], jh.generalized_total[keep],
                universe=d.info.name, horizon=d.info.horizon, medium="print"), div_id="fig-joint")]  # fmt: skip
            joint_bands: dict[str, Any] | None = None
            jb = d.results.get("joint_band_connectedness")
            kb = [w for w, e in enumerate(jb.ends) if e <= cut] if jb is not None else []
            if jb is not None and kb:
                like = d.bands.index_like(jb) if d.bands is not None else None
                general = like[kb] if like is not None else None
                joint_charts.append(chart(charts.joint_band_figure(
                    [jb.ends[w] for w in kb], jb["total"][kb], jb.periods, universe=d.info.name,
                    truncation=int(jb.truncation or 0), generalized=general, medium="print"),
                    div_id="fig-joint-bands"))  # fmt: skip
                last = kb[-1]
                joint_bands = {
                    "truncation": jb.truncation, "window_end": str(jb.ends[last]),
                    "rows": [{"label": charts.band_label(lo, hi), "total": _f(jb["total"][last, b])}
                             for b, (lo, hi) in enumerate(jb.periods)],
                }  # fmt: skip
            joint = {"charts": joint_charts, "bands": joint_bands}
    if bands is None and joint is None:
        return None
    return {"bands": bands, "joint": joint}


def _tails(d: ReportData, chart: _Charts) -> dict[str, Any] | None:
    """Lower-tail, median and upper-tail connectedness, for a universe fitted by quantile regression."""
    qh = d.quantiles
    if qh is None:
        return None
    keep = [w for w, e in enumerate(qh.ends) if e <= d.report_date]
    if not keep:
        return None
    last = keep[-1]
    taus = [float(t) for t in qh.quantiles]
    figures = [
        chart(charts.quantile_index_figure(
            [qh.ends[w] for w in keep], qh.total[keep], taus, universe=d.info.name,
            horizon=d.info.horizon, window_end=qh.ends[last], medium="print"), div_id="fig-tails"),
        chart(charts.quantile_tables_figure(qh.table[last], taus, d.info.series, window_end=qh.ends[last],
                                            medium="print"), div_id="fig-tails-tables"),
    ]  # fmt: skip
    return {
        "charts": figures, "window_end": str(qh.ends[last]), "series": list(d.info.series),
        "rows": [{"label": charts.quantile_label(t), "total": _f(qh.total[last, q]),
                  "net": [_f(qh.net[last, q, i]) for i in range(len(d.info.series))]}
                 for q, t in enumerate(taus)],
    }


def _models(d: ReportData, chart: _Charts) -> dict[str, Any] | None:
    """Rolling vs TVP total connectedness, when the universe has a counterpart of the other model."""
    if d.counterpart is None or d.connectedness.height == 0:
        return None
    name, _, history = d.counterpart
    if not history:
        return None
    own = (d.connectedness["window_end"].to_list(), d.connectedness["total"].to_numpy())
    other = ([e for e, _ in history], np.asarray([v for _, v in history]))
    rolling, tvp = (own, other) if d.info.model == "rolling" else (other, own)
    names = (d.info.name, name) if d.info.model == "rolling" else (name, d.info.name)
    at = dict(zip(*tvp, strict=True))
    pairs = np.asarray([(v, at[e]) for e, v in zip(*rolling, strict=True) if e in at])
    gap = (f"On the {len(pairs)} dates both store, TVP − rolling: mean {np.mean(pairs[:, 1] - pairs[:, 0]):+.1f} "
           "points." if pairs.size else "The two store no common date.")  # fmt: skip
    figure = chart(charts.model_compare_figure(rolling, tvp, names=names, horizon=d.info.horizon,
                                               medium="print"), div_id="fig-models")
    return {"rolling": names[0], "tvp": names[1], "gap": gap, "charts": [figure]}


def _shrinkage(d: ReportData, chart: _Charts) -> dict[str, Any] | None:
    """A shrinkage universe's tightness λ per window (estimator = "shrinkage")."""
    if d.tightness is None or d.tightness.height == 0:
        return None
    lam = d.tightness["tightness"].to_numpy()
    chosen = bool(d.tightness["tightness_chosen"][-1])
    figure = chart(charts.tightness_figure(d.tightness["window_end"].to_list(), lam, universe=d.info.name,
                                           chosen=chosen, medium="print"), div_id="fig-shrinkage")
    return {"chosen": chosen, "windows": int(lam.size), "median": float(np.median(lam)),
            "min": float(lam.min()), "max": float(lam.max()), "charts": [figure]}


def _spillovers(d: ReportData, chart: _Charts) -> dict[str, Any]:
    names = d.info.series
    if d.table is None or d.from_others is None or d.to_others is None or d.net is None:  # set together
        return {"table": None}
    rows = []
    for i, s in enumerate(names):
        cells = []
        for j in range(len(names)):
            v = _f(d.table[i, j])
            own = i == j
            cells.append({"value": v, "own": own, "shade": None if own else _shade(v)})
        rows.append({"name": s, "cells": cells, "from_others": _f(d.from_others[i])})
    return {
        "fitted_date": str(d.fitted_date), "horizon": d.info.horizon,
        "table": {"names": list(names), "rows": rows,
                  "to_others": [_f(v) for v in d.to_others], "net": [_f(v) for v in d.net],
                  "total": _f(d.total)},
    }


#: Largest n drawn as one n × n grid of responses; above it, one figure (a column) per shock.
GRID_MAX = 6


#: Most series whose responses the report draws (one column of panels per shock): 40 series drew
#: 1,600 panels and took the demo's sector_40 report 10.7 s to open; the exported responses
#: files keep every series.
REPORT_SERIES_MAX = 12


def _response_figures(rs: ResponseSet, names: tuple[str, ...], end: Any) -> list[dict[str, Any]]:
    """The dashboard's response grid, in print: one n × n grid, or one column per shock."""
    n = len(names)
    band = f"{rs.coverage:.0%} band" if rs.coverage else "band"
    title = f"{rs.identification.capitalize()} shocks, window ending {end}"
    common: dict[str, Any] = {"lower": rs.lower, "upper": rs.upper, "yunit": "change of the responding series "
              "(as prepared) per one-s.d. shock", "band_label": band, "medium": "print"}
    if n <= GRID_MAX:
        return [charts.responses_figure(rs.response, names, title=title, **common)]
    m = min(n, REPORT_SERIES_MAX)  # past it: the first series of the stored order
    if m < n:
        common.update(lower=None if rs.lower is None else rs.lower[:, :m, :m],
                      upper=None if rs.upper is None else rs.upper[:, :m, :m])
    response = rs.response[:, :m, :m]
    return [charts.responses_figure(response, names[:m], shocks=[j],
                                    title=f"{title}: shock to {names[j]}", **common)
            for j in range(m)]


def _responses(d: ReportData, chart: _Charts) -> dict[str, Any]:
    sets = []
    for k, rs in enumerate(d.responses):
        band = (f"shaded: {rs.coverage:.0%} band" if rs.coverage else "shaded: band") \
            if rs.lower is not None else "no bands available"
        figures = [chart(fig, div_id=f"fig-irf-{k}-{m}")
                   for m, fig in enumerate(_response_figures(rs, d.info.series, d.fitted_date))]
        n = len(d.info.series)
        shown = (f"the charts show the first {REPORT_SERIES_MAX} of the {n} series (the exported "
                 "responses files hold all)") if n > REPORT_SERIES_MAX else ""
        sets.append({"identification": rs.identification.capitalize(), "horizon": rs.horizon,
                     "band": band, "origin": rs.origin, "charts": figures, "shown": shown})
    return {"fitted_date": str(d.fitted_date), "sets": sets}


def _decompositions(d: ReportData, chart: _Charts) -> dict[str, Any]:
    names = d.info.series
    sets = []
    for k, ds in enumerate(d.decompositions):
        last = 100.0 * ds.share[-1]
        figure = chart(charts.shares_figure(
            [(ds.method, last)], names, medium="print",
            title=(f"{ds.method.capitalize()} decomposition at {ds.horizon} steps: percent of each "
                   "series' forecast-error variance, by shock")), div_id=f"fig-fevd-{k}")
        sets.append({"method": ds.method, "title": ds.method.capitalize(), "horizon": ds.horizon,
                     "origin": ds.origin, "charts": [figure],
                     "rows": [{"name": s, "cells": [_f(v) for v in last[i]]}
                              for i, s in enumerate(names)]})
    return {"names": list(names), "sets": sets}


def _granger(d: ReportData, chart: _Charts) -> dict[str, Any]:
    names = d.info.series
    level = d.info.granger_level
    out: dict[str, Any] = {"absent": None, "table": None, "history": None}
    if d.info.model == "tvp":
        out["absent"] = "tvp"
        return out
    if d.info.estimator in ("quantile", "shrinkage"):
        out["absent"] = d.info.estimator
        return out
    if d.granger_p is None or d.granger_f is None:  # set together
        out["absent"] = "unfitted"
        return out
    n = len(names)
    off = ~np.eye(n, dtype=bool)
    p_off = d.granger_p[off]
    out["table"] = {
        "fitted_date": str(d.fitted_date), "level": level, "level_g": f"{level:g}",
        "significant": int(np.sum(p_off[~np.isnan(p_off)] < level)), "pairs": n * (n - 1),
        "names": list(names),
        "rows": [{"name": s, "cells": [None if i == j else
                                       {"p": _f(d.granger_p[i, j]), "f": float(d.granger_f[i, j])}
                                       for j in range(n)]}
                 for i, s in enumerate(names)],
    }
    # Persistence over the history: share of windows where each pair was significant.
    hist = d.granger.filter(pl.col("caused") != pl.col("causing"))
    if hist.height and hist["window_end"].n_unique() > 1:
        share = (hist.group_by("caused", "causing")
                 .agg((pl.col("p_value") < level).mean().alias("share")))
        lookup = {(a, b): v for a, b, v in share.iter_rows()}
        out["history"] = {
            "windows": hist["window_end"].n_unique(),
            "rows": [{"name": s, "cells": [None if i == j else
                                           {"value": _f(100.0 * lookup.get((s, names[j]), float("nan")))}
                                           for j in range(n)]}
                     for i, s in enumerate(names)],
        }
    return out


_SKIP_LIMIT = 60
#: Spectral radii from here up are flagged "near one" (the dashboard's default).
_NEAR_ONE = 0.98


def _health_figure(d: ReportData) -> dict[str, Any]:
    """The dashboard's model-health panels over every window, in print."""
    fits = d.fits.sort("window_end")
    fitted = fits.filter(pl.col("skip_reason").is_null())
    skipped = fits.filter(pl.col("skip_reason").is_not_null())

    def col(name: str) -> list[Any]:
        return fitted[name].to_list() if name in fitted.columns else [None] * fitted.height

    return charts.health_figure(
        fitted["window_end"].to_list(), col("lags"), col("spectral_radius"), col("portmanteau_p"),
        col("nobs"), skipped=list(zip(skipped["window_end"].to_list(),
                                      skipped["skip_reason"].to_list(), strict=True)),
        near_one=_NEAR_ONE, title=f"Model health by window, {d.info.name}", medium="print")


def _health(d: ReportData, chart: _Charts) -> dict[str, Any]:
    out: dict[str, Any] = {"charts": [chart(_health_figure(d), div_id="fig-health")],
                           "latest": None, "skipped": None}
    fitted = d.fits.filter(pl.col("skip_reason").is_null())
    if d.fitted_date is not None and fitted.height:
        latest = fitted.filter(pl.col("window_end") == d.fitted_date)
        out["latest"] = {
            "table": _text_table(latest, [
                ("window_start", "first date"), ("window_end", "last date"), ("nobs", "observations"),
                ("lags", "lags"), ("spectral_radius", "spectral radius"), ("stable", "stable"),
                ("aic", "AIC"), ("bic", "BIC"), ("hq", "HQ"), ("fpe", "FPE"),
                ("condition_number", "condition number"), ("portmanteau_p", "portmanteau p"),
            ], cls="health-latest"),
            "fitted": fitted.height,
            "unstable": fitted.filter(~pl.col("stable")).height,
            "radius_min": f"{cast(float, fitted['spectral_radius'].min()):.4f}",
            "radius_max": f"{cast(float, fitted['spectral_radius'].max()):.4f}",
            "lags": ", ".join(str(x) for x in sorted(fitted["lags"].unique().to_list())),
        }
    skipped = d.fits.filter(pl.col("skip_reason").is_not_null()).sort("window_end", descending=True)
    out["skipped_count"] = skipped.height
    if skipped.height:
        more = (f"; the {skipped.height - _SKIP_LIMIT} older ones are in the window_fits extract"
                if skipped.height > _SKIP_LIMIT else "")
        out["skipped"] = _text_table(skipped.head(_SKIP_LIMIT),
                                     [("window_end", "window end"), ("skip_reason", "reason")],
                                     caption=f"newest first{more}", cls="skipped")
    return out


def _lineage(d: ReportData, chart: _Charts) -> dict[str, Any]:
    out: dict[str, Any] = {"run": None, "runs": None, "batches": None}
    run = d.run
    if run is not None:
        rows = [("run id", run["run_id"]), ("status", run["status"]), ("started", run["started"]),
                ("finished", run["finished"]), ("configuration hash", run["config_hash"]),
                ("data fingerprint", run["data_fingerprint"]), ("code version", run["code_version"]),
                ("windows fitted / skipped / failed",
                 f"{run['windows_fitted']} / {run['windows_skipped']} / {run['windows_failed']}"),
                ("message", run["message"] or "")]
        out["run"] = [{"field": k, "text": "" if v is None else str(v)} for k, v in rows]
    ids = set()
    for frame in (d.connectedness, d.fits):
        if frame.height:
            ids.update(frame["run_id"].drop_nulls().unique().to_list())
    if d.runs.height:
        used = d.runs.filter(pl.col("run_id").is_in(sorted(ids)))
        out["runs"] = _text_table(used, [
            ("run_id", "run id"), ("status", "status"), ("started", "started"),
            ("finished", "finished"), ("config_hash", "configuration hash"),
            ("data_fingerprint", "data fingerprint"), ("code_version", "code version"),
            ("windows_fitted", "fitted"), ("windows_skipped", "skipped"),
            ("windows_failed", "failed"),
        ], cls="runs")
        out["runs_count"] = used.height
    if d.batches.height:
        out["batches"] = _text_table(d.batches, [
            ("batch_id", "batch"), ("source", "source"), ("started", "started"),
            ("finished", "finished"), ("status", "status"), ("rows_read", "rows read"),
            ("rows_new", "new"), ("rows_revised", "revised"),
        ], cls="batches")
    return out


#: The report's sections in page order: (name, context function). Each name has a template
#: ``templates/sections/<name>.html`` that reads the variable `<name>`; a function returning None
#: leaves its section out. Charts are made in this order (the first one carries plotly.js).
SECTIONS: tuple[tuple[str, Callable[[ReportData, _Charts], dict[str, Any] | None]], ...] = (
    ("glance", _glance), ("connectedness", _connectedness), ("cycles", _cycles), ("tails", _tails),
    ("models", _models), ("shrinkage", _shrinkage), ("spillovers", _spillovers),
    ("responses", _responses), ("decompositions", _decompositions), ("granger", _granger),
    ("health", _health), ("lineage", _lineage),
)


#: section → its headings as (anchor, title) for the table of contents; a section's template
#: gives each heading that anchor as its ``id``. Cycles draws two headings, each only when stored.
CONTENTS: dict[str, tuple[tuple[str, str], ...]] = {
    "glance": (("glance", "At a glance"),),
    "connectedness": (("connectedness", "Connectedness over time"),),
    "cycles": (("cycles", "Connectedness by cycle length"), ("joint", "Joint connectedness")),
    "tails": (("tails", "Connectedness in the tails"),),
    "models": (("models", "Rolling windows vs time-varying parameters"),),
    "shrinkage": (("shrinkage", "Shrinkage"),),
    "spillovers": (("spillovers", "Spillover table"),),
    "responses": (("responses", "Impulse responses"),),
    "decompositions": (("decompositions", "Variance decompositions"),),
    "granger": (("granger", "Granger causality"),),
    "health": (("health", "Model health"),),
    "lineage": (("lineage", "Lineage"),),
}
_SUB_HEADINGS = {"cycles": "bands", "joint": "joint"}  # anchor → the key of `_cycles` that draws it


def _contents(context: dict[str, Any]) -> list[dict[str, str]]:
    """The table of contents: the headings of the sections present, in page order."""
    out = []
    for name in context["sections"]:
        for anchor, title in CONTENTS[name]:
            key = _SUB_HEADINGS.get(anchor) if name == "cycles" else None
            if key is None or context[name].get(key) is not None:
                out.append({"anchor": anchor, "title": title})
    return out


def report_context(d: ReportData, *, generated: dt.datetime, version: str) -> dict[str, Any]:
    """Everything ``report.html`` reads: the page's texts, the table of contents and one entry per
    section."""
    chart = _Charts()
    context: dict[str, Any] = {name: make(d, chart) for name, make in SECTIONS}
    context["sections"] = [name for name, _ in SECTIONS if context[name] is not None]
    context["contents"] = _contents(context)
    context["page"] = {
        "title": f"Shock propagation in {d.info.name}",
        "subtitle": (f"Results as of {d.report_date.isoformat()} · exported "
                     f"{generated.isoformat(sep=' ', timespec='seconds')}"),
        "caution": CAUTION, "version": version,
        "footer": (f"Written by shockflow {version} from the serving snapshot. Numbers are "
                   "estimates from vector autoregressions fitted to past data."),
    }
    return context


def render_report(d: ReportData, *, generated: dt.datetime, version: str) -> str:
    """The complete HTML text of one universe's report."""
    page = environment().get_template("report.html")
    return page.render(report_context(d, generated=generated, version=version))
