"""Prefect's temporary server for a lone run: it dies with the run, and the next run reaps any left.

With no ``PREFECT_API_URL``, Prefect starts a temporary API server (uvicorn, about 190 MB) as a
child process of the run and stops it at interpreter exit (``atexit``). A run killed with
``kill -9`` never gets there, nor does one ended by SIGTERM without a handler: the server went on
listening for minutes. Three guards, all used by the ``shockflow`` command:

1. :func:`start_temporary_server` starts the server from the calling (main) thread before the flow
   does, and its process asks the kernel to send it SIGTERM when its parent dies
   (``prctl(PR_SET_PDEATHSIG)``, Linux) — a ``kill -9`` of the run included. Prefect's own clients
   then find it running and use it.
2. It records the server in a state file (``<tmp>/shockflow-<uid>/prefect-servers/<pid>.json``:
   server and parent pids with their start times, port). :func:`reap_orphans`, called by every run
   before it starts Prefect, stops a recorded server whose parent is gone (where the kernel signal
   is unavailable or was ignored) and removes stale state files.
3. The CLI turns SIGTERM into a clean exit, so Prefect's ``atexit`` stop runs (shockflow.cli).

Nothing here runs when ``PREFECT_API_URL`` names a real server.
"""

from __future__ import annotations

import atexit
import ctypes
import json
import logging
import os
import signal
import subprocess
import sys
import tempfile
import threading
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

__all__ = ["reap_orphans", "start_temporary_server", "state_folder"]

log = logging.getLogger("shockflow.tempserver")

#: linux/prctl.h
PR_SET_PDEATHSIG = 1
#: What identifies Prefect's temporary server on its command line.
SERVER_MARK = "prefect.server.api.server:create_app"


def state_folder() -> Path:
    """Where running temporary servers are recorded (per user, in the temp folder)."""
    uid = os.getuid() if hasattr(os, "getuid") else 0
    return Path(tempfile.gettempdir()) / f"shockflow-{uid}" / "prefect-servers"


def _start_time(pid: int) -> int | None:
    """The process's start time in clock ticks since boot (/proc), or None when it is gone (a
    zombie, dead but not yet collected by its parent, counts as gone)."""
    try:
        text = Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return None
    fields = text[text.rindex(")") + 2 :].split()
    if fields[0] in ("Z", "X"):  # field 3 of stat(5): the state
        return None
    return int(fields[19])  # field 22: starttime


def _cmdline(pid: int) -> str:
    try:
        return Path(f"/proc/{pid}/cmdline").read_bytes().replace(b"\0", b" ").decode(errors="replace")
    except OSError:
        return ""


def _alive(pid: int, started: int | None) -> bool:
    return started is not None and _start_time(pid) == started


def _stop(pid: int, started: int, timeout: float = 10.0) -> bool:
    """SIGTERM, then SIGKILL after `timeout` s; True when the process is gone."""
    for sig, wait in ((signal.SIGTERM, timeout), (signal.SIGKILL, 5.0)):
        try:
            os.kill(pid, sig)
        except ProcessLookupError:
            return True
        deadline = time.monotonic() + wait
        while time.monotonic() < deadline:
            if not _alive(pid, started):
                return True
            time.sleep(0.1)
    return not _alive(pid, started)


def reap_orphans(folder: Path | None = None) -> list[int]:
    """Stop every recorded temporary server whose parent run is gone; returns their pids.

    A state file whose server is gone is removed; one whose parent still runs is left alone.
    """
    folder = folder or state_folder()
    stopped: list[int] = []
    if not folder.is_dir():
        return stopped
    for file in sorted(folder.glob("*.json")):
        try:
            state = json.loads(file.read_text())
            pid, started = int(state["server_pid"]), int(state["server_started"])
            parent, parent_started = int(state["parent_pid"]), int(state["parent_started"])
        except (OSError, ValueError, KeyError, TypeError):
            file.unlink(missing_ok=True)  # unreadable: written by a run killed mid-write
            continue
        if not _alive(pid, started) or SERVER_MARK not in _cmdline(pid):
            file.unlink(missing_ok=True)
            continue
        if _alive(parent, parent_started):
            continue  # its run is still going
        log.warning("stopping Prefect's temporary server (pid %d, port %s) left by a killed run", pid, state.get("port"))
        if _stop(pid, started):
            stopped.append(pid)
            file.unlink(missing_ok=True)
    return stopped


def _dies_with_parent(parent: int) -> Callable[[], None]:
    """A `preexec_fn`: SIGTERM this child when `parent` dies (Linux; elsewhere nothing)."""
    libc = ctypes.CDLL(None, use_errno=True) if sys.platform.startswith("linux") else None

    def preexec() -> None:  # runs in the child between fork and exec: no allocation-heavy work
        if libc is not None:
            libc.prctl(PR_SET_PDEATHSIG, signal.SIGTERM, 0, 0, 0)
        if os.getppid() != parent:  # the parent died before prctl took effect
            os.kill(os.getpid(), signal.SIGTERM)

    return preexec


class _SubprocessDyingWithParent:
    """Stands in for the `subprocess` module inside prefect.server.api.server only, while it starts
    its server: every Popen there gets :func:`_dies_with_parent`; everything else is subprocess's."""

    def __init__(self, parent: int) -> None:
        self._parent = parent

    def __getattr__(self, name: str) -> Any:
        return getattr(subprocess, name)

    def Popen(self, *args: Any, **kwargs: Any) -> subprocess.Popen[Any]:  # named as subprocess names it
        if kwargs.get("preexec_fn") is None:
            kwargs["preexec_fn"] = _dies_with_parent(self._parent)
        return subprocess.Popen(*args, **kwargs)


def _record(server: Any, folder: Path) -> Path | None:
    proc = server.server_process
    started, parent_started = _start_time(proc.pid), _start_time(os.getpid())
    if started is None or parent_started is None:
        return None
    folder.mkdir(parents=True, exist_ok=True)
    file = folder / f"{proc.pid}.json"
    tmp = file.with_suffix(".tmp")
    tmp.write_text(json.dumps({
        "server_pid": proc.pid, "server_started": started, "parent_pid": os.getpid(),
        "parent_started": parent_started, "port": server.port,
    }))
    os.replace(tmp, file)
    return file


def start_temporary_server(folder: Path | None = None) -> Any:
    """Start Prefect's temporary server now, dying with this process; None when not needed.

    Not needed: ``PREFECT_API_URL`` is set, or Prefect's ephemeral mode is off. Call from the main
    thread (the kernel's parent-death signal follows the thread that started the child).
    Call after Prefect's settings are in the environment (shockflow.cli.prefect_environment).
    """
    from prefect.settings import get_current_settings

    settings = get_current_settings()
    if settings.api.url or not settings.server.ephemeral.enabled:
        return None
    if threading.current_thread() is not threading.main_thread():
        msg = "start the temporary Prefect server from the main thread"
        raise RuntimeError(msg)
    import prefect.server.api.server as server_module

    server = server_module.SubprocessASGIServer()
    if server.running:
        return server
    real = server_module.subprocess
    server_module.subprocess = _SubprocessDyingWithParent(os.getpid())  # type: ignore[assignment]  # a stand-in for the subprocess module: this module only, while it starts
    try:
        server.start()
    finally:
        server_module.subprocess = real
    file = _record(server, folder or state_folder())

    def forget() -> None:  # at exit: stop it ourselves (Prefect's atexit does too), drop the record
        try:
            server.stop()
        finally:
            if file is not None:
                file.unlink(missing_ok=True)

    atexit.register(forget)
    return server
