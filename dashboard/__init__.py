"""dashboard: a read-only Dash app over the serving snapshot.

``create_app(settings_or_config)`` builds the app; ``serve(config_or_settings, host=, port=,
workers=)`` builds it and serves it with several worker processes (gunicorn; loopback unless
credentials protect it). Importing this package is cheap: Dash, Plotly, DuckDB, gunicorn and the
pipeline's config load only when settings, an app or a server are asked for.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from ._errors import DashboardError, InsecureBindError, SnapshotMissingError, WindowError

if TYPE_CHECKING:
    from .app import create_app, serve
    from .settings import DashboardSettings

__all__ = [
    "DashboardError",
    "DashboardSettings",
    "InsecureBindError",
    "SnapshotMissingError",
    "WindowError",
    "create_app",
    "serve",
]


def __getattr__(name: str) -> Any:
    if name in {"create_app", "serve"}:
        from . import app

        return getattr(app, name)
    if name == "DashboardSettings":  # reads the pipeline's config declarations (arlib, sources)
        from .settings import DashboardSettings

        return DashboardSettings
    msg = f"module 'dashboard' has no attribute {name!r}"
    raise AttributeError(msg)
