"""Where the fits run: threads in the flow's own process, or a dask.distributed cluster.

``[execution] runner`` picks the Prefect task runner of the nightly work (:func:`task_runner`):

- ``"local"`` (default): Prefect's thread pool in the flow process.
- ``"dask"`` with ``address = "local"``: prefect-dask's ``DaskTaskRunner`` on an in-process
  ``distributed.LocalCluster`` that this module configures (:func:`local_cluster_kwargs`): every
  socket on 127.0.0.1 — the scheduler, the workers and the scheduler's diagnostics page, which
  by default would listen on all interfaces — and its scratch space in a folder beside the
  warehouse (:func:`scratch_folder`; Dask removes each worker's folder in it when it stops).
- ``"dask"`` with ``address = "tcp://host:port"``: an existing Dask scheduler (the team's own
  cluster). :func:`check_scheduler` first checks that something listens there, so a wrong address
  fails at once with the fix instead of after Dask's connect timeout; :func:`check_prefect_api`
  refuses a cluster on other machines while Prefect runs on its temporary local server, which
  those workers could not reach.

What runs where (the flow decides what it submits; see pipeline.flows): workers only compute —
the fit of a block of window ends of a universe (``jobs.fit_block_step``: prepared rows in,
result tables out; no file, no database). Everything that touches a file stays in the flow's
process on one node: reading sources, the single DuckDB writer (ingest, plan, store), publish
and export. Results come back to the flow process, which writes them in one transaction per
universe, so the warehouse has exactly one writer however many workers compute.

Worker threads or processes (``LOCAL_PROCESSES``), measured on the reduced demo (3 universes,
388 windows in 11 blocks; 2 cores shared with other jobs): the fit stage took 15 s on 2 worker
threads and 47 s on 2 worker processes. The rolling engine itself is fast (about 2,800 windows of
9 series per second on one core); what a task costs is Prefect's own work around it — a worker
process imports Prefect and opens its API client on its first task (12–15 s there against 7 s
in a thread), and every task's inputs and results are pickled across the process boundary. So
the in-process cluster uses threads of the flow's process. A real cluster (``address =
"tcp://…"``) runs worker processes on other machines; there large blocks (``block_windows``,
default 1000) keep the per-task cost small beside the compute.
"""

from __future__ import annotations

import socket
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import TYPE_CHECKING, Any
from urllib.parse import urlsplit

from pipeline.config import is_loopback
from pipeline.errors import ShockflowError

if TYPE_CHECKING:
    from pipeline.config import Config

__all__ = [
    "LOCAL_PROCESSES",
    "LOCAL_THREADS_PER_WORKER",
    "LOCAL_WORKERS",
    "LOOPBACK",
    "ExecutionError",
    "check_prefect_api",
    "check_scheduler",
    "io_task_runner",
    "local_cluster_kwargs",
    "reporting_api",
    "reporting_api_url",
    "scratch_folder",
    "task_runner",
]

#: Every socket of the in-process cluster binds here.
LOOPBACK = "127.0.0.1"
#: Workers of the in-process cluster, one thread each (one fit block at a time per worker).
LOCAL_WORKERS = 2
LOCAL_THREADS_PER_WORKER = 1
#: Worker threads of the flow's process, not processes (measured, see the module doc).
LOCAL_PROCESSES = False
#: Threads of the local (non-Dask) runner.
LOCAL_THREADS = 4
#: Seconds to wait for a TCP connection to an existing scheduler before giving up.
CONNECT_TIMEOUT = 5.0


class ExecutionError(ShockflowError):
    """The configured execution backend cannot be used (e.g. no scheduler at the address)."""


def scratch_folder(config: Config) -> Path:
    """The in-process cluster's `local_directory`: ``.dask-scratch`` beside the warehouse file."""
    return config.warehouse.path.parent / ".dask-scratch"


def local_cluster_kwargs(
    scratch: str | Path,
    *,
    n_workers: int = LOCAL_WORKERS,
    threads_per_worker: int = LOCAL_THREADS_PER_WORKER,
    processes: bool = LOCAL_PROCESSES,
) -> dict[str, Any]:
    """Keyword arguments of ``distributed.LocalCluster`` bound to loopback, scratch in `scratch`.

    ``host`` binds the scheduler and the workers; ``dashboard_address`` binds the scheduler's
    diagnostics page (port 0: any free port, so two runs never collide).
    """
    return {
        "n_workers": n_workers,
        "threads_per_worker": threads_per_worker,
        "processes": processes,
        # worker threads would default to Dask's in-process transport, which takes no host
        "protocol": "tcp://",
        "host": LOOPBACK,
        "dashboard_address": f"{LOOPBACK}:0",
        "local_directory": str(Path(scratch)),
    }


