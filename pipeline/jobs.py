"""The nightly job's steps as plain functions (no Prefect): each opens the warehouse by path,
does one thing, and returns a small result. pipeline.flows orders them as Prefect tasks; tests
call them directly.

Steps: ``read_source_step`` (no I/O on the warehouse: safe on any worker) → ``store_ingest`` (one
writer) → ``start_universe`` → ``plan_universe`` → ``fit_block_step`` (pure compute: any worker) →
``store_universe`` | ``fail_universe`` → ``publish_step`` → ``missing_exports_step`` → ``export_step``.
``run_universe`` chains the universe steps sequentially for one universe.
"""

from __future__ import annotations

import dataclasses
import logging
import time
from dataclasses import dataclass, field
from datetime import date
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import polars as pl

from pipeline import warehouse as wh
from pipeline.errors import FitError, ShockflowError
from pipeline.fit import (
    TVPBlock,
    code_version,
    data_fingerprint,
    fit_block,
    latest_window_bands,
    plan_tvp,
    plan_windows,
    quantile_fit,
    quantile_tables,
    result_tables,
    tvp_filter,
    tvp_tables,
    tvp_training,
    window_grid,
)
from pipeline.prepare import prepare_universe
from pipeline.sources import read_source

if TYPE_CHECKING:
    from pipeline.config import Config, SourceConfig, UniverseConfig
    from pipeline.fit import WindowPlan
    from pipeline.prepare import Prepared
    from pipeline.publish import PublishResult
    from pipeline.sources import SourceFrame

__all__ = [
    "IngestResult",
    "UniverseJob",
    "UniverseResult",
    "exit_code",
    "export_step",
    "fail_universe",
    "fit_block_step",
    "ingest_source",
    "missing_exports_step",
    "plan_universe",
    "publish_step",
    "read_source_step",
    "remove_abandoned_step",
    "run_universe",
    "stale_step",
    "start_universe",
    "store_ingest",
    "store_universe",
    "window_problem",
]

log = logging.getLogger("shockflow.jobs")


def _one_line(exc: BaseException) -> str:
    if isinstance(exc, ShockflowError):
        return str(exc)
    return f"{type(exc).__name__}: {' '.join(str(exc).split())}"


# ------------------------------------------------------------------------------------------
# Ingest
# ------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class IngestResult:
    """One source's ingest: status 'succeeded' or 'failed' with the reason."""

    source: str
    status: str
    rows_read: int = 0
    rows_new: int = 0
    rows_revised: int = 0
    message: str | None = None
    seconds: float = 0.0
    series: tuple[str, ...] = ()


def read_source_step(source: SourceConfig, *, today: date | None = None) -> SourceFrame:
    """Read and validate one source (raises ShockflowError)."""
    return read_source(source, today=today)


def store_ingest(
    warehouse_path: str | Path,
    source: str,
    frame: SourceFrame | None,
    *,
    error: BaseException | None = None,
    seconds_read: float = 0.0,
) -> IngestResult:
    """Upsert a read source into the warehouse, or record why it failed. Never raises ShockflowError."""
    t0 = time.perf_counter()
    con = wh.connect(warehouse_path)
    try:
        batch = wh.start_batch(con, source, path=warehouse_path)
        if frame is None:
            message = _one_line(error) if error is not None else "not read"
            wh.finish_batch(con, batch, status="failed", message=message, path=warehouse_path)
            log.error("source %s failed: %s", source, message)
            return IngestResult(source, "failed", message=message, seconds=seconds_read)
        try:
            counts = wh.upsert_observations(con, frame.frame, source=source, batch_id=batch, path=warehouse_path)
        except ShockflowError as exc:
            wh.finish_batch(con, batch, status="failed", message=str(exc), path=warehouse_path)
            return IngestResult(source, "failed", message=str(exc), seconds=seconds_read + time.perf_counter() - t0)
        wh.finish_batch(con, batch, status="succeeded", counts=counts, path=warehouse_path)
    finally:
        con.close()
    secs = seconds_read + time.perf_counter() - t0
    log.info(
        "source %s: %d rows read, %d new, %d revised in %.2f s",
        source, counts.rows_read, counts.rows_new, counts.rows_revised, secs,
    )
    return IngestResult(
        source, "succeeded", counts.rows_read, counts.rows_new, counts.rows_revised, None, secs, tuple(frame.series)
    )


