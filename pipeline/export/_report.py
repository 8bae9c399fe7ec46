"""The HTML report: one self-contained file per universe.

Plotly's JavaScript is inlined once, in the first chart (``include_plotlyjs=True``), and every
later chart reuses it (``include_plotlyjs=False``), so the file opens with no network. Chart
toolbars are off (``displayModeBar: False``) and every chart sits in a ``.chart`` block that the
print stylesheet keeps on one page (``break-inside: avoid``).

Every number in a table also carries its full-precision value in a ``data-value`` attribute, so
readers (and the tests) can check the shown figures against the snapshot exactly.
"""

from __future__ import annotations

import datetime as dt
import html
import math
from importlib import resources
from string import Template
from typing import TYPE_CHECKING, Any, cast

import numpy as np
import plotly.io as pio
import polars as pl

import charts

if TYPE_CHECKING:
    from pipeline.export._data import ReportData, ResponseSet

__all__ = ["CAUTION", "render_report"]

CAUTION = ("A research tool, not financial advice. "
           "Estimated relations between markets change over time.")

_PLOTLY_CONFIG = {"displayModeBar": False, "responsive": True, "displaylogo": False,
                  "staticPlot": False}


def _esc(value: Any) -> str:
    return html.escape("" if value is None else str(value))


def _num(value: Any, digits: int = 2, *, cls: str = "") -> str:
    """A table cell showing `value` to `digits` decimals, full precision in `data-value`."""
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return '<td class="na">–</td>'
    v = float(value)
    attr = f' class="{cls}"' if cls else ""
    return f'<td{attr} data-value="{v!r}">{v:.{digits}f}</td>'


def _pval(p: float, f: float, level: float) -> str:
    if p is None or math.isnan(p):
        return '<td class="na">–</td>'
    flag = ' class="flag"' if p < level else ""
    shown = "&lt;0.001" if p < 0.001 else f"{p:.3f}"
    if p < level:
        shown += f" {charts.SIGNIFICANCE_MARK}"
    return (f'<td{flag} data-value="{float(p)!r}" data-f="{float(f)!r}" '
            f'title="F = {f:.3f}">{shown}</td>')


def _shade(v: float) -> str:
    """Cell background growing with the share (Okabe–Ito blue at up to 45% opacity)."""
    a = max(0.0, min(1.0, v / 100.0)) * 0.45
    return f' style="background: rgba(var(--cell), {a:.3f})"'


def _text_table(df: pl.DataFrame, columns: list[tuple[str, str]], *, caption: str = "",
                cls: str = "") -> str:
    """A plain table of `df`'s rows; `columns` maps column name → header."""
    head = "".join(f"<th>{_esc(h)}</th>" for _, h in columns)
    body = []
    for row in df.iter_rows(named=True):
        cells = []
        for name, _ in columns:
            v = row[name]
            if isinstance(v, float):
                cells.append(_num(v, 4))
            elif isinstance(v, dt.datetime):
                cells.append(f'<td class="text">{_esc(v.isoformat(sep=" ", timespec="seconds"))}</td>')
            else:
                cells.append(f'<td class="text">{_esc(v)}</td>')
        body.append("<tr>" + "".join(cells) + "</tr>")
    cap = f"<caption>{_esc(caption)}</caption>" if caption else ""
    c = f' class="{cls}"' if cls else ""
    return (f'<div class="tablewrap"><table{c}>{cap}<thead><tr>{head}</tr></thead>'
            f"<tbody>{''.join(body)}</tbody></table></div>")


class _Charts:
    """Turns figures into HTML divs; the first one carries plotly.js inline."""

    def __init__(self) -> None:
        self.count = 0

    def __call__(self, fig: dict[str, Any], *, div_id: str) -> str:
        inner = pio.to_html(fig, full_html=False, include_plotlyjs=self.count == 0,
                            config=_PLOTLY_CONFIG, div_id=div_id, validate=False)
        self.count += 1
        return f'<div class="chart">{inner}</div>'


# -- sections ------------------------------------------------------------------------------------