def check_scheduler(address: str, *, timeout: float = CONNECT_TIMEOUT) -> None:
    """Raise ExecutionError unless a TCP connection to the scheduler at `address` opens.

    `address` is ``tcp://host:port`` or ``tls://host:port`` (the config validates the scheme).
    Only the connection is tried; Dask's own handshake follows when the flow starts.
    """
    parts = urlsplit(address)
    host, port = parts.hostname, parts.port
    if not host or port is None:
        msg = (
            f"[execution] address {address!r} has no host and port; "
            "write it as 'tcp://host:8786' (the scheduler's address) or use 'local'"
        )
        raise ExecutionError(msg)
    try:
        with socket.create_connection((host, port), timeout=timeout):
            pass
    except OSError as exc:
        reason = exc.strerror or type(exc).__name__
        msg = (
            f"[execution] address {address!r}: no Dask scheduler answers there ({reason}); "
            "start one (`dask scheduler`, with workers that have shockflow installed) or set "
            "address = 'local' for a cluster on this machine"
        )
        raise ExecutionError(msg) from None


def check_prefect_api(address: str, api_url: str | None) -> None:
    """Raise ExecutionError when workers at `address` could not report to Prefect.

    Each Dask worker runs Prefect's task engine, which records its task run through the Prefect
    API the flow uses. With no ``PREFECT_API_URL`` (`api_url` None) that is Prefect's temporary
    server on 127.0.0.1 of the flow's machine, which workers on other machines cannot reach (each
    would start a temporary server of its own, and the runs would be recorded there). A scheduler
    on this machine is accepted without one.
    """
    host = urlsplit(address).hostname or ""
    if api_url or is_loopback(host):
        return
    msg = (
        f"[execution] address {address!r} is a cluster on other machines, but PREFECT_API_URL is "
        "not set: its workers could not reach Prefect's temporary server on this machine; run a "
        "Prefect server both can reach and set PREFECT_API_URL (e.g. http://prefect.internal:4200/api) "
        "for the flow and on every worker"
    )
    raise ExecutionError(msg)


def task_runner(config: Config) -> Any:
    """The Prefect task runner for `config`'s ``[execution]`` section (see the module doc)."""
    execution = config.execution
    if execution.runner != "dask":
        from prefect.task_runners import ThreadPoolTaskRunner

        return ThreadPoolTaskRunner(max_workers=LOCAL_THREADS)
    from prefect_dask import DaskTaskRunner

    if execution.address == "local":
        return DaskTaskRunner(
            cluster_class="distributed.LocalCluster",
            cluster_kwargs=local_cluster_kwargs(scratch_folder(config)),
        )
    assert execution.address is not None  # the config requires it for runner = "dask"
    from prefect.settings import get_current_settings

    check_prefect_api(execution.address, get_current_settings().api.url)
    check_scheduler(execution.address)
    return DaskTaskRunner(address=execution.address)


def io_task_runner() -> Any:
    """A thread-pool task runner for the flow's own I/O tasks (source reads), whatever `runner` says.

    Source files and URLs are the flow node's; a remote worker may not see them, so reads never go
    to Dask. Use as a context manager: ``with io_task_runner() as io: io.submit(task, params)``.
    """
    from prefect.task_runners import ThreadPoolTaskRunner

    return ThreadPoolTaskRunner(max_workers=LOCAL_THREADS)


def reporting_api_url() -> str | None:
    """The Prefect API this process reports to, as a URL other processes can use.

    ``PREFECT_API_URL`` when set; else the URL of Prefect's temporary server of this process
    (started now if the flow's client has not started it yet); None when Prefect's ephemeral
    mode is off and no URL is set.
    """
    from prefect.settings import get_current_settings

    settings = get_current_settings()
    if settings.api.url:
        return str(settings.api.url)
    if not settings.server.ephemeral.enabled:
        return None
    from prefect.server.api.server import SubprocessASGIServer

    server = SubprocessASGIServer()
    if not server.running:
        server.start()
    return str(server.api_url)


@contextmanager
def reporting_api(config: Config) -> Iterator[str | None]:
    """Within: Prefect's settings name the API this process reports to, so Dask workers do too.

    A Dask worker runs Prefect's task engine with the settings the flow serialises with each task
    (``prefect.context.serialize_context``). Without ``PREFECT_API_URL`` those settings name no
    server, and a worker process would start a temporary server of its own (measured: each
    worker logged "Starting temporary server") and record the fit task runs there, out of sight.
    With ``[execution] runner = "dask"`` this sets ``PREFECT_API_URL`` to the flow's own API
    (:func:`reporting_api_url`) for the duration; with threads nothing changes. Yields the URL.
    """
    if config.execution.runner != "dask":
        yield None
        return
    from prefect.settings import PREFECT_API_URL, temporary_settings

    url = reporting_api_url()
    if url is None:
        yield None
        return
    with temporary_settings(updates={PREFECT_API_URL: url}):
        yield url
