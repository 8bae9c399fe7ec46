"""`create_app` (the Dash app factory) and `serve` (what ``shockflow dashboard`` runs)."""

from __future__ import annotations

import errno
import logging
import os
import signal
import socket
import sys
import threading
from collections.abc import Callable
from pathlib import Path
from typing import Any

from pipeline.config import is_loopback

from . import auth
from ._errors import DashboardError, InsecureBindError
from .settings import DashboardSettings

__all__ = ["Running", "check_bind", "create_app", "serve"]

#: Seconds a worker may spend on one request before it is replaced (on-demand bootstrap bands of a
#: large universe are the slowest answers).
WORKER_TIMEOUT = 300
#: Threads per worker process (requests one process answers at once; they share its Python lock).
WORKER_THREADS = 4
#: Seconds a client has to send a whole request (head and body) once its connection is readable;
#: then the connection is closed (see `_worker_class`). Browsers send a request in one go.
HEAD_TIMEOUT = 10.0
#: Bytes per second a declared request body must at least arrive at: once the head is in, the
#: body gets `HEAD_TIMEOUT` more seconds plus its length at this rate (16 MiB: about 4 minutes).
MIN_BODY_RATE = 64 * 1024
#: Largest request head, in bytes, read before the connection is closed.
MAX_HEAD_BYTES = 64 * 1024
#: Largest request body, in bytes (answered 413 above it). Most callback requests are a few
#: kilobytes; the CSV download sends the chart's rows back (about 300 bytes per window for the
#: model-health table: 16 MiB holds some 50 000 windows).
MAX_REQUEST_BYTES = 16 * 1024 * 1024
#: Bytes one worker holds at once for requests still arriving; past it, the connection whose data
#: overflowed it is closed (bounds memory when many large bodies arrive together).
MAX_BUFFERED_BYTES = 128 * 1024 * 1024
#: Connections one worker holds at once (waiting, kept alive or being answered).
WORKER_CONNECTIONS = 256
#: Seconds one write of an answer may block on a client that does not read.
SEND_TIMEOUT = 30.0

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

    The snapshot accessor is kept as ``app.server.extensions["shockflow_snapshot"]``; the kept
    answers (`callbacks.Answers`) as ``"shockflow_answers"``, and ``"shockflow_warm"`` computes the
    first view and the first tab's before anyone asks (each `serve` worker runs it as it starts).
    """
    import dash
    from flask import abort, send_file

    import arlib  # noqa: F401  (scipy loads here, once, not inside the first visitor's callbacks)

    try:  # pyarrow's to_numpy and plotly's JSON encoder import pandas lazily; a thread finding it
        import pandas  # noqa: F401  half-imported by another (the warm-up, a first request) failed
    except ImportError:
        pass

    from . import ids, views
    from .callbacks import Answers, _view_callback, first_view, register
    from .data import Snapshot
    from .layout import build
    from .reports import resolve_report

    settings = _settings(settings_or_config)
    snap = Snapshot(settings.snapshot)
    app = dash.Dash(
        __name__,
        title="shockflow — shock propagation explorer",
        update_title="",  # the tab title stays put while callbacks run (Dash: "" or None)
        assets_folder=str(ASSETS),
        serve_locally=True,
        suppress_callback_exceptions=True,
    )
    app.server.config["MAX_CONTENT_LENGTH"] = MAX_REQUEST_BYTES  # larger bodies: 413
    auth.install(app.server, token=settings.token, username=settings.username, password=settings.password)

    # one snapshot file per request: a publish mid-request never mixes two runs in one answer
    @app.server.before_request
    def _pin_snapshot() -> None:
        snap.reader.begin_pin()

    @app.server.teardown_request
    def _unpin_snapshot(exc: BaseException | None) -> None:
        snap.reader.end_pin()

    answers = Answers()  # per worker process: what every visitor asks first is computed once
    app.layout = lambda: build(snap, settings, first_view(snap, answers))
    register(app, snap, settings, answers)

    @app.server.route("/reports/<path:name>")
    def _report(name: str) -> Any:
        path = resolve_report(settings.export_dir, name)
        if path is None:
            abort(404)
        return send_file(path, as_attachment=True, download_name=path.name, max_age=0)

    def warm() -> None:
        """Compute what every visitor asks first — the page's first view and the first tab's view
        at the page's own control values — before anyone asks (`serve` runs it once per worker)."""
        try:
            page = build(snap, settings, first_view(snap, answers))
            first_tab = next(v for v in views.VIEWS if v.tab is not None)
            values = _control_values(page)
            state = values.get(ids.WINDOW)
            if isinstance(state, dict) and state.get("universe"):
                ask = [state, *(values.get(cid) for cid in first_tab.inputs)]
                _view_callback(snap, first_tab, answers)(ask)
        except Exception:  # a cold cache is all that is lost; requests report their own problems
            log.debug("warming the first view failed", exc_info=True)

    _register_scripts(app)
    app.server.extensions["shockflow_warm"] = warm
    app.server.extensions["shockflow_answers"] = answers
    app.server.extensions["shockflow_snapshot"] = snap
    app.server.extensions["shockflow_settings"] = settings
    return app