def _glance(d: ReportData) -> str:
    info = d.info
    fits = d.fits
    n_skipped = fits.filter(pl.col("skip_reason").is_not_null()).height
    series = ", ".join(f"{s} ({t})" for s, t in zip(info.series, info.transforms, strict=True))
    total = "–" if d.total is None else f'<span data-value="{d.total!r}">{d.total:.2f}%</span>'
    rows = [
        ("Universe", _esc(info.name)),
        ("Model", _esc(charts.MODEL_LABELS.get(info.model, info.model))),
        ("Series (transform)", _esc(series)),
        ("Latest window end", _esc(d.fitted_date or "none fitted")),
        ("Windows up to this date", f"{fits.height} ({fits.height - n_skipped} fitted, "
                                    f"{n_skipped} skipped)"),
        ("Total connectedness, latest", total),
        ("Horizon", f"{info.horizon} steps"),
        ("Identification", _esc(info.identification)),
        ("Granger level", f"{info.granger_level:g}"),
    ]
    if info.estimator == "quantile" and d.quantiles is not None:
        levels = ", ".join(f"{float(t):g}" for t in d.quantiles.quantiles)
        rows[1:2] = [rows[1], ("Estimator", _esc(f"quantile regression per equation at τ = {levels} "
                                                 "(figures outside the tails section: the level nearest 0.5)"))]
    dl = "".join(f"<dt>{k}</dt><dd>{v}</dd>" for k, v in rows)
    notes = ""
    if d.notes:
        notes = '<div class="notes">' + "".join(f'<p class="note">{_esc(x)}</p>' for x in d.notes) + "</div>"
    return f'<section id="glance"><h2>At a glance</h2><dl class="facts">{dl}</dl>{notes}</section>'


def _net_history(d: ReportData) -> tuple[list[dt.date], np.ndarray]:
    """Window ends and the (W, n) [window, series] net directional history, series in order."""
    wide = (d.directional.pivot(on="series", index="window_end", values="net")
            .sort("window_end"))
    cols = [wide[s].to_numpy().astype(float) if s in wide.columns
            else np.full(wide.height, np.nan) for s in d.info.series]
    return wide["window_end"].to_list(), np.column_stack(cols)


def _connectedness(d: ReportData, chart: _Charts) -> str:
    out = ['<section id="connectedness" class="major"><h2>Connectedness over time</h2>',
           '<p class="note">Share of all series\' forecast-error variance that comes from shocks to '
           f"other series (Diebold–Yilmaz total index), {d.info.horizon}-step horizon, generalized "
           "decomposition; " + ("one point per date of the time-varying-parameter VAR filter "
           "(no window).</p>" if d.info.model == "tvp" else "one point per window, named by its last date.</p>")]
    if d.connectedness.height == 0:
        out.append('<p class="note">No fitted windows yet.</p></section>')
        return "".join(out)
    out.append(chart(charts.index_figure(
        d.connectedness["window_end"].to_list(), d.connectedness["total"].to_numpy(),
        universe=d.info.name, horizon=d.info.horizon, model=d.info.model, medium="print"),
        div_id="fig-connectedness"))
    if d.directional.height:
        ends, net = _net_history(d)
        out.append(chart(charts.net_figure(ends, net, d.info.series, medium="print"),
                         div_id="fig-net"))
    out.append("</section>")
    return "".join(out)


def _cycles(d: ReportData, chart: _Charts) -> str:
    """Connectedness by cycle length (Baruník–Křehlík) and the joint index, when the universe stores them."""
    out: list[str] = []
    cut = d.report_date
    if d.bands is not None:
        bh = d.bands
        keep = [w for w, e in enumerate(bh.ends) if e <= cut]
        if keep:
            ends = [bh.ends[w] for w in keep]
            last = keep[-1]
            labels = [charts.band_label(lo, hi) for lo, hi in bh.periods]
            out.append('<section id="cycles" class="major"><h2>Connectedness by cycle length</h2>'
                       '<p class="note">The total index split by the cycle length at which shocks '
                       "travel (Baruník–Křehlík 2018), in rows of the universe's calendar; the bands "
                       f"add up to the index at {bh.truncation} steps.</p>")  # fmt: skip
            out.append(chart(charts.band_index_figure(
                ends, bh.total[keep], bh.periods, universe=d.info.name, truncation=bh.truncation,
                medium="print"), div_id="fig-cycles"))  # fmt: skip
            net = bh.to_others[last] - bh.from_others[last]
            out.append(chart(charts.band_net_figure(
                net, bh.periods, d.info.series, medium="print",
                title=f"Net transmitter (+) or receiver (−) by cycle length, window ending {bh.ends[last]}"),
                div_id="fig-cycles-net"))  # fmt: skip
            rows = "".join(
                f"<tr><th>{_esc(lab)}</th><td>{_num(bh.total[last, b])}</td>"
                f"<td>{_num(bh.within[last, b])}</td><td>{_num(100 * bh.share[last, b], 0)}</td></tr>"
                for b, lab in enumerate(labels)
            )
            out.append(f'<table class="plain"><caption>Window ending {bh.ends[last]}</caption>'
                       "<tr><th>band</th><th>index share, %</th><th>within band, %</th>"
                       f"<th>variance in band, %</th></tr>{rows}</table></section>")  # fmt: skip
    if d.joint is not None:
        jh = d.joint
        keep = [w for w, e in enumerate(jh.ends) if e <= cut]
        if keep:
            out.append('<section id="joint" class="major"><h2>Joint connectedness</h2>'
                       "<p class=\"note\">Each series' share of forecast-error variance due to all "
                       "other shocks together (Lastrapes–Wiesen 2021), averaged, next to the "
                       "row-normalised generalized index.</p>")  # fmt: skip
            out.append(chart(charts.joint_index_figure(
                [jh.ends[w] for w in keep], jh.total[keep], jh.generalized_total[keep],
                universe=d.info.name, horizon=d.info.horizon, medium="print"), div_id="fig-joint"))  # fmt: skip
            out.append("</section>")
    return "".join(out)


