"""Everything one universe's report shows, gathered from the snapshot into arrays and frames.

`gather(snapshot, universe, as_of)` is the only reader the report and extract writers use, so the
HTML, the CSV/Parquet files and the tests all see the same numbers.

Array conventions (docs/warehouse.md, ../shared/DESIGN.md):
- pairwise table (n, n) in percent, [target, source]: share of target's H-step forecast-error
  variance due to shocks in source; directional to/from/net (n,) in percent;
- Granger (n, n) [caused, causing]; H0: `causing` does not Granger-cause `caused`;
- responses (H+1, n, n) [horizon, response, shock]; decompositions (H, n, n) [step, variable, shock].
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np
import polars as pl

from pipeline.errors import ExportError
from pipeline.export._derive import derive_decompositions, derive_responses
from pipeline.export._snapshot import Snapshot, UniverseInfo, frame
from serving import (
    SCHEMA,
    BandHistory,
    DecompositionSet,
    JointHistory,
    QuantileHistory,
    ResponseSet,
    ServingError,
    StoredResult,
    stored_decompositions,
    stored_responses,
)

__all__ = ["DecompositionSet", "ReportData", "ResponseSet", "gather"]


@dataclass(frozen=True)
class ReportData:
    info: UniverseInfo
    report_date: dt.date  # names the export directory: latest window end (or `as_of`)
    fitted_date: dt.date | None  # latest window that was fitted (has results)
    connectedness: pl.DataFrame  # history: run_id, universe, window_end, total
    directional: pl.DataFrame  # history: ..., series, to_others, from_others, net
    pairwise: pl.DataFrame  # history, long rows
    granger: pl.DataFrame  # history, long rows
    fits: pl.DataFrame  # history of window_fits rows (fitted and skipped)
    table: np.ndarray | None  # (n, n) latest pairwise, percent, [target, source]
    to_others: np.ndarray | None  # (n,)
    from_others: np.ndarray | None
    net: np.ndarray | None
    total: float | None
    granger_f: np.ndarray | None  # (n, n) [caused, causing], NaN on the diagonal
    granger_p: np.ndarray | None
    responses: list[ResponseSet]
    decompositions: list[DecompositionSet]
    runs: pl.DataFrame
    batches: pl.DataFrame
    run_id: str | None  # run that produced the latest fitted window
    notes: list[str] = field(default_factory=list)
    bands: BandHistory | None = None  # frequency-band connectedness of every window (or none stored)
    joint: JointHistory | None = None  # joint connectedness of every window (or none stored)
    quantiles: QuantileHistory | None = None  # connectedness at every τ (estimator "quantile" only)
    #: the universe of the other model on the same series (Snapshot.counterpart): its name, model
    #: and (date, total) index history up to the report date; None when there is none
    counterpart: tuple[str, str, list[tuple[dt.date, float]]] | None = None
    #: a shrinkage universe's λ per window (shrinkage_fits: window_end, tightness, ...); None otherwise
    tightness: pl.DataFrame | None = None
    #: every declared result table (serving/_schema.py `fill`) the universe stores, read back whole
    #: (`Snapshot.results`): a new declared result reaches the report's sections with no edit here
    results: Mapping[str, StoredResult] = field(default_factory=dict)

    @property
    def run(self) -> dict | None:
        """The `runs` row of `run_id`, or None when the snapshot has no such row."""
        if self.run_id is None or self.runs.height == 0:
            return None
        rows = self.runs.filter(pl.col("run_id") == self.run_id)
        return rows.row(0, named=True) if rows.height else None


def _square(df: pl.DataFrame, row: str, col: str, value: str, names: tuple[str, ...]) -> np.ndarray:
    """Long rows (row, col, value) → (n, n) array in series order; missing cells are NaN."""
    pos = {s: i for i, s in enumerate(names)}
    out = np.full((len(names), len(names)), np.nan)
    for r, c, v in df.select(row, col, value).iter_rows():
        if r in pos and c in pos and v is not None:
            out[pos[r], pos[c]] = v
    return out


def gather(snap: Snapshot, universe: str, as_of: dt.date | None = None) -> ReportData:
    """Read everything the report of `universe` shows, as of `as_of` (latest when None).

    The read side's errors (a malformed stored array, …) become `ExportError`, naming the file.
    """
    try:
        return _gather(snap, universe, as_of)
    except ServingError as exc:
        msg = f"serving snapshot {snap.path}: {exc}"
        raise ExportError(msg) from None


def _gather(snap: Snapshot, universe: str, as_of: dt.date | None) -> ReportData:
    known = snap.universes()
    if universe not in known:
        msg = (
            f"universe {universe!r} is not in serving snapshot {snap.path}; "
            f"known universes: {', '.join(map(repr, sorted(known))) or 'none'}"
        )
        raise ExportError(msg)
    info: UniverseInfo = known[universe]
    latest = snap.latest_window(universe, as_of)
    if latest is None:
        when = f" on or before {as_of}" if as_of else ""
        msg = (f"universe {universe!r} has no windows{when} in snapshot {snap.path}; "
               "run `shockflow run` for it first, or choose a later `as_of`")
        raise ExportError(msg)
    report_date = as_of or latest
    notes: list[str] = []
    fitted = snap.latest_fitted_window(universe, report_date)
    if fitted is None:
        notes.append("No window up to this date was fitted; see model health for the reasons.")
    elif fitted != latest:
        notes.append(f"The latest window ({latest}) was not fitted; tables show the latest "
                     f"fitted window, {fitted}.")

    conn = frame(snap.history("connectedness", universe, report_date))
    direc = frame(snap.history("directional", universe, report_date))
    pair = frame(snap.history("pairwise", universe, report_date))
    gr = frame(snap.history("granger", universe, report_date))
    fits = frame(snap.history("window_fits", universe, report_date))

    table = to_o = from_o = net = gf = gp = None
    total = None
    run_id = None
    responses: list[ResponseSet] = []
    decomps: list[DecompositionSet] = []
    if fitted is not None:
        c_row = conn.filter(pl.col("window_end") == fitted)
        total = float(c_row["total"][0])
        run_id = c_row["run_id"][0]
        # the same reader calls the dashboard makes: the same numbers on screen and in the report
        table = snap.pairwise_at(info, fitted)
        to_o, from_o, net = snap.spillover_sums(info, fitted)
        gp = snap.granger_at(info, fitted)
        gf = _square(gr.filter(pl.col("window_end") == fitted), "caused", "causing", "f_stat",
                     info.series)
        present = snap.tables()  # the array tables are optional in hand-made snapshots
        responses = stored_responses(snap, info, fitted) if "responses" in present else []
        decomps = stored_decompositions(snap, info, fitted) if "decompositions" in present else []
        if not responses or not decomps:
            try:
                if "window_params" not in present:
                    raise ServingError("no window_params")
                snap.fit(info, fitted)
            except ServingError:
                notes.append("Impulse responses and decompositions were not stored for this "
                             "window and its parameters are not in the snapshot.")
            else:
                if not responses:
                    responses = derive_responses(snap, info, fitted, notes)
                if not decomps:
                    decomps = derive_decompositions(snap, info, fitted, notes)

    if run_id is None:  # nothing fitted: the universe's last run still explains why
        run_id = info.run_id
    runs = frame(snap.runs(universe))
    run_rows = runs.filter(pl.col("run_id") == run_id) if run_id is not None else runs.head(0)
    before = None
    if run_rows.height:
        before = run_rows["finished"][0] or run_rows["started"][0]
    return ReportData(
        info=info, report_date=report_date, fitted_date=fitted, connectedness=conn,
        directional=direc, pairwise=pair, granger=gr, fits=fits, table=table, to_others=to_o,
        from_others=from_o, net=net, total=total, granger_f=gf, granger_p=gp,
        responses=responses, decompositions=decomps, runs=runs,
        batches=frame(snap.source_batches(universe, report_date, before)), run_id=run_id, notes=notes,
        bands=snap.band_history(info), joint=snap.joint_history(info), quantiles=snap.quantile_history(info), counterpart=_counterpart(snap, info, report_date),
        tightness=(frame(snap.history("shrinkage_fits", universe, report_date))
                   if info.estimator == "shrinkage" and "shrinkage_fits" in snap.tables() else None),
        results={t.name: r for t in SCHEMA if t.fill and (r := snap.results(t.name, info)) is not None},
    )


def _counterpart(snap: Snapshot, info: UniverseInfo, cut: dt.date) -> tuple[str, str, list[tuple[dt.date, float]]] | None:
    other = snap.counterpart(info)
    if other is None:
        return None
    return other.name, other.model, [(e, float(v)) for e, v in snap.index_history(other.name) if e <= cut]
