"""The `shockflow` command (typer): run, check, export, schedule, demo, dashboard.

This package assembles the pipeline and the dashboard; neither of those imports the other (nor
this). ``python -m shockflow`` is the same command.

Exit codes (``EXIT_*`` below, documented in the README): 0 everything ran; 1 nothing ran, or a
configuration / input error stopped the command; 2 partial (something failed, the rest ran);
64 a command-line usage error (unknown option, missing value; sysexits' EX_USAGE); 130 interrupted
(Ctrl+C); 143 terminated (SIGTERM). Errors print as one line; ``--debug`` adds the traceback.

This is the entry point, the one place that reads the environment: it sets Prefect's settings for
the project's own processes (analytics off, a longer start-up limit for Prefect's temporary
server, quiet logs) before Prefect is imported.
"""

from __future__ import annotations

import json
import os
import re
import signal
import sys
import time
from collections.abc import Callable
from pathlib import Path
from typing import TYPE_CHECKING, Annotated, Any

import typer
from rich.console import Console
from rich.markup import escape
from rich.table import Table
from typer.core import TyperGroup

import data_samples
from pipeline.errors import ShockflowError

if TYPE_CHECKING:
    from pipeline.config import Config
    from pipeline.flows import NightlySummary

__all__ = [
    "EXIT_INTERRUPTED",
    "EXIT_NOTHING_RAN",
    "EXIT_OK",
    "EXIT_PARTIAL",
    "EXIT_TERMINATED",
    "EXIT_USAGE",
    "app",
    "config_path",
    "demo_config",
    "main",
    "prefect_environment",
    "summary_json",
    "version_text",
]

EXIT_OK = 0
#: nothing ran, or a configuration / input error stopped the command
EXIT_NOTHING_RAN = 1
#: something failed, the rest ran (the summary names each failure)
EXIT_PARTIAL = 2
#: the command line itself is wrong (sysexits.h EX_USAGE); click's own default, 2, is "partial" here
EXIT_USAGE = 64
EXIT_INTERRUPTED = 130
EXIT_TERMINATED = 143

#: the caution every output meant for people carries
CAUTION = "A research tool, not financial advice; estimated relations between markets change."

console = Console(stderr=True, highlight=False)
out = Console(highlight=False)


class Terminated(KeyboardInterrupt):
    """Raised in the main thread by SIGTERM: the run stops as on Ctrl+C (Prefect's temporary server
    is stopped at exit, see pipeline._tempserver) and the command exits 143."""


#: set by the SIGTERM handler: an exception a library raises in its place (DuckDB turns the signal
#: into "RuntimeError: Query interrupted" when it arrives inside a query) still means "terminated"
_TERMINATED: list[bool] = []


def _on_sigterm(signum: int, frame: Any) -> None:
    _TERMINATED.append(True)
    raise Terminated


#: read end of the signal wake-up pipe: Python's C-level handler writes every signal number there,
#: whichever Python handler runs (Prefect swaps in its own SIGTERM handler during a flow)
_WAKE: list[int] = []


def _watch_signals() -> None:
    r, w = os.pipe()
    os.set_blocking(r, False)
    os.set_blocking(w, False)
    signal.set_wakeup_fd(w, warn_on_full_buffer=False)
    _WAKE.append(r)


def _terminated() -> bool:
    """True once SIGTERM arrived, even if another handler turned it into another exception."""
    for r in _WAKE:
        try:
            if signal.SIGTERM in os.read(r, 4096):
                _TERMINATED.append(True)
        except BlockingIOError:
            pass
    return bool(_TERMINATED)


def _usage_exit_code(exc: Exception) -> None:
    if any(c.__name__ == "UsageError" for c in type(exc).__mro__):
        exc.exit_code = EXIT_USAGE  # type: ignore[attr-defined]  # click's (or typer's vendored) UsageError, found by name


class _Group(TyperGroup):
    """The command group: a command-line usage error exits EXIT_USAGE, not click's 2."""

    def make_context(self, *args: Any, **kwargs: Any) -> Any:
        try:
            return super().make_context(*args, **kwargs)
        except Exception as exc:
            _usage_exit_code(exc)
            raise

    def invoke(self, ctx: Any) -> Any:
        try:
            return super().invoke(ctx)
        except Exception as exc:
            _usage_exit_code(exc)
            raise


