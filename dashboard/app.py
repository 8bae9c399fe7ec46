"""`create_app` (the Dash app factory) and `serve` (what ``shockflow dashboard`` runs)."""

from __future__ import annotations

import logging
import sys
from pathlib import Path
from typing import Any

from . import auth
from ._errors import InsecureBindError
from .settings import DashboardSettings

__all__ = ["check_bind", "create_app", "serve"]

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


def serve(
    config_or_settings: Any,
    host: str | None = None,
    port: int | None = None,
    *,
    ready: Any = None,
) -> None:
    """Serve the dashboard until interrupted (the CLI's ``shockflow dashboard`` and ``demo``).

    `host`/`port` override the config. Non-loopback addresses need credentials; otherwise
    `InsecureBindError` (one line, naming the fix) is raised before anything listens. `ready`, if
    given, is called with the bound server (tests use it to learn the port and shut it down).
    """
    from werkzeug.serving import make_server

    settings = _settings(config_or_settings).with_address(host, port)
    check_bind(settings)
    app = create_app(settings)
    # one line per request on stderr drowns the start-up message; keep warnings and errors only
    logging.getLogger("werkzeug").setLevel(logging.WARNING)
    server = make_server(settings.host, settings.port, app.server, threaded=True)
    shown = f"[{settings.host}]" if ":" in settings.host else settings.host
    print(
        f"shockflow dashboard: http://{shown}:{server.server_port}/  (reading {settings.snapshot}; "
        "Ctrl+C stops it)\nCaution: a research tool, not financial advice. Estimated relations "
        "between markets change over time.",
        file=sys.stderr,
        flush=True,
    )
    if ready is not None:
        ready(server)
    try:
        server.serve_forever()
    except KeyboardInterrupt:
        pass
    finally:
        server.server_close()
