"""arlib's root error, its subclasses and warnings (imported by every module, importing none)."""

from __future__ import annotations

__all__ = ["ArlibError", "InvalidInputError", "UnstableProcessWarning"]


class ArlibError(Exception):
    """Root of every error arlib raises on purpose."""


class InvalidInputError(ArlibError, ValueError):
    """An argument is unusable: wrong shape, non-finite, too short, collinear, unknown option."""


class UnstableProcessWarning(UserWarning):
    """A fitted or given VAR has a companion spectral radius >= 1 (not stationary)."""
