"""The warehouse and snapshot schema, declared once as data.

Every table is a `Table` of `Column`s: SQL type, NOT NULL, the arlib shape of an array column and a
one-line note. From these declarations come

- the warehouse DDL (`ddl`, used by pipeline/warehouse.py's ``CREATE TABLE IF NOT EXISTS``),
- which tables the serving snapshot copies and in which order (`SNAPSHOT_TABLES`, `order_by`),
- the schema table of docs/warehouse.md (`schema_markdown`; tests/serving checks the doc agrees),
- the columns the snapshot reader selects and the shapes it restores arrays to.

Adding a result table or column is a change here (and in the code that writes it); the DDL, the
snapshot copy and the documentation follow. A table whose columns name their `source` (an
attribute of arlib's rolling or TVP result) and whose `fill` says its rows ("window": one per fitted
window; "band": one per window and frequency band) needs no code of its own at all: the pipeline
writes it from the result (`pipeline/_fill.py`) and `Snapshot.results` reads it back as arrays —
a new result is its arlib attribute, its declaration here, a chart and a view.

Shapes name their axes with the symbols n (series), p (the window's lag order, column `lags`),
H (the row's `horizon`) and H+1; arrays are stored flattened in C order (docs/warehouse.md).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

__all__ = [
    "BAND_KEY",
    "FILLS",
    "RESULT_TABLES",
    "SCHEMA",
    "SCHEMA_VERSION",
    "SNAPSHOT_TABLES",
    "STATE_TABLES",
    "UNIVERSE_TABLES",
    "Column",
    "Table",
    "columns",
    "ddl",
    "order_by",
    "schema_markdown",
    "shape_of",
    "table",
]

SCHEMA_VERSION = 1

#: Kinds of table: how rows are replaced (see pipeline/warehouse.py).
KINDS = {
    "meta": "bookkeeping of the file itself",
    "ingest": "written by ingest; observations are never deleted",
    "run": "one row per run, updated as it finishes",
    "universe": "replaced whole by each run that changes the universe",
    "window": "one row set per (universe, window_end), replaced when that window is refitted",
    "state": "one row per universe, replaced by each run that writes one (and deleted by a full refit)",
    "log": "rows appended by each run, never replaced",
}


#: How a declared table's rows come from an arlib result (`Table.fill`): one row per fitted
#: window, or one per fitted window and frequency band (the result's `band_periods`).
FILLS = {
    "window": "one row per fitted window: column `source` arrays (W, *shape) indexed by window",
    "band": "one row per fitted window × band: `source` arrays (W, d, *shape), plus the band key",
}

#: The key columns of a "band" table, filled from the result's `band_periods` and `band_truncation`.
BAND_KEY = ("band", "period_lo", "period_hi", "truncation")


@dataclass(frozen=True)
class Column:
    """One column: name, SQL type, NOT NULL, the arlib shape of an array (axis symbols), a note and
    (for a declared table) the arlib result attribute it is filled from."""

    name: str
    type: str
    not_null: bool = False
    shape: tuple[str, ...] = ()
    axes: tuple[str, ...] = ()
    note: str = ""
    source: str = ""

    def sql(self) -> str:
        return f"{self.name} {self.type}" + (" NOT NULL" if self.not_null else "")

    def doc(self) -> str:
        """How the column reads in the documentation's table."""
        text = self.name
        if self.shape:
            text += f" `{self.type}` ({', '.join(self.shape)})"
            if self.axes:
                text += f" [{', '.join(self.axes)}]"
        if self.note:
            text += f" {self.note}"
        if self.source:
            text += f" ← `{self.source}`"
        return text


@dataclass(frozen=True)
class Table:
    """One table: its grain ("one row per"), kind, whether the snapshot serves it, and columns.

    fill / needs: for a table written from an arlib result by its declarations alone — `fill` is a
    key of `FILLS`, `needs` the result attribute whose presence (not None) makes a run write it.
    """

    name: str
    grain: str
    kind: str
    columns: tuple[Column, ...]
    served: bool = True
    note: str = ""
    fill: str = ""
    needs: str = ""
    column_names: tuple[str, ...] = field(init=False)

    def __post_init__(self) -> None:
        if self.kind not in KINDS:
            msg = f"table {self.name!r}: kind {self.kind!r} is none of {sorted(KINDS)}"
            raise ValueError(msg)
        object.__setattr__(self, "column_names", tuple(c.name for c in self.columns))
        if self.fill:
            if self.fill not in FILLS or self.kind != "window" or not self.needs:
                msg = (f"table {self.name!r}: `fill` needs kind 'window', a `needs` attribute and "
                       f"one of {sorted(FILLS)}; got fill={self.fill!r}, needs={self.needs!r}")
                raise ValueError(msg)
            key = {"run_id", "universe", "window_end", *(BAND_KEY if self.fill == "band" else ())}
            bare = [c.name for c in self.columns if not c.source and c.name not in key]
            if bare:
                msg = f"table {self.name!r}: declared columns {bare} name no `source`"
                raise ValueError(msg)

    def column(self, name: str) -> Column:
        for c in self.columns:
            if c.name == name:
                return c
        msg = f"table {self.name!r} has no column {name!r}; it has {list(self.column_names)}"
        raise KeyError(msg)