def _tails(d: ReportData, chart: _Charts) -> str:
    """Lower-tail, median and upper-tail connectedness, for a universe fitted by quantile regression."""
    qh = d.quantiles
    if qh is None:
        return ""
    keep = [w for w, e in enumerate(qh.ends) if e <= d.report_date]
    if not keep:
        return ""
    last = keep[-1]
    taus = [float(t) for t in qh.quantiles]
    out = ['<section id="tails" class="major"><h2>Connectedness in the tails</h2>'
           '<p class="note">Each equation fitted by quantile regression at τ (Ando, Greenwood-Nimmo '
           "&amp; Shin 2022), so the lower-tail index shows how shocks spread when the series are "
           "at their worst, the upper-tail one when they are at their best; the other sections show "
           "the level nearest the median.</p>",
           chart(charts.quantile_index_figure(
               [qh.ends[w] for w in keep], qh.total[keep], taus, universe=d.info.name,
               horizon=d.info.horizon, window_end=qh.ends[last], medium="print"), div_id="fig-tails"),
           chart(charts.quantile_tables_figure(qh.table[last], taus, d.info.series, window_end=qh.ends[last],
                                               medium="print"), div_id="fig-tails-tables")]  # fmt: skip
    rows = "".join(
        f"<tr><th>{_esc(charts.quantile_label(t))}</th><td>{_num(qh.total[last, q])}</td>"
        + "".join(_num(qh.net[last, q, i]) for i in range(len(d.info.series))) + "</tr>"
        for q, t in enumerate(taus)
    )
    head = "".join(f"<th>net {_esc(s)}</th>" for s in d.info.series)
    out.append(f'<table class="plain" id="tails-table"><caption>Window ending {qh.ends[last]}</caption>'
               f"<tr><th>level</th><th>total, %</th>{head}</tr>{rows}</table></section>")
    return "".join(out)


def _models(d: ReportData, chart: _Charts) -> str:
    """Rolling vs TVP total connectedness, when the universe has a counterpart of the other model."""
    if d.counterpart is None or d.connectedness.height == 0:
        return ""
    name, _, history = d.counterpart
    if not history:
        return ""
    own = (d.connectedness["window_end"].to_list(), d.connectedness["total"].to_numpy())
    other = ([e for e, _ in history], np.asarray([v for _, v in history]))
    rolling, tvp = (own, other) if d.info.model == "rolling" else (other, own)
    names = (d.info.name, name) if d.info.model == "rolling" else (name, d.info.name)
    at = dict(zip(*tvp, strict=True))
    pairs = np.asarray([(v, at[e]) for e, v in zip(*rolling, strict=True) if e in at])
    gap = (f"On the {len(pairs)} dates both store, TVP − rolling: mean {np.mean(pairs[:, 1] - pairs[:, 0]):+.1f} "
           "points." if pairs.size else "The two store no common date.")  # fmt: skip
    return ('<section id="models" class="major"><h2>Rolling windows vs time-varying parameters</h2>'
            f'<p class="note">The same series estimated both ways: {_esc(names[0])} (rolling windows '
            f"of least squares) and {_esc(names[1])} (a time-varying-parameter VAR filtered per date "
            f"with forgetting factors). {gap}</p>"
            + chart(charts.model_compare_figure(rolling, tvp, names=names, horizon=d.info.horizon, medium="print"),
                    div_id="fig-models")
            + "</section>")  # fmt: skip