app = typer.Typer(
    cls=_Group,
    name="shockflow",
    help="Nightly rolling VARs, impulse responses, Granger tests, variance decompositions and "
    "connectedness over market universes. A research tool, not financial advice.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
    rich_markup_mode=None,  # plain help: brackets print as written, flags show no value, fits 80 columns
)

def version_text() -> str:
    """``shockflow <version>``: the installed package's version, plus the git commit when run from
    a checkout (the same stamp the warehouse records as a run's ``code_version``)."""
    from importlib.metadata import PackageNotFoundError, version

    try:
        text = version("shockflow")
    except PackageNotFoundError:
        text = "unknown (not installed)"
    root = Path(__file__).resolve().parents[1]
    if (root / ".git").exists():
        import subprocess

        try:
            done = subprocess.run(
                ["git", "-C", str(root), "rev-parse", "--short", "HEAD"],
                capture_output=True, text=True, timeout=5, check=False,
            )
            if done.returncode == 0 and done.stdout.strip():
                text += "+g" + done.stdout.strip()
        except (OSError, subprocess.SubprocessError):
            pass
    return f"shockflow {text}"


def _print_version(value: bool) -> None:
    if value:
        out.print(version_text(), markup=False, highlight=False)
        raise typer.Exit(EXIT_OK)


@app.callback()
def _root(
    show_version: Annotated[
        bool,
        typer.Option("--version", is_eager=True, callback=_print_version, help="Print shockflow's version and exit."),
    ] = False,
) -> None:
    del show_version


#: the demo's configuration, shipped as package data with the demo files (data_samples/)
DEMO_CONFIG = data_samples.folder() / "demo.toml"

#: Prefect settings for the project's own processes (existing values win).
PREFECT_DEFAULTS = {
    "PREFECT_SERVER_ANALYTICS_ENABLED": "false",
    "DO_NOT_TRACK": "1",
    "PREFECT_SERVER_EPHEMERAL_STARTUP_TIMEOUT_SECONDS": "120",
    "PREFECT_LOGGING_LEVEL": "WARNING",
    # the pipeline's own loggers (shockflow.*) go to Prefect's handlers (and its UI) too
    "PREFECT_LOGGING_EXTRA_LOGGERS": "shockflow",
}


def prefect_environment(environ: dict[str, str] | os._Environ[str] = os.environ, *, debug: bool = False) -> None:
    """Set Prefect's defaults in `environ` unless already set (call before importing prefect)."""
    for key, value in PREFECT_DEFAULTS.items():
        if key == "PREFECT_LOGGING_LEVEL" and debug:
            value = "INFO"
        environ.setdefault(key, value)


ConfigOpt = Annotated[
    Path | None,
    typer.Option(
        "--config", "-c", metavar="FILE",
        help="The TOML configuration file (default: $SHOCKFLOW_CONFIG, else ./shockflow.toml).",
    ),
]
#: the environment variable naming the configuration file when --config is not given
CONFIG_ENV = "SHOCKFLOW_CONFIG"
#: the file looked for in the current folder when neither --config nor SHOCKFLOW_CONFIG is given
DEFAULT_CONFIG = "shockflow.toml"
DebugOpt = Annotated[bool, typer.Option("--debug", help="Show full tracebacks on errors.")]
HostOpt = Annotated[
    str | None,
    typer.Option(
        "--host", metavar="ADDRESS",
        help="Address to listen on (default: [dashboard] host, else 127.0.0.1). Any other than "
        "loopback needs an access token or credentials.",
    ),
]
PortOpt = Annotated[
    int | None,
    typer.Option("--port", metavar="PORT", help="Port to listen on (default: [dashboard] port, else 8050)."),
]
UniverseOpt = Annotated[
    list[str] | None,
    typer.Option("--universe", "-u", metavar="NAME", help="Only this universe (repeatable)."),
]