def _control_values(component: Any) -> dict[str, Any]:
    """Component id → its `value` (or a store's `data`) as the page is built, over the whole tree."""
    out: dict[str, Any] = {}
    stack = [component]
    while stack:
        node = stack.pop()
        if isinstance(node, (list, tuple)):
            stack.extend(node)
            continue
        cid = getattr(node, "id", None)
        if isinstance(cid, str):
            for prop in ("value", "data"):
                if prop in getattr(node, "_prop_names", ()) and getattr(node, prop, None) is not None:
                    out[cid] = getattr(node, prop)
        children = getattr(node, "children", None)
        if children is not None and not isinstance(children, str):
            stack.append(children)
    return out


def _register_scripts(app: Any) -> None:
    """Do Dash's one-time server setup now, so every worker serves every script from its first request.

    Dash learns which files it may serve under ``/_dash-component-suites/`` only while rendering
    the index page, in a setup step it runs before the first request a process answers. That step
    marks itself done before it has finished: another thread of the same worker asking for a
    script meanwhile was answered 500 ("not a registered library"), and a fresh server's page
    stuck on "Loading..." whenever the browser's script requests reached a worker that had not yet
    rendered the page. Run here, the step happens once in the process that builds the app — before
    gunicorn forks its workers, which inherit the registered paths. A stand-in layout is checked in
    place of the page's own, so nothing reads the snapshot before the fork (the page's layout is
    built per visit; tests/dashboard/test_first_load.py runs Dash's check over it).
    """
    from dash import html

    page_layout = app.layout
    app.layout = html.Div()
    try:
        with app.server.test_request_context("/"):
            app._setup_server()  # Dash's own setup (private): registers scripts and stylesheets
    finally:
        app.layout = page_layout


