"""The pipeline's exceptions: one root, one subclass per stage.

Every message names what is wrong (file, row, series, key, option) and how to fix it, in one line,
so the CLI can print it without a traceback. Lower-level errors (DuckDB, polars, HTTP, OS) are
turned into these with :func:`from_duckdb` and friends, never passed through raw.
"""

from __future__ import annotations

from pathlib import Path

__all__ = [
    "ConfigError",
    "DataError",
    "ExportError",
    "FitError",
    "PublishError",
    "ScheduleError",
    "ShockflowError",
    "SourceError",
    "WarehouseError",
    "from_duckdb",
]


class ShockflowError(Exception):
    """Root of every error the pipeline raises on purpose."""


class ConfigError(ShockflowError):
    """The TOML configuration is malformed, incomplete or inconsistent.

    `problems` holds every problem found, each a one-line message naming the file, the key and the
    fix (the loader reports all of a file's problems at once; the message lists them one a line).
    """

    def __init__(self, message: str, *, problems: tuple[str, ...] = ()) -> None:
        super().__init__(message)
        self.problems: tuple[str, ...] = problems or (message,)


class SourceError(ShockflowError):
    """A source could not be read (missing file, bad encoding, HTTP failure, bad query)."""


class DataError(ShockflowError):
    """Rows were read but their content is unusable (bad number, bad date, conflicting duplicate)."""


class WarehouseError(ShockflowError):
    """The DuckDB warehouse or snapshot could not be opened, read or written."""


class FitError(ShockflowError):
    """A universe could not be fitted at all (individual windows are skipped, not raised)."""


class PublishError(ShockflowError):
    """The serving snapshot could not be written or swapped in."""


class ExportError(ShockflowError):
    """A report or extract could not be written."""

    #: universe → paths written before the failure (set by an export of several universes)
    written: dict[str, list[Path]]


class ScheduleError(ShockflowError):
    """The schedule (Prefect server or deployment) could not be started."""


def from_duckdb(exc: BaseException, *, path: str | Path, action: str) -> WarehouseError:
    """Turn a DuckDB exception met while doing `action` on file `path` into a WarehouseError."""
    text = " ".join(str(exc).split())
    lowered = text.lower()
    if "lock" in lowered or "conflicting lock" in lowered:
        fix = (
            "another process holds this DuckDB file (a running pipeline or an open shell); "
            "wait for it to finish or close it, then retry"
        )
    elif "not a valid duckdb database" in lowered or "corrupt" in lowered or "magic" in lowered:
        fix = "the file is not a DuckDB database of this version; point [warehouse] path at a new file"
    elif "permission" in lowered or "read-only file system" in lowered:
        fix = "make the folder writable or choose another [warehouse] path"
    else:
        fix = "rerun with --debug for the full traceback"
    msg = f"warehouse {str(path)!r}: {action} failed: {text} ({fix})"
    return WarehouseError(msg)