def _fail(exc: BaseException, debug: bool) -> typer.Exit:
    if debug:
        console.print_exception()
    # the dashboard's errors exist only once it was imported (not at start: a quiet `run` never does)
    dash_pkg = sys.modules.get("dashboard")
    ours: tuple[type[BaseException], ...] = (ShockflowError,)
    if dash_pkg is not None and hasattr(dash_pkg, "DashboardError"):
        ours += (dash_pkg.DashboardError,)
    text = str(exc) if isinstance(exc, ours) else f"{type(exc).__name__}: {exc}"
    console.print(f"[bold red]error:[/] {escape(text)}", soft_wrap=True)
    return typer.Exit(1)


def _guard(debug: bool, fn: Callable[[], int]) -> None:
    try:
        code = fn()
    except typer.Exit:
        raise
    except Terminated:
        console.print("[yellow]terminated (SIGTERM)[/]")
        raise typer.Exit(EXIT_TERMINATED) from None
    except KeyboardInterrupt:
        console.print("[yellow]interrupted[/]")
        raise typer.Exit(EXIT_INTERRUPTED) from None
    except Exception as exc:
        if _terminated():  # the signal surfaced as another library's exception
            console.print("[yellow]terminated (SIGTERM)[/]")
            raise typer.Exit(EXIT_TERMINATED) from None
        raise _fail(exc, debug) from None
    if _terminated():  # the flow caught the signal's exception and reported a failed state
        console.print("[yellow]terminated (SIGTERM)[/]")
        raise typer.Exit(EXIT_TERMINATED)
    raise typer.Exit(code)


def config_path(given: Path | None, environ: dict[str, str] | os._Environ[str] = os.environ) -> Path:
    """The configuration file: `--config`, else ``$SHOCKFLOW_CONFIG``, else ``./shockflow.toml``.

    The first that is given wins (an empty SHOCKFLOW_CONFIG counts as not given); a file named by
    --config or SHOCKFLOW_CONFIG that does not exist is reported by the loader, naming it.
    """
    if given is not None:
        return given
    named = environ.get(CONFIG_ENV, "").strip()
    if named:
        return Path(named).expanduser()
    local = Path.cwd() / DEFAULT_CONFIG
    if local.is_file():
        return local
    msg = (
        f"no configuration file: pass --config FILE, set {CONFIG_ENV}=FILE, or put {DEFAULT_CONFIG} "
        f"in the current folder ({Path.cwd()})"
    )
    raise ShockflowError(msg)


def _load(config: Path | None) -> Config:
    from pipeline.config import load_config

    try:
        path = config_path(config)
    except ShockflowError as exc:  # no file named and none found: the command line lacks --config
        console.print(f"[bold red]error:[/] {escape(str(exc))}", soft_wrap=True)
        raise typer.Exit(EXIT_USAGE) from None
    return load_config(path)


# ------------------------------------------------------------------------------------------
# run
# ------------------------------------------------------------------------------------------


def _summary_table(summary: NightlySummary) -> Table:
    table = Table(title="shockflow run", title_justify="left")
    for col in ("universe", "status", "fitted", "skipped", "failed", "reused", "prepare s", "fit s", "store s", "note"):
        table.add_column(col, justify="right" if col not in ("universe", "status", "note") else "left")
    for r in summary.universes:
        style = "green" if r.status in ("succeeded", "unchanged") else "red"
        s = r.seconds
        table.add_row(
            escape(r.universe), f"[{style}]{r.status}[/]", str(r.fitted), str(r.skipped), str(r.failed), str(r.reused),
            f"{s.get('prepare', 0):.2f}", f"{s.get('fit', 0):.2f}", f"{s.get('store', 0):.2f}",
            escape(r.message or r.reason),
        )
    return table


def _summary_lines(summary: NightlySummary) -> list[str]:
    lines = []
    for r in summary.universes:
        s = r.seconds
        line = (
            f"universe {r.universe}: {r.status}; fitted {r.fitted}, skipped {r.skipped}, failed {r.failed}, "
            f"reused {r.reused}; prepare {s.get('prepare', 0):.2f} s, fit {s.get('fit', 0):.2f} s, "
            f"store {s.get('store', 0):.2f} s"
        )
        note = r.message or r.reason
        lines.append(f"{line}; {note}" if note else line)
    return lines