def _shrinkage(d: ReportData, chart: _Charts) -> str:
    """A shrinkage universe's tightness λ per window (estimator = "shrinkage")."""
    if d.tightness is None or d.tightness.height == 0:
        return ""
    lam = d.tightness["tightness"].to_numpy()
    chosen = bool(d.tightness["tightness_chosen"][-1])
    how = ("chosen per window by maximising the marginal likelihood over [0.001, 10]" if chosen
           else "fixed by the configuration")  # fmt: skip
    return ('<section id="shrinkage" class="major"><h2>Shrinkage</h2>'
            '<p class="note">Each window is a natural-conjugate shrinkage VAR (Minnesota prior; '
            "Kadiyala &amp; Karlsson 1997, Bańbura, Giannone &amp; Reichlin 2010): coefficients are "
            "posterior means, pulled towards a random walk for level series and white noise for changes "
            f"and returns; the tightness λ is {how}. Smaller λ, harder pull. Over {lam.size} windows: "
            f'median <span data-value="{np.median(lam):.6g}">{np.median(lam):.3g}</span>, range '
            f"{lam.min():.3g} to {lam.max():.3g}.</p>"
            + chart(charts.tightness_figure(d.tightness["window_end"].to_list(), lam, universe=d.info.name,
                                            chosen=chosen, medium="print"), div_id="fig-shrinkage")
            + "</section>")  # fmt: skip


def _spillovers(d: ReportData) -> str:
    names = d.info.series
    head = ['<section id="spillovers" class="major"><div class="keep"><h2>Spillover table</h2>']
    if d.table is None or d.from_others is None or d.to_others is None or d.net is None:  # set together
        return head[0] + '<p class="note">No fitted window.</p></div></section>'
    head.append(
        f'<p class="note">Window ending {_esc(d.fitted_date)}. Cell (row, column): percent of the '
        f"row series' {d.info.horizon}-step forecast-error variance due to shocks in the column "
        "series. \"From others\" sums a row off the diagonal; \"to others\" sums a column off the "
        "diagonal; net = to − from. Total connectedness is the mean of \"from others\".</p>")
    th = "".join(f'<th scope="col">{_esc(s)}</th>' for s in names)
    rows = []
    for i, s in enumerate(names):
        cells = []
        for j in range(len(names)):
            v = d.table[i, j]
            if i == j:
                cells.append(_num(v, 2, cls="own"))
            else:
                cells.append(_num(v, 2).replace("<td", "<td" + _shade(v), 1))
        rows.append(f'<tr data-target="{_esc(s)}"><th class="rowhead" scope="row">{_esc(s)}</th>'
                    + "".join(cells) + _num(d.from_others[i], 2) + "</tr>")
    to_row = "".join(_num(v, 2) for v in d.to_others)
    net_row = "".join(_num(v, 2) for v in d.net)
    total = _num(d.total, 2)
    table = (
        '<div class="tablewrap"><table class="spillover">'
        "<caption>rows: receiving series · columns: shocked series · percent</caption>"
        f'<thead><tr><th class="rowhead">receives ↓ / from →</th>{th}<th>from others</th></tr></thead>'
        f"<tbody>{''.join(rows)}"
        f'<tr class="summary" data-row="to_others"><th class="rowhead">to others</th>{to_row}'
        f'<td class="na"></td></tr>'
        f'<tr data-row="net"><th class="rowhead">net (to − from)</th>{net_row}'
        f'<td class="na"></td></tr>'
        f'<tr data-row="total"><th class="rowhead">total connectedness</th>'
        f'{"".join("<td></td>" for _ in names)}{total}</tr>'
        "</tbody></table></div>")
    return "".join(head) + table + "</div></section>"


#: Largest n drawn as one n × n grid of responses; above it, one figure (a column) per shock.
GRID_MAX = 6


