"""Prefect 3 flows: the nightly job as thin ordering of tasks around the plain steps of pipeline.jobs.

nightly flow = mark interrupted runs → ingest (one read task per source, in parallel on a thread
pool of the flow process; each store runs in the flow process, one writer) → every universe: start
+ plan (in process), then all fit blocks of all universes submitted at once (threads locally, Dask
workers with ``[execution] runner = "dask"``, see pipeline.execution) → per universe, store (in
process, one transaction) → publish (atomic snapshot swap) → export (changed universes, and any
whose report for the latest window date is missing from the export directory).

A failing source or universe is recorded (ingest_batches / runs) and the others continue. Nothing
here reads the environment: the CLI sets Prefect's settings before importing this module.
"""

from __future__ import annotations

import logging
import time
from collections.abc import Callable
from datetime import date
from pathlib import Path
from typing import TYPE_CHECKING, Any

from prefect import flow, task
from prefect import runtime as prefect_runtime
from prefect.cache_policies import NO_CACHE

from pipeline import execution, jobs, quiet
from pipeline import warehouse as wh
from pipeline._logs import pipeline_logs_to_prefect
from pipeline._summary import NightlySummary, summary_rows
from pipeline._today import schedule_today
from pipeline.config import Config, load_config
from pipeline.errors import ShockflowError
from pipeline.jobs import IngestResult

if TYPE_CHECKING:
    import polars as pl

    from pipeline.jobs import UniverseJob, UniverseResult
    from pipeline.publish import PublishResult
    from pipeline.sources import SourceFrame

__all__ = [
    "NightlySummary",
    "final_state",
    "nightly",
    "nightly_flow",
    "nightly_run_flow",
    "set_progress_hook",
    "summary_rows",
    "task_runner",
]

log = logging.getLogger("shockflow.flows")

_TASK_OPTIONS: dict[str, Any] = {"cache_policy": NO_CACHE, "persist_result": False}

#: stage, item, done, total → None. Set by the CLI for its progress bars; None = silent.
_progress_hook: Callable[[str, str, int, int], None] | None = None


def set_progress_hook(hook: Callable[[str, str, int, int], None] | None) -> None:
    """Install (or clear) a progress callback; called from the flow's own thread only."""
    global _progress_hook
    _progress_hook = hook


def _progress(stage: str, item: str, done: int, total: int) -> None:
    if _progress_hook is not None:
        _progress_hook(stage, item, done, total)


def final_state(summary: NightlySummary) -> Any:
    """The nightly flow's final state: Completed, or Failed naming every failure (`data`: the summary).

    A night where any source, universe, publish or export failed ends Failed, so Prefect's
    automations and a team's alerts on failed flow runs fire; the summary still comes back.
    """
    from prefect.states import Completed, Failed

    failures = summary.failures
    if not failures:
        return Completed(message="every source and universe succeeded", data=summary)
    what = "nothing ran" if summary.exit_code == 1 else "partial"
    return Failed(message=f"{what}: {len(failures)} failure(s): " + "; ".join(failures), data=summary)


def _publish_summary_artifact(summary: NightlySummary) -> None:
    """The run summary as a Prefect table artifact of this flow run (key `shockflow-nightly-summary`)."""
    from prefect.artifacts import create_table_artifact

    failures = summary.failures
    create_table_artifact(
        table=summary_rows(summary),
        key="shockflow-nightly-summary",
        description=(
            f"shockflow nightly run: {'no failures' if not failures else '; '.join(failures)}. "
            "A research tool, not financial advice; estimated relations between markets change."
        ),
    )


# ------------------------------------------------------------------------------------------
# Tasks: each wraps one plain step
# ------------------------------------------------------------------------------------------


@task(name="read-source", task_run_name="read {source.name}", **_TASK_OPTIONS)
def read_source_task(source: Any, today: date) -> SourceFrame:
    return jobs.read_source_step(source, today=today)


