"""The `shockflow` command (typer): run, check, export, schedule, demo, dashboard.

Exit codes: 0 everything ran; 2 partial (something failed, the rest ran); 1 nothing ran or a
usage/config error. Errors print as one line; ``--debug`` adds the traceback.

This is the entry point, the one place that reads the environment: it sets Prefect's settings for
the project's own processes (analytics off, a longer start-up limit for Prefect's temporary
server, quiet logs) before Prefect is imported.
"""

from __future__ import annotations

import os
import sys
import time
from collections.abc import Callable
from pathlib import Path
from typing import TYPE_CHECKING, Annotated, Any

import typer
from rich.console import Console
from rich.markup import escape
from rich.table import Table

from dashboard import DashboardError  # the package import is light (no Dash, DuckDB)
from pipeline.errors import ShockflowError

if TYPE_CHECKING:
    from pipeline.config import Config
    from pipeline.flows import NightlySummary

__all__ = ["app", "main", "prefect_environment"]

console = Console(stderr=True, highlight=False)
out = Console(highlight=False)

app = typer.Typer(
    name="shockflow",
    help="Nightly rolling VARs, impulse responses, Granger tests, variance decompositions and "
    "connectedness over market universes. A research tool, not financial advice.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
)

DEMO_CONFIG = Path(__file__).resolve().parents[1] / "data_samples" / "demo.toml"

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


ConfigOpt = Annotated[Path, typer.Option("--config", "-c", help="The TOML configuration file.")]
DebugOpt = Annotated[bool, typer.Option("--debug", help="Show full tracebacks on errors.")]


def _fail(exc: BaseException, debug: bool) -> typer.Exit:
    if debug:
        console.print_exception()
    text = str(exc) if isinstance(exc, (ShockflowError, DashboardError)) else f"{type(exc).__name__}: {exc}"
    console.print(f"[bold red]error:[/] {escape(text)}", soft_wrap=True)
    return typer.Exit(1)


def _guard(debug: bool, fn: Callable[[], int]) -> None:
    try:
        code = fn()
    except typer.Exit:
        raise
    except KeyboardInterrupt:
        console.print("[yellow]interrupted[/]")
        raise typer.Exit(130) from None
    except Exception as exc:
        raise _fail(exc, debug) from None
    raise typer.Exit(code)


def _load(config: Path) -> Config:
    from pipeline.config import load_config

    return load_config(config)


# ------------------------------------------------------------------------------------------
# run
# ------------------------------------------------------------------------------------------


def _summary_table(summary: NightlySummary, wall: float) -> Table:
    table = Table(title="shockflow run", title_justify="left")
    for col in ("universe", "status", "fitted", "skipped", "failed", "reused", "prepare s", "fit s", "store s", "note"):
        table.add_column(col, justify="right" if col not in ("universe", "status", "note") else "left")
    for r in summary.universes:
        style = "green" if r.status == "succeeded" else "red"
        s = r.seconds
        table.add_row(
            r.universe, f"[{style}]{r.status}[/]", str(r.fitted), str(r.skipped), str(r.failed), str(r.reused),
            f"{s.get('prepare', 0):.2f}", f"{s.get('fit', 0):.2f}", f"{s.get('store', 0):.2f}",
            escape(r.message or r.reason),
        )
    return table


def _sources_table(summary: NightlySummary) -> Table:
    table = Table(title="ingest", title_justify="left")
    for col in ("source", "status", "rows read", "new", "revised", "seconds", "rows/s", "note"):
        table.add_column(col, justify="left" if col in ("source", "status", "note") else "right")
    for r in summary.ingest:
        style = "green" if r.status == "succeeded" else "red"
        rate = f"{r.rows_read / r.seconds:,.0f}" if r.seconds > 0 and r.rows_read else "-"
        table.add_row(
            r.source, f"[{style}]{r.status}[/]", f"{r.rows_read:,}", f"{r.rows_new:,}", f"{r.rows_revised:,}",
            f"{r.seconds:.2f}", rate, escape(r.message or ""),
        )
    return table


def _stages_line(summary: NightlySummary, wall: float) -> str:
    s = summary.seconds
    work = sum(s.values())
    parts = [f"{k} {v:.2f} s" for k, v in s.items()]
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
) -> tuple[NightlySummary, float]:
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

    quiet_tracebacks(debug)  # Prefect's console logs: one line per failure unless --debug

    if universes:
        for name in universes:
            config.universe(name)  # did-you-mean before anything starts
    t0 = time.perf_counter()
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
            summary = flows.nightly(config, universes=universes, full=full, export=export)
        finally:
            flows.set_progress_hook(None)
    return summary, time.perf_counter() - t0