def _c(name: str, type_: str, *, nn: bool = False, note: str = "", source: str = "") -> Column:
    return Column(name, type_, nn, note=note, source=source)


def _arr(name: str, shape: tuple[str, ...], *, nn: bool = False, axes: tuple[str, ...] = (), note: str = "",
         source: str = "") -> Column:
    return Column(name, "DOUBLE[]", nn, shape, axes, note, source)


def _band_key() -> tuple[Column, ...]:
    """The key of a per-band table (`BAND_KEY`), after the window key."""
    return (
        _c("band", "INTEGER", nn=True, note="(0 = the shortest cycles)"),
        _c("period_lo", "DOUBLE", nn=True),
        _c("period_hi", "DOUBLE", nn=True, note="(the band holds cycles of period_lo < P ≤ period_hi rows; `inf` for the longest)"),
        _c("truncation", "INTEGER", nn=True, note="(MA terms; the bands add up to connectedness at this horizon)"),
    )


def _window_key() -> tuple[Column, ...]:
    return (
        _c("run_id", "VARCHAR", nn=True),
        _c("universe", "VARCHAR", nn=True),
        _c("window_end", "DATE", nn=True),
    )


SCHEMA: tuple[Table, ...] = (
    Table("schema_version", "schema version applied", "meta", (
        _c("version", "INTEGER", nn=True), _c("applied", "TIMESTAMP", nn=True),
    )),
    Table("observations", "series × date", "ingest", (
        _c("series", "VARCHAR", nn=True), _c("date", "DATE", nn=True), _c("value", "DOUBLE", nn=True),
        _c("source", "VARCHAR", nn=True),
        _c("batch_id", "VARCHAR", nn=True, note="(the batch that last wrote the value)"),
    ), served=False),
    Table("ingest_batches", "ingest of one source", "ingest", (
        _c("batch_id", "VARCHAR", nn=True), _c("source", "VARCHAR", nn=True),
        _c("started", "TIMESTAMP", nn=True), _c("finished", "TIMESTAMP"),
        _c("status", "VARCHAR", nn=True, note="(`running`/`succeeded`/`failed`)"),
        _c("rows_read", "BIGINT"), _c("rows_new", "BIGINT"), _c("rows_revised", "BIGINT"),
        _c("message", "VARCHAR"),
    )),
    Table("revisions", "changed historical value", "ingest", (
        _c("batch_id", "VARCHAR", nn=True), _c("series", "VARCHAR", nn=True), _c("date", "DATE", nn=True),
        _c("old_value", "DOUBLE", nn=True), _c("new_value", "DOUBLE", nn=True),
    ), served=False),
    Table("runs", "universe × run", "run", (
        _c("run_id", "VARCHAR", nn=True), _c("universe", "VARCHAR", nn=True),
        _c("status", "VARCHAR", nn=True, note="(`running`/`succeeded`/`failed`)"),
        _c("started", "TIMESTAMP", nn=True), _c("finished", "TIMESTAMP"),
        _c("config_hash", "VARCHAR", nn=True), _c("data_fingerprint", "VARCHAR"),
        _c("code_version", "VARCHAR"), _c("windows_fitted", "INTEGER"), _c("windows_skipped", "INTEGER"),
        _c("windows_failed", "INTEGER"),
        _c("message", "VARCHAR", note="(what the run did, e.g. `3 new window(s)`, `nothing changed`, or the error)"),
    )),
    Table("universes", "universe", "universe", (
        _c("universe", "VARCHAR", nn=True), _c("config_hash", "VARCHAR", nn=True),
        _c("config_json", "VARCHAR", nn=True, note="(every fitting setting)"),
        _c("horizon", "INTEGER", nn=True), _c("granger_level", "DOUBLE", nn=True),
        _c("identification", "VARCHAR", nn=True),
        _c("run_id", "VARCHAR", nn=True, note="(the run that last wrote the universe)"),
    )),
    Table("universe_series", "universe × series", "universe", (
        _c("universe", "VARCHAR", nn=True),
        _c("position", "INTEGER", nn=True, note="(0-based column order)"),
        _c("series", "VARCHAR", nn=True), _c("transform", "VARCHAR", nn=True),
    )),
    Table("prepared", "universe × date × series", "universe", (
        _c("universe", "VARCHAR", nn=True), _c("date", "DATE", nn=True), _c("series", "VARCHAR", nn=True),
        _c("value", "DOUBLE", note="(NULL on a gap row)"),
    ), note="the transformed, aligned data the fits used"),
    Table("dropped_dates", "universe × date", "universe", (
        _c("universe", "VARCHAR", nn=True), _c("date", "DATE", nn=True),
        _c("reason", "VARCHAR", nn=True, note=(
            "(removed dates and gap rows, e.g. `no series observed (holiday …)`, "
            "`removed: X: before its first observation`, "
            "`gap row, kept as NaN: X: missing longer than max_fill_gap=3`)")),
    )),
    Table("window_fits", "universe × window_end", "window", (
        *_window_key(), _c("window_start", "DATE", nn=True), _c("nobs", "INTEGER"), _c("lags", "INTEGER"),
        _c("spectral_radius", "DOUBLE"), _c("stable", "BOOLEAN"), _c("aic", "DOUBLE"), _c("bic", "DOUBLE"),
        _c("hq", "DOUBLE"), _c("fpe", "DOUBLE"), _c("condition_number", "DOUBLE"),
        _c("portmanteau_p", "DOUBLE"), _c("skip_reason", "VARCHAR", note="(NULL when fitted)"),
    )),
    Table("connectedness", "universe × window_end", "window", (
        *_window_key(), _c("total", "DOUBLE", nn=True, note="(percent)"),
    )),
    Table("directional", "universe × window_end × series", "window", (
        *_window_key(), _c("series", "VARCHAR", nn=True), _c("to_others", "DOUBLE", nn=True),
        _c("from_others", "DOUBLE", nn=True), _c("net", "DOUBLE", nn=True, note="(percent)"),
    )),
    Table("pairwise", "universe × window_end × source × target", "window", (
        *_window_key(), _c("source", "VARCHAR", nn=True), _c("target", "VARCHAR", nn=True),
        _c("share", "DOUBLE", nn=True, note=(
            "— percent of `target`'s H-step forecast-error variance due to shocks in `source` "
            "(arlib table[target, source]); the diagonal (own share) included")),
    )),
    Table("granger", "universe × window_end × caused × causing", "window", (
        *_window_key(), _c("caused", "VARCHAR", nn=True), _c("causing", "VARCHAR", nn=True),
        _c("f_stat", "DOUBLE"),
        _c("p_value", "DOUBLE", note=(
            "(H0: `causing` does not Granger-cause `caused`; F form, Lütkepohl 2005 Sec. 3.6.1); "
            "caused ≠ causing")),
    )),
    Table("window_params", "universe × window_end", "window", (
        *_window_key(), _c("lags", "INTEGER", nn=True),
        _arr("coefs", ("p", "n", "n"), nn=True, axes=("lag", "equation", "regressor"),
             note="with p = this window's `lags`"),
        _arr("intercept", ("n",), note="or NULL (trend `n`)"),
        _arr("trend_coef", ("n",), note="or NULL (only trend `ct`)"),
        _arr("sigma_u", ("n", "n"), nn=True, note="(divided by T_eff − k)"),
    )),
    Table("responses", "universe × window_end × identification", "window", (
        *_window_key(), _c("identification", "VARCHAR", nn=True), _c("horizon", "INTEGER", nn=True),
        _arr("response", ("H+1", "n", "n"), nn=True, axes=("h", "response", "shock")),
        _arr("lower", ("H+1", "n", "n"), note="or NULL"),
        _arr("upper", ("H+1", "n", "n"), note="or NULL"),
        _c("coverage", "DOUBLE", note="or NULL"),
    )),
    Table("decompositions", "universe × window_end × method", "window", (
        *_window_key(), _c("method", "VARCHAR", nn=True), _c("horizon", "INTEGER", nn=True),
        _arr("share", ("H", "n", "n"), nn=True, axes=("step", "variable", "shock")),
    )),
    Table("band_connectedness", "universe × window_end × frequency band", "window", (
        *_window_key(), *_band_key(),
        _c("total", "DOUBLE", nn=True, source="band_total", note="(frequency connectedness, percent: the bands' values add up to the total index)"),
        _c("within_total", "DOUBLE", source="band_within", note="(connectedness within the band alone, percent; NULL for an empty band)"),
        _c("band_share", "DOUBLE", nn=True, source="band_share", note="(share of forecast-error variance in the band)"),
        _arr("to_others", ("n",), nn=True, source="band_to_others"),
        _arr("from_others", ("n",), nn=True, source="band_from_others"),
        _arr("shares", ("n", "n"), nn=True, axes=("variable", "shock"), source="band_tables", note="percent (the band table)"),
    ), note="Baruník & Křehlík (2018); only universes with `frequency_bands`", fill="band", needs="band_tables"),
    Table("joint_connectedness", "universe × window_end", "window", (
        *_window_key(),
        _c("total", "DOUBLE", nn=True, source="joint_total", note="(joint total index, percent)"),
        _c("generalized_total", "DOUBLE", nn=True, source="total_connectedness", note="(the Diebold–Yilmaz index at the same horizon)"),
        _arr("from_others", ("n",), nn=True, source="joint_from_others", note="(share of each series' variance due to all others jointly, percent)"),
    ), note="Lastrapes & Wiesen (2021); only universes with `joint = true`", fill="window", needs="joint_total"),
    Table("joint_band_connectedness", "universe × window_end × frequency band", "window", (
        *_window_key(), *_band_key(),
        _c("total", "DOUBLE", nn=True, source="joint_band_total",
           note="(band's part of the joint index, percent: the bands add up to the joint index at `truncation` steps)"),
        _arr("from_others", ("n",), nn=True, source="joint_band_from_others",
             note="(band's part of each series' share due to all others jointly, percent)"),
        _arr("variance_share", ("n",), nn=True, source="joint_band_variance",
             note="(share of each series' forecast-error variance in the band; from_others / variance_share is the joint share within the band)"),
    ), note="Lastrapes & Wiesen (2021) split by Baruník & Křehlík (2018) band; universes with `frequency_bands` and `joint = true`",
        fill="band", needs="joint_band_total"),
    Table("quantile_connectedness", "universe × window_end × quantile", "window", (
        *_window_key(), _c("quantile", "DOUBLE", nn=True, note="(τ)"),
        _c("total", "DOUBLE", nn=True, note="(percent)"),
        _arr("to_others", ("n",), nn=True), _arr("from_others", ("n",), nn=True), _arr("net", ("n",), nn=True),
        _arr("shares", ("n", "n"), nn=True, axes=("variable", "shock"), note="percent (the generalized table at τ)"),
        _c("spectral_radius", "DOUBLE"), _c("lags", "INTEGER", nn=True),
        _arr("coefs", ("p", "n", "n"), nn=True, axes=("lag", "equation", "regressor"), note="B̂(τ)"),
        _arr("intercept", ("n",), note="or NULL (trend `n`)"),
        _arr("sigma_u", ("n", "n"), nn=True, note="Σ̂(τ): centred covariance of the τ-residuals (divided by T_eff − 1)"),
    ), note="Ando, Greenwood-Nimmo & Shin (2022); only universes with `estimator = \"quantile\"` (the other per-window tables hold the τ nearest 0.5)"),
    Table("shrinkage_fits", "universe × window_end", "window", (
        *_window_key(),
        _c("tightness", "DOUBLE", nn=True, source="tightness", note="(λ, the Minnesota prior's overall tightness)"),
        _c("tightness_chosen", "BOOLEAN", nn=True, source="tightness_chosen", note="(λ chosen by the marginal likelihood, else fixed)"),
        _c("log_marginal_likelihood", "DOUBLE", nn=True, source="log_marginal_likelihood", note="(at λ; flat intercept as a limit, arlib._shrink)"),
        _c("lag_decay", "DOUBLE", nn=True, source="lag_decay"),
    ), note='natural-conjugate shrinkage VAR (arlib.rolling_shrinkage); only universes with `estimator = "shrinkage"`',
        fill="window", needs="tightness"),
    Table("tvp_state", "universe (model `tvp`)", "state", (
        *_window_key(), _c("window_start", "DATE", nn=True, note="(the first filtered date)"),
        _c("row", "BIGINT", nn=True, note="(complete prepared rows the filter has consumed)"),
        _c("lags", "INTEGER", nn=True), _c("trend", "VARCHAR", nn=True), _c("kappa1", "DOUBLE", nn=True),
        _c("kappa2", "DOUBLE", nn=True), _c("covariance", "VARCHAR", nn=True), _c("names", "VARCHAR[]", nn=True),
        _arr("params", ("k", "n"), nn=True, note="B_t, k = 1 + n·p with an intercept"),
        _arr("cov", ("m", "m"), nn=True, note="V_t (m = k, `kronecker`) or P_t (m = n·k, `full`)"),
        _arr("sigma", ("n", "n"), nn=True, note="Σ_t"),
        _arr("tail", ("p", "n"), nn=True, note="the last p rows"),
        _arr("centre", ("k",), note="μ (0 for the constant): `cov` is the V of the regressors less μ; NULL: of the regressors themselves (arlib.TVPState.centre; a column added after the table, so last)"),
    ), served=False, note="the TVP filter after `window_end` (arlib.TVPState), which the next run continues"),
    Table("prepared_writes", "run × universe × date", "log", (
        _c("run_id", "VARCHAR", nn=True, note="(the run that wrote the universe's prepared rows)"), _c("universe", "VARCHAR", nn=True),
        _c("previous_run_id", "VARCHAR", note="(the universe's `universes.run_id` it replaced; NULL for the first)"),
        _c("date", "DATE", note="(a date whose prepared rows it replaced; NULL = every date of the universe)"),
    ), served=False, note="which prepared rows each run rewrote: a publish copies only those into the snapshot"),
)