@task(name="store-source", task_run_name="store {source_name}", **_TASK_OPTIONS)
def store_source_task(warehouse_path: Path, source_name: str, frame: Any, error: str | None, seconds_read: float) -> IngestResult:
    exc = ShockflowError(error) if error is not None else None
    return jobs.store_ingest(warehouse_path, source_name, frame, error=exc, seconds_read=seconds_read)


@task(name="plan-universe", task_run_name="plan {universe.name}", **_TASK_OPTIONS)
def plan_universe_task(warehouse_path: Path, universe: Any, run_id: str, full: bool, block_windows: int) -> UniverseJob:
    return jobs.plan_universe(warehouse_path, universe, run_id, full=full, block_windows=block_windows)


@task(name="fit-block", task_run_name="fit {universe.name} block {block}", **_TASK_OPTIONS)
def fit_block_task(prepared: Any, universe: Any, ends: Any, run_id: str, with_bands: bool, block: int) -> dict[str, pl.DataFrame]:
    return jobs.fit_block_step(prepared, universe, ends, run_id=run_id, with_bands=with_bands)


@task(name="store-universe", task_run_name="store {job.universe.name}", **_TASK_OPTIONS)
def store_universe_task(warehouse_path: Path, job: Any, blocks: list[Any], seconds_fit: float) -> UniverseResult:
    return jobs.store_universe(warehouse_path, job, blocks, seconds_fit=seconds_fit)


@task(name="publish", **_TASK_OPTIONS)
def publish_task(config: Config) -> PublishResult:
    return jobs.publish_step(config)


@task(name="missing-exports", **_TASK_OPTIONS)
def missing_exports_task(config: Config, universes: list[str]) -> list[str]:
    return jobs.missing_exports_step(config, universes)


@task(name="export", **_TASK_OPTIONS)
def export_task(config: Config, universes: list[str]) -> dict[str, Any]:
    return jobs.export_step(config, universes)


def task_runner(config: Config) -> Any:
    """Prefect task runner for `[execution]` (pipeline.execution): threads, or a Dask cluster."""
    return execution.task_runner(config)


def _resolve(future: Any) -> tuple[Any, BaseException | None]:
    try:
        return future.result(), None
    except BaseException as exc:  # a task's own error, re-raised by Prefect
        return None, exc


# ------------------------------------------------------------------------------------------
# The flow body (ordering only)
# ------------------------------------------------------------------------------------------


def _nightly_body(
    config: Config,
    *,
    universes: list[str] | None,
    full: bool,
    export: bool,
    today: date,
) -> NightlySummary:
    # one anchor connection for the whole run: steps share the open database (see wh.hold)
    with wh.hold(config.warehouse.path) as con:
        return _nightly_steps(config, con, universes=universes, full=full, export=export, today=today)