def _sources_table(summary: NightlySummary) -> Table:
    table = Table(title="ingest", title_justify="left")
    for col in ("source", "status", "rows read", "new", "revised", "seconds", "rows/s", "note"):
        table.add_column(col, justify="left" if col in ("source", "status", "note") else "right")
    for r in summary.ingest:
        style = "green" if r.status in ("succeeded", "unchanged") else "red"
        table.add_row(
            escape(r.source), f"[{style}]{r.status}[/]", f"{r.rows_read:,}", f"{r.rows_new:,}", f"{r.rows_revised:,}",
            f"{r.seconds:.2f}", _rate(r), escape(r.message or ""),
        )
    return table


def _rate(r: Any) -> str:
    return f"{r.rows_read / r.seconds:,.0f}" if r.seconds > 0 and r.rows_read else "-"


def _sources_lines(summary: NightlySummary) -> list[str]:
    lines = []
    for r in summary.ingest:
        line = (
            f"source {r.source}: {r.status}; {r.rows_read:,} rows read, {r.rows_new:,} new, "
            f"{r.rows_revised:,} revised; {r.seconds:.2f} s, {_rate(r)} rows/s"
        )
        lines.append(f"{line}; {r.message}" if r.message else line)
    return lines


def _fits(table: Table, console: Console) -> bool:
    """Whether `table` prints on `console` with no cell wrapped: a terminal at least as wide as it.

    Anything else (a log file, a pipe, a narrow terminal) gets the plain one-line-per-row form.
    """
    if not console.is_terminal:
        return False
    from rich.measure import Measurement

    natural = Measurement.get(console, console.options.update(max_width=100_000), table).maximum
    return natural <= console.width


def _emit(table: Table, lines: list[str], title: str) -> None:
    """Print `table` where it fits, else `title` and `lines` as they are (never wrapped mid-word)."""
    if _fits(table, out):
        out.print(table)
        return
    out.print(f"{title}:", markup=False, highlight=False, soft_wrap=True)
    for line in lines:
        out.print(f"  {line}", markup=False, highlight=False, soft_wrap=True)


def _stages_line(summary: NightlySummary, wall: float) -> str:
    s = summary.seconds
    work = sum(s.values())
    parts = [f"{k} {v:.2f} s" for k, v in s.items()]
    if not summary.orchestrated:
        return f"nothing to do: checked in {work:.2f} s, no Prefect flow started; total {wall:.2f} s"
    return (
        f"stages: {', '.join(parts)}; Prefect start-up and orchestration {max(wall - work, 0):.2f} s; "
        f"total {wall:.2f} s; revisions {summary.revisions}"
    )


def _run(
    config: Config,
    *,
    universes: list[str] | None,
    full: bool,
    export: bool,
    debug: bool,
    quick_check: bool = True,
) -> tuple[NightlySummary, float]:
    from pipeline._tempserver import reap_orphans  # (no Prefect import)
    from pipeline.quiet import quiet_night
    from pipeline.schedule import schedule_today

    t0 = time.perf_counter()
    today = schedule_today(config)
    if universes:
        for name in universes:
            config.universe(name)  # did-you-mean before anything starts
    reaped = reap_orphans()
    if reaped:
        console.print(f"[yellow]note:[/] stopped {len(reaped)} temporary Prefect server(s) left running by a killed run")
    # nothing new to ingest or fit: say what was checked, without starting Prefect (pipeline.quiet)
    quiet, why = (
        quiet_night(config, universes=universes, full=full, export=export, today=today)
        if quick_check else (None, "--always-flow")
    )  # fmt: skip
    if quiet is not None:
        return quiet, time.perf_counter() - t0
    if debug:
        console.print(f"[dim]starting the flow: {escape(why)}[/]")
    prefect_environment(debug=debug)
    from rich.progress import (
        BarColumn,
        MofNCompleteColumn,
        Progress,
        SpinnerColumn,
        TextColumn,
        TimeElapsedColumn,
    )

    from pipeline import flows
    from pipeline._logs import quiet_tracebacks
    from pipeline._tempserver import start_temporary_server

    quiet_tracebacks(debug)  # Prefect's console logs: one line per failure unless --debug

    with Progress(
        SpinnerColumn(), TextColumn("{task.description}"), BarColumn(), MofNCompleteColumn(), TimeElapsedColumn(),
        console=console, transient=False,
    ) as progress:
        bars: dict[str, Any] = {}
        start = progress.add_task("starting Prefect and the nightly flow", total=None)

        def hook(stage: str, item: str, done: int, total: int) -> None:
            if start in progress.task_ids:
                progress.remove_task(start)
            if stage not in bars:
                bars[stage] = progress.add_task(stage, total=total)
            progress.update(bars[stage], completed=done, description=f"{stage}: {item}")

        flows.set_progress_hook(hook)
        try:
            start_temporary_server()  # from this (main) thread, so it dies with this process
            summary = flows.nightly(config, universes=universes, full=full, export=export, today=today)
        finally:
            flows.set_progress_hook(None)
    return summary, time.perf_counter() - t0