def _report(summary: NightlySummary, wall: float, config: Config) -> None:
    out.print(_sources_table(summary))
    out.print(_summary_table(summary, wall))
    out.print(_stages_line(summary, wall))
    if summary.published:
        out.print(f"snapshot published: {config.warehouse.snapshot}")
    elif summary.publish_message and not summary.publish_failed:
        out.print(f"snapshot not republished: {summary.publish_message}")
    n_files = sum(len(v) for v in summary.exported.values())
    if n_files:
        out.print(f"exports: {n_files} file(s) under {config.export.directory}")
    for failure in summary.failures:
        console.print(f"[bold red]failed:[/] {escape(failure)}", soft_wrap=True)
    if summary.interrupted_marked:
        console.print(f"[yellow]note:[/] {summary.interrupted_marked} run(s) left running by an earlier process were marked failed")


@app.command()
def run(
    config: ConfigOpt,
    universe: Annotated[list[str] | None, typer.Option("--universe", "-u", help="Only this universe (repeatable).")] = None,
    full: Annotated[bool, typer.Option("--full", help="Refit every window, not only new or changed ones.")] = False,
    no_export: Annotated[bool, typer.Option("--no-export", help="Skip the report exports.")] = False,
    debug: DebugOpt = False,
) -> None:
    """Ingest every source, refit new/changed windows, publish the snapshot and export reports."""

    def body() -> int:
        cfg = _load(config)
        summary, wall = _run(cfg, universes=universe, full=full, export=not no_export, debug=debug)
        _report(summary, wall, cfg)
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


@app.command()
def check(config: ConfigOpt, debug: DebugOpt = False) -> None:
    """Validate the config and read every source; writes nothing."""

    def body() -> int:
        from pipeline.config import check_series_coverage
        from pipeline.sources import read_source

        cfg = _load(config)
        table = Table(title=f"sources of {cfg.path.name}", title_justify="left")
        for col in ("source", "kind", "status", "series", "rows", "first", "last", "note"):
            table.add_column(col)
        available: dict[str, set[str]] = {}
        problems: list[str] = []
        for source in cfg.sources:
            try:
                frame = read_source(source)
            except ShockflowError as exc:
                table.add_row(source.name, source.kind, "[red]failed[/]", "", "", "", "", escape(str(exc)))
                problems.append(str(exc))
                continue
            available[source.name] = set(frame.series)
            dates = frame.frame["date"]
            table.add_row(
                source.name, source.kind, "[green]ok[/]", str(len(frame.series)), f"{frame.rows:,}",
                str(dates.min()), str(dates.max()), "",
            )
        out.print(table)
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
    config: ConfigOpt,
    universe: Annotated[list[str] | None, typer.Option("--universe", "-u", help="Only this universe (repeatable).")] = None,
    out_dir: Annotated[Path | None, typer.Option("--out", help="Export folder (default: [export] directory).")] = None,
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
def schedule(config: ConfigOpt, debug: DebugOpt = False) -> None:
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
    config: ConfigOpt,
    host: Annotated[str | None, typer.Option("--host", help="Address to bind (default 127.0.0.1).")] = None,
    port: Annotated[int | None, typer.Option("--port", help="Port (default 8050).")] = None,
    workers: Annotated[int | None, typer.Option("--workers", help="Worker processes (default 2).")] = None,
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


@app.command()
def demo(
    no_serve: Annotated[bool, typer.Option("--no-serve", help="Build the demo warehouse and exports only.")] = False,
    host: Annotated[str | None, typer.Option("--host")] = None,
    port: Annotated[int | None, typer.Option("--port")] = None,
    debug: DebugOpt = False,
) -> None:
    """Run the nightly job on the invented demo scenario (data_samples/demo.toml), then serve it."""

    def body() -> int:
        cfg = _load(DEMO_CONFIG)
        out.print(
            "shockflow demo — the Republic of Veloria, an invented market (data_samples/README.md).\n"
            "Caution: a research tool, not financial advice; estimated relations between markets change."
        )
        summary, wall = _run(cfg, universes=None, full=False, export=True, debug=debug)
        _report(summary, wall, cfg)
        out.print(f"warehouse: {cfg.warehouse.path}")
        if summary.exit_code == 1 or no_serve:
            return summary.exit_code
        import dashboard as dash_pkg

        dash_pkg.serve(dash_pkg.DashboardSettings.from_config(cfg, environ=os.environ), host, port)
        return summary.exit_code

    _guard(debug, body)


def main() -> None:
    """Console-script entry (`shockflow`)."""
    app(prog_name="shockflow")


if __name__ == "__main__":  # pragma: no cover
    main()
    sys.exit(0)