def _response_figures(rs: ResponseSet, names: tuple[str, ...], end: Any) -> list[dict[str, Any]]:
    """The dashboard's response grid, in print: one n × n grid, or one column per shock."""
    n = len(names)
    band = f"{rs.coverage:.0%} band" if rs.coverage else "band"
    title = f"{rs.identification.capitalize()} shocks, window ending {end}"
    common: dict[str, Any] = {"lower": rs.lower, "upper": rs.upper, "yunit": "change of the responding series "
              "(as prepared) per one-s.d. shock", "band_label": band, "medium": "print"}
    if n <= GRID_MAX:
        return [charts.responses_figure(rs.response, names, title=title, **common)]
    return [charts.responses_figure(rs.response, names, shocks=[j],
                                    title=f"{title}: shock to {names[j]}", **common)
            for j in range(n)]


def _responses(d: ReportData, chart: _Charts) -> str:
    out = ['<section id="responses" class="major"><h2>Impulse responses</h2>']
    if not d.responses:
        out.append('<p class="note">No impulse responses for this window.</p></section>')
        return "".join(out)
    for k, rs in enumerate(d.responses):
        band = (f"shaded: {rs.coverage:.0%} band" if rs.coverage else "shaded: band") \
            if rs.lower is not None else "no bands available"
        out.append(f'<div class="keep"><h3>{_esc(rs.identification.capitalize())} shocks</h3>'
                   f'<p class="note">Window ending {_esc(d.fitted_date)}; horizons 0–{rs.horizon} '
                   f"(0 is impact); one-standard-deviation shocks; {band}; "
                   f"{_esc(rs.origin)}.</p>")
        for m, fig in enumerate(_response_figures(rs, d.info.series, d.fitted_date)):
            out.append(chart(fig, div_id=f"fig-irf-{k}-{m}"))
            if m == 0:
                out.append("</div>")  # heading kept with the first chart
    out.append("</section>")
    return "".join(out)


def _decompositions(d: ReportData, chart: _Charts) -> str:
    names = d.info.series
    out = ['<section id="decompositions" class="major"><h2>Variance decompositions</h2>']
    if not d.decompositions:
        out.append('<p class="note">No decompositions for this window.</p></section>')
        return "".join(out)
    for k, ds in enumerate(d.decompositions):
        last = 100.0 * ds.share[-1]
        out.append(f'<div class="keep"><h3>{_esc(ds.method.capitalize())}, {ds.horizon} steps</h3>'
                   f'<p class="note">Percent of each row series\' {ds.horizon}-step forecast-error '
                   f"variance due to shocks in each column series; rows sum to 100; "
                   f"{_esc(ds.origin)}.</p>")
        out.append(chart(charts.shares_figure(
            [(ds.method, last)], names, medium="print",
            title=(f"{ds.method.capitalize()} decomposition at {ds.horizon} steps: percent of each "
                   "series' forecast-error variance, by shock")), div_id=f"fig-fevd-{k}"))
        th = "".join(f'<th scope="col">{_esc(s)}</th>' for s in names)
        body = "".join(
            f'<tr><th class="rowhead" scope="row">{_esc(s)}</th>'
            + "".join(_num(v, 2) for v in last[i]) + "</tr>"
            for i, s in enumerate(names))
        out.append(f'<div class="tablewrap"><table class="decomposition" '
                   f'data-method="{_esc(ds.method)}"><thead><tr><th class="rowhead">variable ↓ / '
                   f"shock →</th>{th}</tr></thead><tbody>{body}</tbody></table></div></div>")
    out.append("</section>")
    return "".join(out)