def summary_json(summary: NightlySummary, wall: float, config: Config) -> dict[str, Any]:
    """`shockflow run --json`'s document (its fields are listed in the README, "Monitoring")."""
    n_files = sum(len(v) for v in summary.exported.values())
    publish = "succeeded" if summary.published else ("failed" if summary.publish_failed else "skipped")
    export = "failed" if summary.export_message else ("succeeded" if n_files else "skipped")
    status = {EXIT_OK: "succeeded", EXIT_PARTIAL: "partial", EXIT_NOTHING_RAN: "failed"}[summary.exit_code]
    return {
        "shockflow": version_text().removeprefix("shockflow "),
        "config": str(config.path),
        "status": status,
        "exit_code": summary.exit_code,
        "today": summary.today.isoformat() if summary.today else None,
        "orchestrated": summary.orchestrated,
        "flow_run_ids": list(summary.flow_run_ids),
        "checked": list(summary.checked),
        "seconds": {
            "total": round(wall, 3),
            "stages": {k: round(v, 3) for k, v in summary.seconds.items()},
            "orchestration": round(max(wall - sum(summary.seconds.values()), 0.0), 3) if summary.orchestrated else 0.0,
        },
        "sources": [
            {
                "name": r.source, "status": r.status, "rows_read": r.rows_read, "rows_new": r.rows_new,
                "rows_revised": r.rows_revised, "seconds": round(r.seconds, 3), "message": r.message,
            }
            for r in summary.ingest
        ],
        "universes": [
            {
                "name": r.universe, "status": r.status, "run_id": r.run_id, "fitted": r.fitted,
                "skipped": r.skipped, "failed": r.failed, "reused": r.reused, "changed": r.changed,
                "reason": r.reason, "message": r.message,
                "seconds": {k: round(v, 3) for k, v in r.seconds.items()},
            }
            for r in summary.universes
        ],
        "publish": {
            "status": publish, "snapshot": str(config.warehouse.snapshot), "message": summary.publish_message,
        },
        "export": {
            "status": export, "directory": str(config.export.directory), "files": n_files,
            "universes": sorted(summary.exported), "message": summary.export_message,
        },
        "revisions": summary.revisions,
        "interrupted_marked": summary.interrupted_marked,
        "failures": summary.failures,
        "caution": CAUTION,
    }