def ingest_source(warehouse_path: str | Path, source: SourceConfig, *, today: date | None = None) -> IngestResult:
    """Read one source and store it; a failure is recorded and returned, not raised."""
    t0 = time.perf_counter()
    try:
        frame = read_source_step(source, today=today)
    except ShockflowError as exc:
        return store_ingest(warehouse_path, source.name, None, error=exc, seconds_read=time.perf_counter() - t0)
    return store_ingest(warehouse_path, source.name, frame, seconds_read=time.perf_counter() - t0)


# ------------------------------------------------------------------------------------------
# Universes
# ------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class UniverseJob:
    """A planned universe run: its prepared data, the windows to fit, split into blocks.

    A tvp universe has at most one block, a `TVPBlock` (the filter is sequential over dates).
    """

    universe: UniverseConfig
    run_id: str
    prepared: Prepared
    plan: WindowPlan
    blocks: tuple[np.ndarray | TVPBlock, ...]
    fingerprint: str
    seconds_prepare: float


@dataclass(frozen=True)
class UniverseResult:
    """One universe's outcome, as the summary table shows it."""

    universe: str
    status: str
    run_id: str | None
    fitted: int = 0
    skipped: int = 0
    failed: int = 0
    reused: int = 0
    reason: str = ""
    message: str | None = None
    seconds: dict[str, float] = field(default_factory=dict)
    changed: bool = False  # results or prepared data were written (publish/export needed)


def start_universe(warehouse_path: str | Path, universe: UniverseConfig) -> str:
    """Record a `running` run for `universe`; returns the run_id."""
    con = wh.connect(warehouse_path)
    try:
        return wh.begin_run(
            con, universe=universe.name, config_hash=universe.config_hash, data_fingerprint=None,
            code_version=code_version(), path=warehouse_path,
        )
    finally:
        con.close()


def plan_universe(
    warehouse_path: str | Path,
    universe: UniverseConfig,
    run_id: str,
    *,
    full: bool = False,
    block_windows: int = 1000,
) -> UniverseJob:
    """Prepare the universe's data and decide which windows to fit (raises ShockflowError)."""
    t0 = time.perf_counter()
    con = wh.connect(warehouse_path)
    try:
        obs = wh.read_observations(con, universe.names)
        stored = None if full else wh.stored_state(con, universe.name)
    finally:
        con.close()
    prepared = prepare_universe(obs, universe)
    if universe.model == "tvp":
        plan, block = plan_tvp(prepared, universe, stored=stored, full=full)
        tvp_blocks: tuple[TVPBlock, ...] = (block,) if block.size else ()
        log.info("universe %s: %d prepared rows; %s", universe.name, len(prepared.dates), plan.reason)
        return UniverseJob(universe, run_id, prepared, plan, tvp_blocks, data_fingerprint(prepared), time.perf_counter() - t0)
    plan = plan_windows(prepared, universe, stored=stored, full=full)
    if plan.candidates == 0:  # no window fits in the data: never wipe stored results unasked
        plan = _empty_grid(warehouse_path, universe, prepared, plan, stored=stored, full=full)
    blocks = tuple(plan.ends[i : i + block_windows] for i in range(0, plan.ends.size, block_windows))
    log.info("universe %s: %d prepared rows; %s", universe.name, len(prepared.dates), plan.reason)
    return UniverseJob(universe, run_id, prepared, plan, blocks, data_fingerprint(prepared), time.perf_counter() - t0)