def _granger(d: ReportData) -> str:
    names = d.info.series
    level = d.info.granger_level
    out = ['<section id="granger" class="major"><div class="keep"><h2>Granger causality</h2>']
    if d.info.model == "tvp":
        out.append('<p class="note">A time-varying-parameter VAR: Granger tests belong to a least-squares '
                   "fit per window, so none are stored for its dates.</p></div></section>")  # fmt: skip
        return "".join(out)
    if d.info.estimator == "quantile":
        out.append('<p class="note">Fitted by quantile regression at each τ: Granger tests are '
                   "least-squares F tests, so none are stored for its windows (see Connectedness in "
                   "the tails).</p></div></section>")  # fmt: skip
        return "".join(out)
    if d.info.estimator == "shrinkage":
        out.append('<p class="note">A shrinkage VAR (Minnesota prior, posterior mean): Granger F tests '
                   "belong to a least-squares fit and are not defined for it, so none are stored. Lead–lag "
                   "spillovers show instead in the spillover table above (who drives whose forecast-error "
                   "variance); the prior's pull per window in the shrinkage section.</p></div></section>")  # fmt: skip
        return "".join(out)
    if d.granger_p is None or d.granger_f is None:  # set together
        out.append('<p class="note">No fitted window.</p></div></section>')
        return "".join(out)
    n = len(names)
    off = ~np.eye(n, dtype=bool)
    p_off = d.granger_p[off]
    n_sig = int(np.sum(p_off[~np.isnan(p_off)] < level))
    out.append(
        f'<p class="note">Window ending {_esc(d.fitted_date)}. Cell (row, column): p-value of the '
        "F test of \"the column series does not Granger-cause the row series\" (lags of the column "
        f"series add nothing to the row's equation). Marked {charts.SIGNIFICANCE_MARK} where "
        f"p &lt; {level:g}: "
        f'<span data-value="{n_sig}">{n_sig}</span> of {n * (n - 1)} ordered pairs. Hover a cell '
        "for its F statistic.</p>")
    th = "".join(f'<th scope="col">{_esc(s)}</th>' for s in names)
    rows = []
    for i, s in enumerate(names):
        cells = "".join('<td class="na">–</td>' if i == j else
                        _pval(d.granger_p[i, j], d.granger_f[i, j], level) for j in range(n))
        rows.append(f'<tr><th class="rowhead" scope="row">{_esc(s)}</th>{cells}</tr>')
    out.append(f'<div class="tablewrap"><table class="granger" data-level="{level!r}">'
               "<caption>rows: caused · columns: causing · p-values</caption>"
               f'<thead><tr><th class="rowhead">caused ↓ / causing →</th>{th}</tr></thead>'
               f"<tbody>{''.join(rows)}</tbody></table></div></div>")
    # Persistence over the history: share of windows where each pair was significant.
    hist = d.granger.filter(pl.col("caused") != pl.col("causing"))
    if hist.height and hist["window_end"].n_unique() > 1:
        share = (hist.group_by("caused", "causing")
                 .agg((pl.col("p_value") < level).mean().alias("share")))
        lookup = {(a, b): v for a, b, v in share.iter_rows()}
        rows = []
        for i, s in enumerate(names):
            cells = "".join('<td class="na">–</td>' if i == j else
                            _num(100.0 * lookup.get((s, names[j]), float("nan")), 0)
                            for j in range(n))
            rows.append(f'<tr><th class="rowhead" scope="row">{_esc(s)}</th>{cells}</tr>')
        out.append(
            "<h3>How often, over all windows</h3>"
            f'<div class="tablewrap"><table class="granger-history"><caption>percent of the '
            f"{hist['window_end'].n_unique()} fitted windows with p &lt; {level:g}</caption>"
            f'<thead><tr><th class="rowhead">caused ↓ / causing →</th>{th}</tr></thead>'
            f"<tbody>{''.join(rows)}</tbody></table></div>")
    out.append("</section>")
    return "".join(out)


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


def _health(d: ReportData, chart: _Charts) -> str:
    out = ['<section id="health" class="major"><h2>Model health</h2>',
           '<p class="note">A window is stable when every eigenvalue of its companion matrix lies '
           "inside the unit circle (spectral radius below 1). Windows that could not be fitted "
           "are listed with the reason.</p>"]
    out.append(chart(_health_figure(d), div_id="fig-health"))
    fitted = d.fits.filter(pl.col("skip_reason").is_null())
    if d.fitted_date is not None and fitted.height:
        latest = fitted.filter(pl.col("window_end") == d.fitted_date)
        out.append("<h3>Latest fitted window</h3>")
        out.append(_text_table(latest, [
            ("window_start", "first date"), ("window_end", "last date"), ("nobs", "observations"),
            ("lags", "lags"), ("spectral_radius", "spectral radius"), ("stable", "stable"),
            ("aic", "AIC"), ("bic", "BIC"), ("hq", "HQ"), ("fpe", "FPE"),
            ("condition_number", "condition number"), ("portmanteau_p", "portmanteau p"),
        ], cls="health-latest"))
        unstable = fitted.filter(~pl.col("stable"))
        out.append(f'<p class="note">Fitted windows: {fitted.height}; unstable: '
                   f'<span data-value="{unstable.height}">{unstable.height}</span>; spectral '
                   f"radius from {cast(float, fitted['spectral_radius'].min()):.4f} to "
                   f"{cast(float, fitted['spectral_radius'].max()):.4f}; lags used: "
                   f"{', '.join(str(x) for x in sorted(fitted['lags'].unique().to_list()))}.</p>")
    skipped = d.fits.filter(pl.col("skip_reason").is_not_null()).sort("window_end", descending=True)
    out.append(f"<h3>Skipped windows ({skipped.height})</h3>")
    if skipped.height == 0:
        out.append('<p class="note">None: every window was fitted.</p>')
    else:
        shown = skipped.head(_SKIP_LIMIT)
        more = (f"; the {skipped.height - _SKIP_LIMIT} older ones are in the window_fits extract"
                if skipped.height > _SKIP_LIMIT else "")
        out.append(_text_table(shown, [("window_end", "window end"), ("skip_reason", "reason")],
                               caption=f"newest first{more}", cls="skipped"))
    out.append("</section>")
    return "".join(out)