def _report(summary: NightlySummary, wall: float, config: Config, *, as_json: bool = False) -> None:
    if as_json:
        out.print(json.dumps(summary_json(summary, wall, config), indent=2), markup=False, highlight=False, soft_wrap=True)
        for failure in summary.failures:
            console.print(f"[bold red]failed:[/] {escape(failure)}", soft_wrap=True)
        return
    if not summary.orchestrated:
        out.print("nothing new to ingest or fit (checked before starting Prefect):", markup=False, soft_wrap=True)
        for line in summary.checked:
            out.print(f"  {line}", markup=False, highlight=False, soft_wrap=True)
    _emit(_sources_table(summary), _sources_lines(summary), "ingest")
    _emit(_summary_table(summary), _summary_lines(summary), "shockflow run")
    out.print(_stages_line(summary, wall), soft_wrap=True)
    if summary.published:
        out.print(f"snapshot published: {config.warehouse.snapshot}", markup=False, soft_wrap=True)
    elif summary.publish_message and not summary.publish_failed:
        out.print(f"snapshot not republished: {summary.publish_message}", markup=False, soft_wrap=True)
    n_files = sum(len(v) for v in summary.exported.values())
    if n_files:
        out.print(f"exports: {n_files} file(s) under {config.export.directory}", markup=False, soft_wrap=True)
    for failure in summary.failures:
        console.print(f"[bold red]failed:[/] {escape(failure)}", soft_wrap=True)
    if summary.abandoned_removed:
        console.print(f"[yellow]note:[/] removed {summary.abandoned_removed} temporary export file(s) left by a killed run")
    if summary.interrupted_marked:
        console.print(f"[yellow]note:[/] {summary.interrupted_marked} run(s) left running by an earlier process were marked failed")


@app.command()
def run(
    config: ConfigOpt = None,
    universe: UniverseOpt = None,
    full: Annotated[
        bool,
        typer.Option(
            "--full",
            help="Refit every window, not only new or changed ones. With a changed config this may "
            "replace a universe's stored results by none (its window no longer fits the data); "
            "the summary then says so.",
        ),
    ] = False,
    no_export: Annotated[bool, typer.Option("--no-export", help="Skip the report exports.")] = False,
    as_json: Annotated[
        bool,
        typer.Option("--json", help="Print the run's summary as one JSON document (fields: README, Monitoring)."),
    ] = False,
    always_flow: Annotated[
        bool,
        typer.Option(
            "--always-flow",
            help="Start the Prefect flow (and record its run) even when a check finds nothing new.",
        ),
    ] = False,
    debug: DebugOpt = False,
) -> None:
    """Ingest every source, refit new/changed windows, publish the snapshot and export reports.

    When a check before starting Prefect finds nothing new to ingest or fit, the run ends there
    and says what it checked (no flow run is recorded; --full always runs the flow).
    """

    def body() -> int:
        cfg = _load(config)
        summary, wall = _run(
            cfg, universes=universe, full=full, export=not no_export, debug=debug, quick_check=not always_flow
        )
        _report(summary, wall, cfg, as_json=as_json)
        return summary.exit_code

    _guard(debug, body)


# ------------------------------------------------------------------------------------------
# check
# ------------------------------------------------------------------------------------------


def _writable_folder(path: Path) -> bool:
    p = path
    while not p.exists():
        p = p.parent
    return p.is_dir() and os.access(p, os.W_OK)


def _stored_observations(cfg: Config) -> list[Any]:
    """The warehouse's observations of the configured series, read-only; none if it cannot be read
    (no warehouse yet, or a run holds it)."""
    import duckdb

    from pipeline.warehouse import query

    path = cfg.warehouse.path
    if not path.is_file():
        return []
    names = sorted({n for u in cfg.universes for n in u.names})
    try:
        con = duckdb.connect(str(path), read_only=True)
    except duckdb.Error:
        return []
    try:
        return [query(con, "SELECT series, date, value FROM observations WHERE list_contains(?, series)", [names])]
    except duckdb.Error:
        return []
    finally:
        con.close()


def _window_problems(cfg: Config, frames: list[Any]) -> list[str]:
    """Universes whose window exceeds the rows their series give (prepared as a run would)."""
    import polars as pl

    from pipeline.errors import ShockflowError as _Err
    from pipeline.jobs import window_problem
    from pipeline.prepare import prepare_universe

    # the observations a run would hold: what the warehouse already has (if it can be read now),
    # then the sources (the last source listed wins a (series, date) two give)
    frames = [*_stored_observations(cfg), *(f.select("series", "date", "value") for f in frames)]
    obs = pl.concat(frames, how="vertical_relaxed").unique(["series", "date"], keep="last", maintain_order=True)
    problems = []
    for universe in cfg.universes:
        rows = obs.filter(pl.col("series").is_in(list(universe.names))).sort(["series", "date"])
        try:
            prepared = prepare_universe(rows, universe)
        except _Err:
            continue  # a missing series or bad values: reported by the coverage check or by `run`
        problem = window_problem(prepared, universe)
        if problem:
            problems.append(problem)
    return problems