def _nightly_steps(
    config: Config,
    con: Any,
    *,
    universes: list[str] | None,
    full: bool,
    export: bool,
    today: date,
) -> NightlySummary:
    summary = NightlySummary(today=today)
    path = config.warehouse.path
    summary.interrupted_marked = wh.mark_interrupted(con, path=path)
    if config.export.formats:  # what an export killed mid-write left (temporary files, profiles)
        try:
            summary.abandoned_removed = jobs.remove_abandoned_step(config)
        except OSError as exc:
            log.warning("could not remove temporary files of an earlier export: %s", exc)

    # ingest: reads in parallel, stores one at a time in this process
    t0 = time.perf_counter()
    # each source's fingerprint before its read, recorded once stored (a later quiet night's check)
    taken = {s.name: quiet.source_fingerprint(s, today=today) for s in config.sources}
    # a source whose files are unchanged since its last stored read is not read again (--full reads all)
    unchanged = {} if full else quiet.unchanged_sources(config, con, taken)
    to_read = [s for s in config.sources if s.name not in unchanged]
    ingested: dict[str, IngestResult] = {
        name: IngestResult(name, "unchanged", message=f"files unchanged since ingest {batch}; not read again")
        for name, batch in unchanged.items()
    }
    started = {s.name: time.perf_counter() for s in to_read}
    # (reads use a thread pool of this process even with Dask: the sources are this node's files)
    with execution.io_task_runner() as io:
        futures = [(s, io.submit(read_source_task, {"source": s, "today": today})) for s in to_read]
        for i, (source, future) in enumerate(futures):
            frame, failure = _resolve(future)
            secs = time.perf_counter() - started[source.name]
            error = None if failure is None else (str(failure) if isinstance(failure, ShockflowError) else f"{type(failure).__name__}: {failure}")
            ingested[source.name] = store_source_task(path, source.name, frame, error, secs)
            _progress("ingest", source.name, i + 1, len(futures))
    summary.ingest = [ingested[s.name] for s in config.sources]
    try:
        read = {s.name: ingested[s.name].status == "succeeded" for s in to_read}
        quiet.record_fingerprints(config, con, taken, read)
    except Exception as exc:  # only a later quiet night's shortcut is lost
        log.warning("could not record the sources' fingerprints: %s", exc)
    summary.seconds["ingest"] = time.perf_counter() - t0

    # universes (arlib — numpy/scipy — is imported once up front and timed on its own)
    t0 = time.perf_counter()
    import arlib  # noqa: F401

    summary.seconds["import arlib"] = time.perf_counter() - t0
    t0 = time.perf_counter()
    selected = [config.universe(n) for n in universes] if universes else list(config.universes)
    # plan every universe and submit all their blocks first, so the task runner's workers (threads
    # or Dask) fit universes side by side; then store each in turn here (DuckDB has one writer)
    results: dict[str, UniverseResult] = {}
    pending: list[tuple[Any, str, Any, list[Any], float]] = []
    for universe in selected:
        run_id = None
        try:
            run_id = jobs.start_universe(path, universe)
            job = plan_universe_task(path, universe, run_id, full, config.execution.block_windows)
            block_futures = [
                fit_block_task.submit(job.prepared, universe, ends, run_id, b == len(job.blocks) - 1, b)
                for b, ends in enumerate(job.blocks)
            ]
            pending.append((universe, run_id, job, block_futures, time.perf_counter()))
        except Exception as exc:  # recorded; the other universes continue
            results[universe.name] = jobs.fail_universe(path, universe, run_id, exc)
    for i, (universe, run_id, job, block_futures, t_fit) in enumerate(pending):
        try:
            blocks = []
            for b, fut in enumerate(block_futures):
                blocks.append(fut.result())
                _progress(f"fit {universe.name}", f"block {b + 1}", b + 1, len(block_futures))
            result = store_universe_task(path, job, blocks, time.perf_counter() - t_fit)
        except Exception as exc:  # recorded; the other universes continue
            result = jobs.fail_universe(path, universe, run_id, exc, windows=int(job.plan.ends.size))
        results[universe.name] = result
        _progress("universes", universe.name, i + 1, len(pending))
    summary.universes = [results[u.name] for u in selected]
    summary.seconds["fit"] = time.perf_counter() - t0

    # publish when a universe's results changed (failed ones keep their previous results), when
    # there is no snapshot yet, or when the snapshot lags the warehouse (an earlier run was killed
    # between storing and publishing); a night with nothing new leaves the served file alone
    succeeded = [r.universe for r in summary.universes if r.status == "succeeded"]
    t0 = time.perf_counter()
    stale = jobs.stale_step(config) if succeeded else []
    changed = [
        r.universe for r in summary.universes
        if r.status == "succeeded" and (r.changed or (stale is not None and r.universe in stale))
    ]
    if changed or (succeeded and stale is None):
        try:
            publish_task(config)
            summary.published = True
        except Exception as exc:
            summary.publish_message = str(exc)
            summary.publish_failed = True
    elif succeeded:
        summary.publish_message = "nothing changed; the served snapshot is already current"
    else:
        summary.publish_message = "no universe succeeded; the served snapshot is unchanged"
    summary.seconds["publish"] = time.perf_counter() - t0

    # export the universes whose results changed, plus any whose report for its latest window date
    # is missing (an earlier run was killed between publishing and exporting); not after a failed
    # publish, as the snapshot then lags the warehouse (`shockflow export` re-exports on demand)
    t0 = time.perf_counter()
    # (a universe left with no window, as `--full` with a too-large window asks, has no report)
    emptied = {r.universe for r in summary.universes if r.status == "succeeded" and not (r.fitted + r.skipped + r.reused)}
    to_export = [u for u in changed if u not in emptied] if summary.published else []
    if export and config.export.formats and not summary.publish_failed:
        try:
            missing = missing_exports_task(config, [u.name for u in selected])
        except Exception as exc:  # e.g. a universe name unusable as a folder: export reports it too
            log.warning("could not check which exports are missing: %s", exc)
            missing = []
        to_export = to_export + [u for u in missing if u not in to_export]
    if export and to_export and config.export.formats:
        try:
            written = export_task(config, to_export)
            summary.exported = {k: [str(p) for p in v] for k, v in written.items()}
        except Exception as exc:
            summary.export_message = str(exc)
            summary.exported = {k: [str(p) for p in v] for k, v in getattr(exc, "written", {}).items()}
    summary.seconds["export"] = time.perf_counter() - t0
    return summary


