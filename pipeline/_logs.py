"""Console logging for the CLI: one line per problem, tracebacks only with ``--debug``.

Prefect logs a failing task with its traceback (``exc_info``) to the console. The pipeline already
records every failure with a one-line message naming the file, series, row or key and the fix, and
the CLI prints those; a traceback under them is noise for the person reading a nightly log. Without
``--debug``, :func:`quiet_tracebacks` adds a filter to every console handler that drops the
traceback of each record (the one-line message stays). Prefect's API log handler is left alone, so
a Prefect server still receives the full record.

The pipeline logs under ``shockflow.*`` (one INFO line per source read, universe planned and
fitted, report exported). Prefect sends those loggers to its API (``PREFECT_LOGGING_EXTRA_LOGGERS
= shockflow``, set by the CLI), but they inherit the root logger's WARNING level, so the INFO lines
never left the process. While a nightly flow runs, :func:`pipeline_logs_to_prefect` lowers the
``shockflow`` logger to INFO, so every INFO line reaches the flow run's logs in Prefect, and keeps
the console as it was: a console handler still drops ``shockflow`` records below
``PREFECT_LOGGING_LEVEL`` (WARNING unless ``--debug``).
"""

from __future__ import annotations

import logging
import os
from collections.abc import Iterator
from contextlib import contextmanager

__all__ = ["ConsoleThreshold", "DropTracebacks", "pipeline_logs_to_prefect", "quiet_tracebacks"]

#: The pipeline's loggers (shockflow.flows, shockflow.jobs, shockflow.export, ...).
PIPELINE_LOGGER = "shockflow"


class DropTracebacks(logging.Filter):
    """Keep the record, drop its traceback and stack (it is printed as one line)."""

    def filter(self, record: logging.LogRecord) -> bool:
        record.exc_info = None
        record.exc_text = None
        record.stack_info = None
        return True


def _console_handlers() -> list[logging.Handler]:
    loggers: list[logging.Logger] = [logging.getLogger()]
    loggers += [lg for lg in logging.Logger.manager.loggerDict.values() if isinstance(lg, logging.Logger)]
    seen: dict[int, logging.Handler] = {}
    for lg in loggers:
        for h in lg.handlers:
            # console = a stream handler that is not a file (Prefect's console and debug handlers)
            if isinstance(h, logging.StreamHandler) and not isinstance(h, logging.FileHandler):
                seen[id(h)] = h
    return list(seen.values())


def quiet_tracebacks(debug: bool) -> int:
    """Without `debug`, strip tracebacks from console log records; returns the handlers filtered.

    Call after Prefect configured logging (after importing it). Idempotent.
    """
    if debug:
        return 0
    count = 0
    for h in _console_handlers():
        if not any(isinstance(f, DropTracebacks) for f in h.filters):
            h.addFilter(DropTracebacks())
        count += 1
    return count


class ConsoleThreshold(logging.Filter):
    """On a console handler: drop the pipeline's records below `level` (others pass)."""

    def __init__(self, level: int) -> None:
        super().__init__()
        self.level = level

    def filter(self, record: logging.LogRecord) -> bool:
        ours = record.name == PIPELINE_LOGGER or record.name.startswith(PIPELINE_LOGGER + ".")
        return not ours or record.levelno >= self.level


def _console_level() -> int:
    name = os.environ.get("PREFECT_LOGGING_LEVEL", "WARNING").upper()
    level = logging.getLevelName(name)
    return level if isinstance(level, int) else logging.WARNING


@contextmanager
def pipeline_logs_to_prefect() -> Iterator[None]:
    """Within: the pipeline's INFO lines reach Prefect's API handler; the console keeps its level.

    Use inside a flow run (records need the run context to be sent). Restores the logger's level
    and removes its console filters on exit.
    """
    logger = logging.getLogger(PIPELINE_LOGGER)
    saved = logger.level
    added: list[tuple[logging.Handler, ConsoleThreshold]] = []
    threshold = _console_level()
    for h in _console_handlers():
        f = ConsoleThreshold(threshold)
        h.addFilter(f)
        added.append((h, f))
    from prefect.logging.handlers import APILogHandler

    api: APILogHandler | None = None
    if not any(isinstance(h, APILogHandler) for h in logger.handlers):  # no EXTRA_LOGGERS setting
        api = APILogHandler()
        logger.addHandler(api)
    logger.setLevel(min(logging.INFO, logger.getEffectiveLevel()))
    try:
        yield
    finally:
        logger.setLevel(saved)
        if api is not None:
            logger.removeHandler(api)
        for h, f in added:
            h.removeFilter(f)