@app.command()
def check(config: ConfigOpt = None, debug: DebugOpt = False) -> None:
    """Validate the config, read every source, check each universe's window fits its data; writes nothing."""

    def body() -> int:
        from pipeline.config import check_series_coverage
        from pipeline.sources import read_source

        cfg = _load(config)
        table = Table(title=f"sources of {cfg.path.name}", title_justify="left")
        for col in ("source", "kind", "status", "series", "rows", "first", "last", "note"):
            table.add_column(col)
        lines: list[str] = []
        available: dict[str, set[str]] = {}
        frames = []
        problems: list[str] = []
        for source in cfg.sources:
            try:
                frame = read_source(source)
            except ShockflowError as exc:
                table.add_row(escape(source.name), source.kind, "[red]failed[/]", "", "", "", "", escape(str(exc)))
                lines.append(f"source {source.name} ({source.kind}): failed; {exc}")
                problems.append(str(exc))
                continue
            available[source.name] = set(frame.series)
            frames.append(frame.frame)
            dates = frame.frame["date"]
            first, last = str(dates.min()), str(dates.max())
            table.add_row(
                escape(source.name), source.kind, "[green]ok[/]", str(len(frame.series)), f"{frame.rows:,}",
                first, last, "",
            )
            lines.append(
                f"source {source.name} ({source.kind}): ok; {len(frame.series)} series, {frame.rows:,} rows, "
                f"{first} to {last}"
            )
        _emit(table, lines, f"sources of {cfg.path.name}")
        if available:
            try:
                check_series_coverage(cfg, available)
            except ShockflowError as exc:
                unread = [s.name for s in cfg.sources if s.name not in available]
                note = (
                    f" (source(s) {', '.join(map(repr, unread))} could not be read above and may provide it)"
                    if unread else ""
                )  # fmt: skip
                problems.append(str(exc) + note)
            problems += _window_problems(cfg, frames)
        for label, folder in (
            ("[warehouse] path", cfg.warehouse.path.parent),
            ("[warehouse] snapshot", cfg.warehouse.snapshot.parent),
            ("[export] directory", cfg.export.directory),
        ):
            if not _writable_folder(folder):
                problems.append(f"{cfg.path}: {label} folder {str(folder)!r} cannot be written; choose a writable folder")
        for p in problems:
            console.print(f"[bold red]error:[/] {escape(p)}", soft_wrap=True)
        if not problems:
            out.print(f"config ok: {len(cfg.sources)} source(s), {len(cfg.universes)} universe(s)")
            return 0
        return 2 if available else 1

    _guard(debug, body)


# ------------------------------------------------------------------------------------------
# export, schedule, dashboard, demo
# ------------------------------------------------------------------------------------------


@app.command()
def export(
    config: ConfigOpt = None,
    universe: UniverseOpt = None,
    out_dir: Annotated[
        Path | None, typer.Option("--out", metavar="DIR", help="Export folder (default: the config's [export] directory).")
    ] = None,
    debug: DebugOpt = False,
) -> None:
    """Write reports and extracts from the serving snapshot."""

    def body() -> int:
        from pipeline.export import export_all

        cfg = _load(config)
        names = [cfg.universe(u).name for u in universe] if universe else None
        written = export_all(
            cfg.warehouse.snapshot, out_dir or cfg.export.directory, formats=cfg.export.formats, universes=names
        )
        for name, paths in written.items():
            out.print(f"{name}: {len(paths)} file(s)")
            for p in paths:
                out.print(f"  {p}")
        return 0

    _guard(debug, body)


@app.command()
def schedule(config: ConfigOpt = None, debug: DebugOpt = False) -> None:
    """Serve the nightly flow as a Prefect deployment on the configured cron (Ctrl+C stops it)."""

    def body() -> int:
        prefect_environment(debug=debug)
        cfg = _load(config)
        from pipeline.schedule import serve

        serve(cfg, config_path=cfg.path)
        return 0

    _guard(debug, body)


