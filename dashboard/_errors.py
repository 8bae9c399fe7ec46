"""The dashboard's exceptions: one root, each subclass for one kind of trouble."""

from __future__ import annotations

__all__ = ["DashboardError", "InsecureBindError", "SnapshotMissingError", "WindowError"]


class DashboardError(Exception):
    """Root of every error the dashboard raises on purpose; the message is one readable line."""


class InsecureBindError(DashboardError):
    """Asked to listen on a non-loopback address with no access token or basic-auth credentials,
    or with a token shorter than `auth.MIN_TOKEN_LENGTH` characters."""


class SnapshotMissingError(DashboardError):
    """The serving snapshot file does not exist (yet) or is not a DuckDB database."""


class WindowError(DashboardError, ValueError):
    """A universe, date or option coming from the browser is not one the snapshot knows."""