def window_problem(prepared: Prepared, universe: UniverseConfig) -> str | None:
    """Why `universe` has no window to fit in `prepared` (its window exceeds the rows), or None.

    For a tvp universe: why the filter has no date (its training sample takes every complete row).
    """
    rows = len(prepared.dates)
    if universe.model == "tvp":
        complete = int((~np.isnan(np.asarray(prepared.y)).any(axis=1)).sum()) if rows else 0
        train = tvp_training(universe)
        if complete > train:
            return None
        return (
            f"universe {universe.name!r}: {complete} prepared row(s) with a value in every series, but the TVP "
            f"filter's training sample takes {train}, so no date can be filtered; lower [universes.tvp] "
            f"training (at least p + k + n) or add history to its sources"
        )
    if window_grid(rows, universe)[0].size:
        return None
    return (
        f"universe {universe.name!r}: window = {universe.window} is more than its {rows} prepared row(s) "
        f"(the dates where its series have values, after calendar, fill and transform), so no window "
        f"can be fitted; lower `window` to at most {rows} or add history to its sources"
    )


def _empty_grid(
    warehouse_path: str | Path,
    universe: UniverseConfig,
    prepared: Prepared,
    plan: WindowPlan,
    *,
    stored: Any,
    full: bool,
) -> WindowPlan:
    """The plan when no window fits: fail the universe (its stored results stay as they are and stay
    served), except under ``--full`` with a changed config, which asks for the old results to go."""
    problem = window_problem(prepared, universe) or "no window to fit"
    if stored is None:
        con = wh.connect(warehouse_path)
        try:
            stored = wh.stored_state(con, universe.name)
        finally:
            con.close()
    held = 0 if stored is None else stored.windows.height
    if held == 0:
        raise FitError(problem)
    if full and stored.config_hash != universe.config_hash:
        reason = (
            f"--full with a changed config: every one of the {held} stored window(s) deleted as asked; "
            f"no window fits ({problem.split(': ', 1)[1]})"
        )
        return dataclasses.replace(plan, reason=reason)
    keep = (
        "; its previous results stay served (run with --full to replace them by none)"
        if stored.config_hash != universe.config_hash else "; its previous results stay served"
    )
    raise FitError(problem + keep)


def fit_block_step(
    prepared: Prepared, universe: UniverseConfig, ends: np.ndarray | TVPBlock, *, run_id: str, with_bands: bool
) -> dict[str, pl.DataFrame]:
    """Fit one block of window ends and return its result tables (pure compute, no I/O).

    with_bands: this is the universe's last block (its newest window gets bands and arrays).
    A `TVPBlock` runs (or continues) the TVP filter instead.
    """
    if isinstance(ends, TVPBlock):
        return tvp_tables(tvp_filter(prepared, universe, ends), prepared, universe, ends, run_id=run_id)
    if universe.estimator == "quantile":
        return quantile_tables(quantile_fit(prepared, universe, ends), prepared, universe, run_id=run_id)
    rolling = fit_block(prepared, universe, ends)
    bands = latest_window_bands(prepared, universe, rolling) if with_bands else None
    return result_tables(rolling, prepared, universe, run_id=run_id, bands=bands, last_block=with_bands)


