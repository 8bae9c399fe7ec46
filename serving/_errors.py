"""The serving layer's exceptions: one root, one subclass per kind of trouble."""

from __future__ import annotations

__all__ = [
    "RefitMismatchError",
    "ServingError",
    "SnapshotMissingError",
    "StoredArrayError",
    "UnknownIdentificationError",
    "WindowError",
]


class ServingError(Exception):
    """Root of every error the read side raises on purpose; the message is one readable line."""


class SnapshotMissingError(ServingError):
    """The serving snapshot file does not exist (yet), is not a DuckDB database, or lacks tables."""


class WindowError(ServingError, ValueError):
    """A universe, date or option asked for is not one the snapshot knows."""


class StoredArrayError(ServingError):
    """A stored array's length does not match the shape docs/warehouse.md declares for it."""


class UnknownIdentificationError(ServingError, ValueError):
    """A stored or requested identification is none of the schemes this version knows."""


class RefitMismatchError(ServingError):
    """Refitting a window on its stored rows does not reproduce its stored coefficients."""
