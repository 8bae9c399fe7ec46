"""The dashboard's exceptions: one root, each subclass for one kind of trouble.

The snapshot errors are the read side's own (`serving`), raised by the reader the dashboard uses;
so that one ``except DashboardError`` still catches every error the dashboard shows, its root is the
serving layer's root.
"""

from __future__ import annotations

from serving import ServingError, SnapshotMissingError, WindowError

__all__ = ["DashboardError", "InsecureBindError", "SnapshotMissingError", "WindowError"]

#: Root of every error the dashboard raises on purpose (the read side's errors included); the
#: message is one readable line.
DashboardError = ServingError


class InsecureBindError(DashboardError):
    """Asked to listen on a non-loopback address with no access token or basic-auth credentials,
    or with a token shorter than `auth.MIN_TOKEN_LENGTH` characters."""