_BY_NAME = {t.name: t for t in SCHEMA}

#: Per-window result tables: one row set per (universe, window_end), replaced on refit.
RESULT_TABLES: tuple[str, ...] = tuple(t.name for t in SCHEMA if t.kind == "window")
#: Per-universe tables replaced whole by each successful run that changes anything.
UNIVERSE_TABLES: tuple[str, ...] = tuple(t.name for t in SCHEMA if t.kind == "universe")
#: Per-universe state of an incremental model (one row per universe), replaced by each run that writes it.
STATE_TABLES: tuple[str, ...] = tuple(t.name for t in SCHEMA if t.kind == "state")
#: What the serving snapshot holds (observations and revisions stay in the working warehouse).
SNAPSHOT_TABLES: tuple[str, ...] = tuple(t.name for t in SCHEMA if t.served)


def table(name: str) -> Table:
    """The declaration of table `name` (KeyError naming the known tables otherwise)."""
    try:
        return _BY_NAME[name]
    except KeyError:
        msg = f"no table {name!r} in the schema; tables: {sorted(_BY_NAME)}"
        raise KeyError(msg) from None


def columns(name: str) -> tuple[str, ...]:
    """Column names of table `name`, in stored order."""
    return table(name).column_names


def ddl(name: str) -> str:
    """The column definitions of table `name` for ``CREATE TABLE name (…)``."""
    return ", ".join(c.sql() for c in table(name).columns)