def store_universe(
    warehouse_path: str | Path,
    job: UniverseJob,
    blocks: list[dict[str, pl.DataFrame]],
    *,
    seconds_fit: float = 0.0,
) -> UniverseResult:
    """Write the fitted blocks in one transaction and mark the run succeeded."""
    t0 = time.perf_counter()
    tables: dict[str, pl.DataFrame] = {}
    for name in (*wh.RESULT_TABLES, *wh.STATE_TABLES):
        parts = [b[name] for b in blocks if name in b and b[name].height]
        if parts:
            tables[name] = pl.concat(parts, how="vertical_relaxed")
    fits = tables.get("window_fits")
    fitted = int(fits["skip_reason"].is_null().sum()) if fits is not None else 0
    skipped = (fits.height - fitted) if fits is not None else 0
    plan = job.plan
    message = "; ".join([plan.reason, *plan.notes])
    con = wh.connect(warehouse_path)
    try:
        wh.store_universe_results(
            con,
            run_id=job.run_id,
            universe=job.universe,
            tables=tables,
            replace_ends=plan.delete_ends,
            # only the rows stored anew (plan.prepared_dates) when the run replaces some dates
            prepared=(
                job.prepared.frame_of(plan.prepared_dates if plan.delete_ends is not None else None)
                if plan.prepared_changed else None
            ),
            dropped=job.prepared.dropped if plan.prepared_changed else None,
            counts={"fitted": fitted, "skipped": skipped, "failed": 0},
            prepared_dates=plan.prepared_dates if plan.delete_ends is not None else None,
            data_fingerprint=job.fingerprint,
            message=message,
            path=warehouse_path,
        )
    finally:
        con.close()
    seconds = {"prepare": job.seconds_prepare, "fit": seconds_fit, "store": time.perf_counter() - t0}
    log.info("universe %s: %d fitted, %d skipped, %d reused", job.universe.name, fitted, skipped, plan.reused)
    changed = bool(plan.ends.size or plan.prepared_changed or plan.delete_ends is None or plan.delete_ends)
    return UniverseResult(
        job.universe.name, "succeeded", job.run_id, fitted, skipped, 0, plan.reused, plan.reason, None, seconds, changed
    )


def fail_universe(
    warehouse_path: str | Path,
    universe: UniverseConfig,
    run_id: str | None,
    error: BaseException,
    *,
    windows: int = 0,
) -> UniverseResult:
    """Record a failed universe run (results untouched) and return its result."""
    message = _one_line(error)
    log.error("universe %s failed: %s", universe.name, message)
    if run_id is not None:
        try:
            con = wh.connect(warehouse_path)
            try:
                wh.fail_run(con, run_id, message, windows_failed=windows, path=warehouse_path)
            finally:
                con.close()
        except ShockflowError as exc:  # the warehouse itself is unusable: report both
            message = f"{message} (and recording the failure failed: {exc})"
    return UniverseResult(universe.name, "failed", run_id, failed=windows, message=message)


def run_universe(
    warehouse_path: str | Path, universe: UniverseConfig, *, full: bool = False, block_windows: int = 1000
) -> UniverseResult:
    """start → plan → fit every block → store, sequentially; failures are recorded and returned."""
    with wh.hold(warehouse_path):
        return _run_universe(warehouse_path, universe, full=full, block_windows=block_windows)


def _run_universe(warehouse_path: str | Path, universe: UniverseConfig, *, full: bool, block_windows: int) -> UniverseResult:
    run_id = None
    windows = 0
    try:
        run_id = start_universe(warehouse_path, universe)
        job = plan_universe(warehouse_path, universe, run_id, full=full, block_windows=block_windows)
        windows = int(job.plan.ends.size)
        t0 = time.perf_counter()
        blocks = [
            fit_block_step(job.prepared, universe, ends, run_id=run_id, with_bands=i == len(job.blocks) - 1)
            for i, ends in enumerate(job.blocks)
        ]
        return store_universe(warehouse_path, job, blocks, seconds_fit=time.perf_counter() - t0)
    except ShockflowError as exc:
        return fail_universe(warehouse_path, universe, run_id, exc, windows=windows)


# ------------------------------------------------------------------------------------------
# Publish, export, summary
# ------------------------------------------------------------------------------------------


def publish_step(config: Config) -> PublishResult:
    """Copy the warehouse's result tables into the serving snapshot (atomic swap)."""
    from pipeline.publish import publish_snapshot

    con = wh.connect(config.warehouse.path)
    try:
        return publish_snapshot(con, config.warehouse.snapshot)
    finally:
        con.close()


