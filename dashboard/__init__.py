"""dashboard: a read-only Dash app over the serving snapshot.

``create_app(settings_or_config)`` builds the app; ``serve(config_or_settings, host=, port=,
workers=)`` builds it and serves it with several worker processes (gunicorn; loopback unless
credentials protect it). Importing this package is cheap: Dash, Plotly, DuckDB and gunicorn load
only when an app is created or served.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from ._errors import DashboardError, InsecureBindError, SnapshotMissingError, WindowError
from .settings import DashboardSettings

if TYPE_CHECKING:
    from .app import create_app, serve

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
    msg = f"module 'dashboard' has no attribute {name!r}"
    raise AttributeError(msg)
