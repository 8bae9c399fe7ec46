"""`create_app` (the Dash app factory) and `serve` (what ``shockflow dashboard`` runs)."""

from __future__ import annotations

import logging
import os
import signal
import socket
import sys
from collections.abc import Callable
from pathlib import Path
from typing import Any

from . import auth
from ._errors import DashboardError, InsecureBindError
from .settings import DashboardSettings

__all__ = ["Running", "check_bind", "create_app", "serve"]

#: Seconds a worker may spend on one request before it is replaced (on-demand bootstrap bands of a
#: large universe are the slowest answers).
WORKER_TIMEOUT = 300
#: Threads per worker process (requests one process answers at once; they share its Python lock).
WORKER_THREADS = 4

log = logging.getLogger(__name__)
ASSETS = Path(__file__).with_name("assets")


def _settings(settings_or_config: Any) -> DashboardSettings:
    if isinstance(settings_or_config, DashboardSettings):
        return settings_or_config
    return DashboardSettings.from_config(settings_or_config)


def create_app(settings_or_config: Any) -> Any:
    """A `dash.Dash` app over the serving snapshot named by `settings_or_config`.

    Accepts `DashboardSettings` or the pipeline's `Config`. The snapshot is opened lazily, read-only,
    on the first request, and reopened whenever the pipeline publishes a new one. If credentials are
    set, every route (pages, callbacks, assets, downloads) requires them.

    The snapshot accessor is kept as ``app.server.extensions["shockflow_snapshot"]``.
    """
    import dash
    from flask import abort, send_file

    import arlib  # noqa: F401  (scipy loads here, once, not inside the first visitor's callbacks)

    from .callbacks import register
    from .data import Snapshot
    from .layout import build
    from .reports import resolve_report

    settings = _settings(settings_or_config)
    snap = Snapshot(settings.snapshot)
    app = dash.Dash(
        __name__,
        title="shockflow — shock propagation explorer",
        update_title=None,
        assets_folder=str(ASSETS),
        serve_locally=True,
        suppress_callback_exceptions=True,
    )
    auth.install(app.server, token=settings.token, username=settings.username, password=settings.password)

    # one snapshot file per request: a publish mid-request never mixes two runs in one answer
    @app.server.before_request
    def _pin_snapshot() -> None:
        snap.reader.begin_pin()

    @app.server.teardown_request
    def _unpin_snapshot(exc: BaseException | None) -> None:
        snap.reader.end_pin()

    app.layout = lambda: build(snap, settings)
    register(app, snap, settings)

    @app.server.route("/reports/<path:name>")
    def _report(name: str) -> Any:
        path = resolve_report(settings.export_dir, name)
        if path is None:
            abort(404)
        return send_file(path, as_attachment=True, download_name=path.name, max_age=0)

    app.server.extensions["shockflow_snapshot"] = snap
    app.server.extensions["shockflow_settings"] = settings
    return app


def check_bind(settings: DashboardSettings) -> None:
    """Refuse a non-loopback address without an access token or basic-auth credentials."""
    if auth.is_loopback(settings.host) or settings.has_credentials:
        return
    msg = (
        f"refusing to serve the dashboard on {settings.host!r} without access control: set an access "
        "token (SHOCKFLOW_DASHBOARD_TOKEN, or [dashboard] token/token_env) or basic-auth credentials "
        "(username + password), or listen on 127.0.0.1"
    )
    raise InsecureBindError(msg)


class Running:
    """What `serve` hands its `ready` callback: where it listens, and a way to stop it.

    ``server_address`` is (host, port) as bound; ``server_port`` the port (the real one when 0 was
    asked for); ``shutdown()`` stops the workers and returns `serve` (callable from any thread).
    """

    def __init__(self, address: tuple[str, int], workers: int) -> None:
        self.server_address = address
        self.server_port = address[1]
        self.workers = workers
        self._pid = os.getpid()

    def shutdown(self) -> None:
        os.kill(self._pid, signal.SIGTERM)


def _bind_text(host: str, port: int) -> str:
    host = host.strip().strip("[]")
    return f"[{host}]:{port}" if ":" in host else f"{host}:{port}"


def _check_port(host: str, port: int) -> None:
    """Fail with one line, before any process starts, if `host`:`port` cannot be listened on."""
    name = host.strip().strip("[]")
    try:
        infos = socket.getaddrinfo(name, port, type=socket.SOCK_STREAM, flags=socket.AI_PASSIVE)
    except socket.gaierror as exc:
        msg = f"cannot listen on {host!r}: {exc.strerror}; give an address of this machine (e.g. 127.0.0.1)"
        raise DashboardError(msg) from None
    family, kind, proto, _, address = infos[0]
    probe = socket.socket(family, kind, proto)
    try:
        probe.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        probe.bind(address)
    except OSError as exc:
        msg = (
            f"cannot listen on {_bind_text(host, port)}: {exc.strerror}; stop whatever uses it or "
            "pick another port (--port)"
        )
        raise DashboardError(msg) from None
    finally:
        probe.close()