def nightly(
    config: Config,
    *,
    universes: list[str] | None = None,
    full: bool = False,
    export: bool = True,
    today: date | None = None,
) -> NightlySummary:
    """Run the nightly flow for a loaded config (the CLI's entry; starts Prefect's engine).

    Returns the run's summary whatever the flow's final state (Failed when anything failed, see
    :func:`final_state`); an error that stopped the flow itself (e.g. a config error) is raised.
    """
    state: Any = nightly_flow(  # a State (return_state); Prefect's stubs say Awaitable
        str(config.path), universes=universes, full=full, export=export, today=today, return_state=True
    )
    data = state.result(raise_on_failure=False)
    if isinstance(data, NightlySummary):
        return data
    if isinstance(data, BaseException):
        raise data
    msg = f"the nightly flow ended {state.type.value} without a summary: {state.message}"
    raise ShockflowError(msg)


@flow(name="shockflow-nightly", persist_result=False, log_prints=False)
def nightly_flow(
    config_path: str,
    universes: list[str] | None = None,
    full: bool = False,
    export: bool = True,
    today: date | None = None,
) -> Any:
    """ingest → fit → publish → export for the config at `config_path` (what the schedule serves).

    Loads the config, then runs the work as a subflow whose task runner follows `[execution]`
    (threads, or Dask), so a deployment of this flow honours the config too.
    """
    config = load_config(config_path)
    # Dask workers get this run's Prefect API with every task (not a temporary server of their own)
    with execution.reporting_api(config):
        run = nightly_run_flow.with_options(task_runner=task_runner(config))
        summary = run(config, universes=universes, full=full, export=export, today=today or schedule_today(config))
    summary.flow_run_ids.insert(0, str(prefect_runtime.flow_run.id))
    _publish_summary_artifact(summary)
    return final_state(summary)


@flow(name="shockflow-nightly-run", persist_result=False, log_prints=False, validate_parameters=False)
def nightly_run_flow(
    config: Config,
    universes: list[str] | None,
    full: bool,
    export: bool,
    today: date,
) -> NightlySummary:
    """The nightly work for a loaded config (a subflow of nightly_flow)."""
    with pipeline_logs_to_prefect():  # the steps' INFO lines reach this flow run's logs
        summary = _nightly_body(config, universes=universes, full=full, export=export, today=today)
    summary.flow_run_ids.append(str(prefect_runtime.flow_run.id))
    return summary