def _lineage(d: ReportData) -> str:
    out = ['<section id="lineage" class="major"><h2>Lineage</h2>']
    run = d.run
    if run is None:
        out.append('<p class="note">The run behind these results is not recorded in the '
                   "snapshot.</p>")
    else:
        rows = [("run id", run["run_id"]), ("status", run["status"]), ("started", run["started"]),
                ("finished", run["finished"]), ("configuration hash", run["config_hash"]),
                ("data fingerprint", run["data_fingerprint"]), ("code version", run["code_version"]),
                ("windows fitted / skipped / failed",
                 f"{run['windows_fitted']} / {run['windows_skipped']} / {run['windows_failed']}"),
                ("message", run["message"] or "")]
        dl = "".join(f'<dt>{_esc(k)}</dt><dd class="mono" data-field="{_esc(k)}">{_esc(v)}</dd>'
                     for k, v in rows)
        out.append(f"<h3>Run behind the latest window</h3><dl class=\"facts lineage\">{dl}</dl>")
    ids = set()
    for frame in (d.connectedness, d.fits):
        if frame.height:
            ids.update(frame["run_id"].drop_nulls().unique().to_list())
    if d.runs.height:
        used = d.runs.filter(pl.col("run_id").is_in(sorted(ids)))
        out.append(f"<h3>Runs behind the windows in this report ({used.height})</h3>")
        out.append(_text_table(used, [
            ("run_id", "run id"), ("status", "status"), ("started", "started"),
            ("finished", "finished"), ("config_hash", "configuration hash"),
            ("data_fingerprint", "data fingerprint"), ("code_version", "code version"),
            ("windows_fitted", "fitted"), ("windows_skipped", "skipped"),
            ("windows_failed", "failed"),
        ], cls="runs"))
    out.append("<h3>Source batches</h3>")
    if d.batches.height == 0:
        out.append('<p class="note">The snapshot carries no ingest batches.</p>')
    else:
        out.append(_text_table(d.batches, [
            ("batch_id", "batch"), ("source", "source"), ("started", "started"),
            ("finished", "finished"), ("status", "status"), ("rows_read", "rows read"),
            ("rows_new", "new"), ("rows_revised", "revised"),
        ], cls="batches"))
    out.append("</section>")
    return "".join(out)


def render_report(d: ReportData, *, generated: dt.datetime, version: str) -> str:
    """The complete HTML text of one universe's report."""
    chart = _Charts()
    body = "\n".join([
        _glance(d), _connectedness(d, chart), _cycles(d, chart), _tails(d, chart), _models(d, chart), _shrinkage(d, chart),
        _spillovers(d), _responses(d, chart),
        _decompositions(d, chart), _granger(d), _health(d, chart), _lineage(d),
    ])
    files = resources.files("pipeline.export") / "templates"
    template = Template((files / "report.html").read_text(encoding="utf-8"))
    css = (files / "report.css").read_text(encoding="utf-8")
    subtitle = (f"Results as of {d.report_date.isoformat()} · exported "
                f"{generated.isoformat(sep=' ', timespec='seconds')}")
    return template.substitute(
        title=_esc(f"Shock propagation in {d.info.name}"), subtitle=_esc(subtitle),
        caution=_esc(CAUTION), css=css, body=body, version=_esc(version),
        footer=_esc(f"Written by shockflow {version} from the serving snapshot. Numbers are "
                    "estimates from vector autoregressions fitted to past data."),
    )