def check_bind(settings: DashboardSettings) -> None:
    """Refuse a non-loopback address without an access token or basic-auth credentials, or with
    a token shorter than `auth.MIN_TOKEN_LENGTH` characters (guessable)."""
    if is_loopback(settings.host):
        return
    if not settings.has_credentials:
        msg = (
            f"refusing to serve the dashboard on {settings.host!r} without access control: set an "
            "access token (SHOCKFLOW_DASHBOARD_TOKEN, or [dashboard] token/token_env) or basic-auth "
            "credentials (username + password), or listen on 127.0.0.1"
        )
        raise InsecureBindError(msg)
    if settings.token is not None and len(settings.token) < auth.MIN_TOKEN_LENGTH:
        msg = (
            f"refusing to serve the dashboard on {settings.host!r} with an access token of "
            f"{len(settings.token)} characters: use at least {auth.MIN_TOKEN_LENGTH} (e.g. the output "
            "of `python -c 'import secrets; print(secrets.token_urlsafe(24))'`), or listen on 127.0.0.1"
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


def _start_worker(worker: Any) -> None:
    """In each worker as it starts: leave Ctrl+C to the master, and warm the first view in the
    background (`create_app`'s ``warm``), so the first visitor finds it computed."""
    _ignore_interrupt(worker)
    warm = worker.wsgi.extensions.get("shockflow_warm") if hasattr(worker.wsgi, "extensions") else None
    if warm is not None:
        threading.Thread(target=warm, name="shockflow-warm", daemon=True).start()


def _ignore_interrupt(worker: Any) -> None:
    """Workers leave Ctrl+C to the master, which stops them with one SIGQUIT each (a terminal
    sends SIGINT to the whole group; a worker acting on it too would get two quit signals)."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)


def _worker_class() -> Any:
    """gunicorn's gthread worker, hardened against slow clients and a second quit signal.

    **Slow clients.** gthread hands a connection to one of its few threads as soon as its first
    byte arrives, and the thread then reads the rest of the request head and body with no time
    limit: 24–50 connections trickling a header line every 2 s held every thread of every worker
    and nobody else was answered. Here the worker's event loop (the one that accepts
    connections) reads each request — head and, when its length is declared and within
    `MAX_REQUEST_BYTES`, body — without blocking, and passes the connection to a thread only once
    the request is complete. A connection that has not delivered its request within
    `HEAD_TIMEOUT` seconds of being accepted (or, kept alive, of its next request starting) is
    closed — a declared body gets `HEAD_TIMEOUT` more plus its length at `MIN_BODY_RATE`; so is one whose head exceeds `MAX_HEAD_BYTES`, or whose data would take the bytes a
    worker holds for arriving requests past `MAX_BUFFERED_BYTES`. A
    waiting connection costs a socket, not a thread; each worker holds at most
    `WORKER_CONNECTIONS` at once (then it stops accepting until some close), so a flood larger
    than that still needs a reverse proxy's connection limits in front (README). Answers are
    written with a `SEND_TIMEOUT` per write, so a client that stops reading frees its thread.

    **Quit signals.** Ctrl+C in a terminal sends SIGINT to every process of the group, and the
    master then sends its workers SIGQUIT: when the second arrives while the first handler is
    shutting the worker's thread pool down, the nested handler waits for the pool's lock the
    outer one holds, and the worker hangs until the master kills it (seen after a Prefect run in
    the same process). The first handler alone finishes the job, so a nested call returns at once.
    """
    import selectors
    import time
    from functools import partial

    from gunicorn.workers.gthread import ThreadWorker

    class HardenedWorker(ThreadWorker):
        _quitting = False

        def handle_quit(self, sig: Any, frame: Any) -> None:
            if self._quitting:
                return
            self._quitting = True
            super().handle_quit(sig, frame)

        # -- reading requests in the event loop ------------------------------------------------

        def init_process(self) -> None:
            self._reading: dict[Any, _Arriving] = {}  # connections whose request is arriving
            self._buffered = 0  # bytes held in self._reading
            super().init_process()

        def accept(self, listener: Any) -> None:
            try:
                client, address = listener.accept()
            except OSError as exc:
                if exc.errno not in (errno.EAGAIN, errno.ECONNABORTED, errno.EWOULDBLOCK):
                    raise
                return
            from gunicorn.workers.gthread import TConn

            self.nr_conns += 1
            self._read_request(TConn(self.cfg, client, address, listener.getsockname()))

        def on_client_socket_readable(self, conn: Any, client: Any) -> None:
            self.poller.unregister(client)
            self.keepalived_conns.remove(conn)
            self._read_request(conn)

        def _read_request(self, conn: Any) -> None:
            if self.cfg.is_ssl:  # gunicorn terminating TLS itself: the thread reads (see README)
                self.enqueue_req(conn)
                return
            conn.sock.setblocking(False)
            self._reading[conn] = _Arriving(time.monotonic() + HEAD_TIMEOUT)
            self.poller.register(conn.sock, selectors.EVENT_READ, partial(self._on_readable, conn))

        def _drop(self, conn: Any) -> None:
            arriving = self._reading.pop(conn, None)
            if arriving is not None:
                self._buffered -= len(arriving.data)
            try:
                self.poller.unregister(conn.sock)
            except (KeyError, ValueError, OSError):
                pass
            self.nr_conns -= 1
            conn.close()

        def _on_readable(self, conn: Any, client: Any) -> None:
            arriving = self._reading[conn]
            try:
                chunk = conn.sock.recv(65536)
            except (BlockingIOError, InterruptedError):
                return
            except OSError:
                chunk = b""
            if not chunk:  # the client went away
                self._drop(conn)
                return
            self._buffered += len(chunk)
            if self._buffered > MAX_BUFFERED_BYTES:
                self._drop(conn)
                return
            head_was_in = arriving.body_start is not None
            arriving.add(chunk)
            if arriving.body_start is None:
                if len(arriving.data) > MAX_HEAD_BYTES:
                    self._drop(conn)
                return
            if not arriving.complete():
                if not head_was_in:
                    # the head is in: the body gets time in proportion to its declared length
                    arriving.deadline = time.monotonic() + HEAD_TIMEOUT + arriving.length / MIN_BODY_RATE
                    if arriving.expects_continue:
                        # the client waits for this before sending its body (curl does, for large ones)
                        try:
                            conn.sock.send(b"HTTP/1.1 100 Continue\r\n\r\n")
                        except OSError:
                            self._drop(conn)
                return
            del self._reading[conn]
            self._buffered -= len(arriving.data)
            self.poller.unregister(conn.sock)
            conn.sock.setblocking(True)
            conn.data_ready = True
            conn.prefetched = bytes(arriving.data)
            self.enqueue_req(conn)

        def murder_keepalived(self, force: bool = False) -> None:
            super().murder_keepalived(force)
            now = time.monotonic()
            for conn, arriving in list(self._reading.items()):
                if force or now >= arriving.deadline:
                    self._drop(conn)

        def handle(self, conn: Any) -> Any:
            prefetched = getattr(conn, "prefetched", None)
            if prefetched is not None:
                conn.prefetched = None
                conn.sock.setblocking(True)
                conn.init()
                conn.parser.unreader.unread(prefetched)
            return super().handle(conn)

        def handle_request(self, req: Any, conn: Any) -> Any:
            conn.sock.settimeout(SEND_TIMEOUT)  # the request is read; this bounds each write
            return super().handle_request(req, conn)

    return HardenedWorker


class _Arriving:
    """A request arriving on one connection: its bytes so far and what its head declared.

    Each chunk costs work in proportion to its own length only (the head's end is searched for
    from where the last chunk ended; the head is parsed once), so tiny chunks cannot make the
    event loop rescan what it already has.
    """

    def __init__(self, deadline: float) -> None:
        self.deadline = deadline
        self.data = bytearray()
        self.body_start: int | None = None  # index after the blank line ending the head
        self.length = 0  # declared Content-Length; -1 when malformed
        self.chunked = False
        self.expects_continue = False

    def add(self, chunk: bytes) -> None:
        seen = len(self.data)
        self.data += chunk
        if self.body_start is not None:
            return
        end = self.data.find(b"\r\n\r\n", max(0, seen - 3))
        if end < 0:
            return
        self.body_start = end + 4
        for line in bytes(self.data[:end]).lower().split(b"\r\n")[1:]:
            name, _, value = (part.strip() for part in line.partition(b":"))
            if name == b"content-length":
                self.length = int(value) if value.isdigit() else -1
            elif name == b"transfer-encoding":
                self.chunked = True
            elif name == b"expect" and value == b"100-continue":
                self.expects_continue = True

    def complete(self) -> bool:
        """True once the head and the body it declares are in — or a body that will not be
        waited for: too large (the app answers 413) or malformed (gunicorn answers 400)."""
        assert self.body_start is not None
        body = len(self.data) - self.body_start
        if self.chunked:  # the last chunk, or over the limit
            return self.data.endswith(b"0\r\n\r\n") or body > MAX_REQUEST_BYTES
        if self.length < 0 or self.length > MAX_REQUEST_BYTES:
            return True
        return body >= self.length


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
    `WORKER_THREADS` threads (gunicorn's gthread workers, hardened in `_worker_class`: a request
    reaches a thread only once it has fully arrived, within `HEAD_TIMEOUT`): a long on-demand
    computation holds one thread, not the process, and browsers keep their connections alive.
    (Sync workers gave a slightly tighter p95 on the loopback load benchmark, but block a whole
    process while a remote client downloads an answer.) The app is built once, before the fork,
    with Dash's script registry filled (`_register_scripts`) and nothing open: each worker opens
    the snapshot on its first request, pins every request to
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
        "worker_class": _worker_class(),
        "threads": WORKER_THREADS,
        "preload_app": True,  # imports once; no snapshot is open before the fork (opened lazily)
        "timeout": WORKER_TIMEOUT,
        "graceful_timeout": 10,
        "keepalive": 2,
        "worker_connections": WORKER_CONNECTIONS,
        "loglevel": "warning",  # one line per request would drown the start-up message
        "accesslog": None,
        "errorlog": "-",
        "control_socket_disable": True,  # no control socket file in the user's home
        # X-Forwarded-Proto is believed from the configured reverse proxies only (gunicorn's own
        # default believes any loopback peer, and more headers); it sets the request's scheme,
        # which marks the session cookie Secure (auth.py)
        "forwarded_allow_ips": ",".join(settings.trusted_proxies),
        "secure_scheme_headers": {"X-FORWARDED-PROTO": "https"},
        "forwarder_headers": "",
        "proc_name": "shockflow-dashboard",
        "when_ready": when_ready,
        "post_worker_init": _start_worker,
    }

    class _Server(BaseApplication):
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