def stale_step(config: Config) -> list[str] | None:
    """Universes whose served results lag the warehouse (None: no readable snapshot yet).

    Non-empty after a run that stored results but was killed before it published them.
    """
    from pipeline.publish import stale_universes

    con = wh.connect(config.warehouse.path)
    try:
        return stale_universes(con, config.warehouse.snapshot)
    finally:
        con.close()


def remove_abandoned_step(config: Config) -> int:
    """Delete temporary export files left by a killed run (pipeline.export.remove_abandoned)."""
    from pipeline.export import remove_abandoned

    removed = remove_abandoned(config.export.directory)
    for p in removed:
        log.info("removed %s, left by an export that was killed", p)
    return len(removed)


def missing_exports_step(config: Config, universes: list[str]) -> list[str]:
    """Universes (of `universes`) whose export for their latest window date is missing or partial.

    The latest window date is read from the serving snapshot (what `export_step` exports); the
    report is present when ``<export dir>/<date>/<universe>/`` (pipeline.export's naming) holds
    every file `[export] formats` asks for: ``<universe>-<date>.html``, ``<table>.csv`` /
    ``<table>.parquet`` per extract table, and ``<universe>-<date>.pdf`` when a headless Chromium
    is installed. A run killed after publishing but before (or while) exporting leaves exactly this
    gap; the next run fills it. Universes with no results in the snapshot (or no snapshot) are not
    missing anything.
    """
    import duckdb

    from pipeline.export import EXTRACT_TABLES, find_chromium, safe_dir_name

    snapshot = config.warehouse.snapshot
    formats = {str(f).lower() for f in config.export.formats}
    if not universes or not formats or not Path(snapshot).is_file():
        return []
    try:
        con = duckdb.connect(str(snapshot), read_only=True)
    except duckdb.Error as exc:  # unreadable snapshot: the export step itself reports it
        log.warning("cannot read serving snapshot %s to check exports: %s", snapshot, exc)
        return []
    try:
        rows = con.execute(
            "SELECT universe, max(window_end) FROM window_fits WHERE universe IN "
            "(SELECT unnest(CAST(? AS VARCHAR[]))) GROUP BY universe",
            [list(universes)],
        ).fetchall()
    except duckdb.Error as exc:
        log.warning("cannot read serving snapshot %s to check exports: %s", snapshot, exc)
        return []
    finally:
        con.close()
    latest: dict[str, date] = {u: d for u, d in rows if d is not None}
    with_pdf = "pdf" in formats and find_chromium() is not None
    missing = []
    for name in universes:
        day = latest.get(name)
        if day is None:
            continue
        safe = safe_dir_name(name)
        folder = Path(config.export.directory) / day.isoformat() / safe
        stem = f"{safe}-{day.isoformat()}"
        expected = [f"{stem}.html"] if "html" in formats else []
        expected += [f"{t}.{ext}" for ext in ("csv", "parquet") if ext in formats for t in EXTRACT_TABLES]
        expected += [f"{stem}.pdf"] if with_pdf else []
        absent = [f for f in expected if not (folder / f).is_file()]
        if absent:
            log.info("export of %s for %s is missing %s: exporting it again", name, day, ", ".join(absent))
            missing.append(name)
    return missing


def export_step(config: Config, universes: list[str], *, out_dir: str | Path | None = None) -> dict[str, Any]:
    """Export reports for `universes` from the snapshot (pipeline.export, imported lazily)."""
    from pipeline.export import export_all

    return export_all(
        config.warehouse.snapshot,
        out_dir if out_dir is not None else config.export.directory,
        formats=config.export.formats,
        universes=universes,
    )


def exit_code(failures: int, successes: int) -> int:
    """0: everything ran; 2: partial (something failed, the rest ran); 1: nothing ran."""
    if failures == 0:
        return 0
    return 2 if successes else 1