def order_by(name: str) -> tuple[str, ...]:
    """The columns a copy of `name` is sorted by (universe, window_end, date, started as present)."""
    cols = set(columns(name))
    return tuple(c for c in ("universe", "window_end", "date", "started") if c in cols)


def shape_of(table_name: str, column: str, *, n: int, p: int | None = None, h: int | None = None) -> tuple[int, ...]:
    """The numeric shape of an array column, given n, and p (window lags) or H (row horizon)."""
    sizes = {"n": n, "p": p, "H": h, "H+1": None if h is None else h + 1}
    out = []
    for sym in table(table_name).column(column).shape:
        size = sizes[sym]
        if size is None:
            msg = f"{table_name}.{column}: shape symbol {sym!r} needs its value"
            raise ValueError(msg)
        out.append(int(size))
    return tuple(out)


def flat_size(shape: tuple[int, ...]) -> int:
    return math.prod(shape)


def schema_markdown() -> str:
    """The documentation's table of tables, generated from `SCHEMA` (see docs/warehouse.md)."""
    lines = [
        "| table | one row per | served | columns |",
        "|---|---|---|---|",
    ]
    for t in SCHEMA:
        cols = ", ".join(c.doc() for c in t.columns)
        if t.note:
            cols += f" — {t.note}"
        served = "yes" if t.served else "no (warehouse only)"
        lines.append(f"| `{t.name}` | {t.grain} | {served} | {cols} |")
    return "\n".join(lines) + "\n"