def _ignore_interrupt(worker: Any) -> None:
    """Workers leave Ctrl+C to the master, which stops them with one SIGQUIT each (a terminal
    sends SIGINT to the whole group; a worker acting on it too would get two quit signals)."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)


def _worker_class() -> Any:
    """gunicorn's gthread worker, made safe against a second quit signal inside the first.

    Ctrl+C in a terminal sends SIGINT to every process of the group, and the master then sends its
    workers SIGQUIT: when the second arrives while the first handler is shutting the worker's
    thread pool down, the nested handler waits for the pool's lock the outer one holds, and the
    worker hangs until the master kills it (seen after a Prefect run in the same process). The
    first handler alone finishes the job, so a nested call returns at once.
    """
    from gunicorn.workers.gthread import ThreadWorker

    class QuitOnceWorker(ThreadWorker):  # type: ignore[misc]
        _quitting = False

        def handle_quit(self, sig: Any, frame: Any) -> None:
            if self._quitting:
                return
            self._quitting = True
            super().handle_quit(sig, frame)

    return QuitOnceWorker


def serve(
    config_or_settings: Any,
    host: str | None = None,
    port: int | None = None,
    *,
    workers: int | None = None,
    ready: Callable[[Running], None] | None = None,
) -> None:
    """Serve the dashboard until interrupted (the CLI's ``shockflow dashboard`` and ``demo``).

    `host`/`port`/`workers` override the settings. Non-loopback addresses need credentials;
    otherwise `InsecureBindError` (one line, naming the fix) is raised before anything listens.

    Requests are answered by `workers` processes (gunicorn's pre-fork server), so Python's
    one-thread-at-a-time lock no longer caps the whole server at one core. Each process runs
    `WORKER_THREADS` threads (gunicorn's gthread workers): a slow client or a long on-demand
    computation holds one thread, not the process, and browsers keep their connections alive.
    (Sync workers gave a slightly tighter p95 on the loopback load benchmark, but block a whole
    process while a remote client downloads an answer.) The app is built once, before the fork,
    with nothing open: each worker opens the snapshot on its first request, pins every request to
    one snapshot file and reopens the file when the pipeline replaces it, on its own. Ctrl+C (or
    SIGTERM) stops
    the workers and returns. `ready`, if given, is called in this process with a `Running` once
    the address is bound (tests and benchmarks learn the port from it and may stop the server).
    Must run in the main thread (signals); tests that serve inside a thread use werkzeug's
    ``make_server(host, 0, create_app(...).server, threaded=True)`` instead.
    """
    settings = _settings(config_or_settings).with_address(host, port, workers=workers)
    check_bind(settings)
    try:
        from gunicorn.app.base import BaseApplication
    except ImportError as exc:  # gunicorn is a dependency, but needs a Unix-like system (fcntl)
        msg = f"serving the dashboard needs gunicorn on a Unix-like system ({exc}); reinstall shockflow"
        raise DashboardError(msg) from None
    _check_port(settings.host, settings.port)
    app = create_app(settings)

    def when_ready(arbiter: Any) -> None:
        bound = arbiter.LISTENERS[0].sock.getsockname()
        shown = f"[{settings.host}]" if ":" in settings.host else settings.host
        print(
            f"shockflow dashboard: http://{shown}:{bound[1]}/  ({settings.workers} worker "
            f"process{'es' if settings.workers != 1 else ''}; reading {settings.snapshot}; Ctrl+C "
            "stops it)\nCaution: a research tool, not financial advice. Estimated relations "
            "between markets change over time.",
            file=sys.stderr,
            flush=True,
        )
        if ready is not None:
            ready(Running((settings.host, int(bound[1])), settings.workers))

    options = {
        "bind": [_bind_text(settings.host, settings.port)],
        "workers": settings.workers,
        "worker_class": _worker_class() if WORKER_THREADS > 1 else "sync",
        "threads": WORKER_THREADS,
        "preload_app": True,  # imports once; no snapshot is open before the fork (opened lazily)
        "timeout": WORKER_TIMEOUT,
        "graceful_timeout": 10,
        "keepalive": 2,
        "loglevel": "warning",  # one line per request would drown the start-up message
        "accesslog": None,
        "errorlog": "-",
        "control_socket_disable": True,  # no control socket file in the user's home
        "proc_name": "shockflow-dashboard",
        "when_ready": when_ready,
        "post_worker_init": _ignore_interrupt,
    }

    class _Server(BaseApplication):  # type: ignore[misc]
        def load_config(self) -> None:
            for key, value in options.items():
                if key in self.cfg.settings:  # older gunicorn releases lack some (control socket)
                    self.cfg.set(key, value)

        def load(self) -> Any:
            return app.server

    master = os.getpid()
    try:
        _Server().run()
    except SystemExit as exc:  # the arbiter ends with sys.exit: 0 after Ctrl+C/SIGTERM
        if os.getpid() != master:
            # a forked worker ending: leave now, without unwinding the caller's stack or running
            # exit handlers inherited from it (e.g. after `shockflow demo`'s Prefect run)
            sys.stdout.flush()
            sys.stderr.flush()
            os._exit(exc.code if isinstance(exc.code, int) else 1)
        if exc.code not in (0, None):
            msg = (
                f"the dashboard server stopped with status {exc.code} (a worker could not start; "
                "the lines above say why)"
            )
            raise DashboardError(msg) from None
