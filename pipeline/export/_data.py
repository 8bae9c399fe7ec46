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
from dataclasses import dataclass, field

import numpy as np
import polars as pl

from pipeline.errors import ExportError
from pipeline.export._derive import derive_decompositions, derive_responses
from pipeline.export._snapshot import Snapshot, UniverseInfo

__all__ = ["DecompositionSet", "ReportData", "ResponseSet", "gather"]


@dataclass(frozen=True)
class ResponseSet:
    """Impulse responses of one window under one identification, with optional bands."""

    identification: str
    horizon: int
    response: np.ndarray  # (H+1, n, n) [h, response, shock]
    lower: np.ndarray | None  # same shape, or None when no bands
    upper: np.ndarray | None
    coverage: float | None
    origin: str  # where the numbers came from, said in the report


@dataclass(frozen=True)
class DecompositionSet:
    """A forecast-error variance decomposition of one window under one method."""

    method: str
    horizon: int
    share: np.ndarray  # (H, n, n) [step, variable, shock], rows sum to one
    origin: str


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


def _as_array(values: list[float] | None, shape: tuple[int, ...], what: str) -> np.ndarray | None:
    if values is None:
        return None
    arr = np.asarray(values, dtype=np.float64)
    if arr.size != int(np.prod(shape)):
        msg = (f"{what} holds {arr.size} numbers but shape {shape} needs {int(np.prod(shape))}; "
               "the snapshot does not follow docs/warehouse.md")
        raise ExportError(msg)
    return arr.reshape(shape)  # C order, as stored


def gather(snap: Snapshot, universe: str, as_of: dt.date | None = None) -> ReportData:
    """Read everything the report of `universe` shows, as of `as_of` (latest when None)."""
    info = snap.universe(universe)
    n = info.n
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

    conn = snap.connectedness(universe, report_date)
    direc = snap.directional(universe, report_date)
    pair = snap.pairwise(universe, report_date)
    gr = snap.granger(universe, report_date)
    fits = snap.window_fits(universe, report_date)

    table = to_o = from_o = net = gf = gp = None
    total = None
    run_id = None
    responses: list[ResponseSet] = []
    decomps: list[DecompositionSet] = []
    if fitted is not None:
        c_row = conn.filter(pl.col("window_end") == fitted)
        total = float(c_row["total"][0])
        run_id = c_row["run_id"][0]
        table = _square(pair.filter(pl.col("window_end") == fitted), "target", "source", "share",
                        info.series)
        d = direc.filter(pl.col("window_end") == fitted)
        pos = {s: i for i, s in enumerate(info.series)}
        to_o, from_o, net = (np.full(n, np.nan) for _ in range(3))
        for s, t, f, nt in d.select("series", "to_others", "from_others", "net").iter_rows():
            if s in pos:
                to_o[pos[s]], from_o[pos[s]], net[pos[s]] = t, f, nt
        g = gr.filter(pl.col("window_end") == fitted)
        gf = _square(g, "caused", "causing", "f_stat", info.series)
        gp = _square(g, "caused", "causing", "p_value", info.series)

        for r in snap.responses(universe, fitted).iter_rows(named=True):
            h = int(r["horizon"])
            shape = (h + 1, n, n)
            responses.append(ResponseSet(
                identification=str(r["identification"]), horizon=h,
                response=_as_array(r["response"], shape, "responses.response"),
                lower=_as_array(r["lower"], shape, "responses.lower"),
                upper=_as_array(r["upper"], shape, "responses.upper"),
                coverage=None if r["coverage"] is None else float(r["coverage"]),
                origin="stored by the run",
            ))
        for r in snap.decompositions(universe, fitted).iter_rows(named=True):
            h = int(r["horizon"])
            decomps.append(DecompositionSet(
                method=str(r["method"]), horizon=h,
                share=_as_array(r["share"], (h, n, n), "decompositions.share"),
                origin="stored by the run",
            ))
        if not responses or not decomps:
            params = snap.window_params(universe, fitted)
            fit_row = fits.filter(pl.col("window_end") == fitted)
            if params.height == 0:
                notes.append("Impulse responses and decompositions were not stored for this "
                             "window and its parameters are not in the snapshot.")
            else:
                p = params.row(0, named=True)
                start = fit_row["window_start"][0] if fit_row.height else None
                rows = (snap.prepared_matrix(universe, info, start, fitted)
                        if start is not None else None)
                if not responses:
                    responses.append(derive_responses(info, p, rows, notes))
                if not decomps:
                    decomps.extend(derive_decompositions(info, p, notes))

    if run_id is None:  # nothing fitted: the universe's last run still explains why
        run_id = info.run_id
    runs = snap.runs(universe)
    run_rows = runs.filter(pl.col("run_id") == run_id) if run_id is not None else runs.head(0)
    before = None
    if run_rows.height:
        before = run_rows["finished"][0] or run_rows["started"][0]
    return ReportData(
        info=info, report_date=report_date, fitted_date=fitted, connectedness=conn,
        directional=direc, pairwise=pair, granger=gr, fits=fits, table=table, to_others=to_o,
        from_others=from_o, net=net, total=total, granger_f=gf, granger_p=gp,
        responses=responses, decompositions=decomps, runs=runs,
        batches=snap.source_batches(universe, report_date, before), run_id=run_id, notes=notes,
    )