@app.command()
def dashboard(
    config: ConfigOpt = None,
    host: HostOpt = None,
    port: PortOpt = None,
    workers: Annotated[
        int | None, typer.Option("--workers", metavar="N", help="Worker processes (default: [dashboard] workers, else 2).")
    ] = None,
    debug: DebugOpt = False,
) -> None:
    """Serve the dashboard over the serving snapshot (read-only)."""

    def body() -> int:
        import dashboard as dash_pkg

        cfg = _load(config)
        settings = dash_pkg.DashboardSettings.from_config(cfg, environ=os.environ)
        dash_pkg.serve(settings, host, port, workers=workers)
        return 0

    _guard(debug, body)


_DEMO_OUTPUT = re.compile(r'"\.\./demo_output/')
_DEMO_DATA_PATH = re.compile(r'^(path\s*=\s*)"([^"/]+)"', re.MULTILINE)


def demo_config(out_dir: Path) -> Path:
    """Write the demo's configuration for output folder `out_dir`; returns its path.

    The packaged data_samples/demo.toml (found with importlib.resources, so an installed wheel has
    it) reads its CSV files beside itself and writes to ``../demo_output/``. The copy written to
    ``<out_dir>/demo.toml`` names those data files by absolute path and puts the warehouse, the
    snapshot and the exports in `out_dir`, wherever shockflow is installed.
    """
    folder = data_samples.folder()
    text = DEMO_CONFIG.read_text(encoding="utf-8")
    text = _DEMO_OUTPUT.sub('"./', text)

    def absolute(m: re.Match[str]) -> str:
        data = folder / m.group(2)
        return f"{m.group(1)}{json.dumps(str(data))}" if data.is_file() else m.group(0)

    text = _DEMO_DATA_PATH.sub(absolute, text)
    out_dir.mkdir(parents=True, exist_ok=True)
    target = out_dir / "demo.toml"
    header = (
        f"# Written by `shockflow demo` from {DEMO_CONFIG} (rewritten at every demo run:\n"
        "# edit a copy instead). Output paths are relative to this folder.\n"
    )
    target.write_text(header + text, encoding="utf-8")
    return target


@app.command()
def demo(
    no_serve: Annotated[bool, typer.Option("--no-serve", help="Build the demo warehouse and exports only.")] = False,
    out_dir: Annotated[
        Path,
        typer.Option(
            "--out", metavar="DIR",
            help="Folder for the demo's warehouse, snapshot and exports (default: demo_output in the current folder).",
        ),
    ] = Path("demo_output"),
    host: HostOpt = None,
    port: PortOpt = None,
    debug: DebugOpt = False,
) -> None:
    """Run the nightly job on the invented demo scenario (data_samples/demo.toml), then serve it."""

    def body() -> int:
        cfg = _load(demo_config(out_dir.expanduser().resolve()))
        out.print(
            "shockflow demo — the Republic of Veloria, an invented market (data_samples/README.md).\n"
            "Caution: a research tool, not financial advice; estimated relations between markets change.",
            soft_wrap=True,
        )
        summary, wall = _run(cfg, universes=None, full=False, export=True, debug=debug)
        _report(summary, wall, cfg)
        out.print(f"warehouse: {cfg.warehouse.path}", markup=False, soft_wrap=True)
        if summary.exit_code == EXIT_NOTHING_RAN or no_serve:
            return summary.exit_code
        import dashboard as dash_pkg

        dash_pkg.serve(dash_pkg.DashboardSettings.from_config(cfg, environ=os.environ), host, port)
        return summary.exit_code

    _guard(debug, body)


def main() -> None:
    """Console-script entry (`shockflow`): SIGTERM stops a run cleanly (exit 143)."""
    signal.signal(signal.SIGTERM, _on_sigterm)
    _watch_signals()
    app(prog_name="shockflow")


if __name__ == "__main__":  # pragma: no cover
    main()
    sys.exit(0)
