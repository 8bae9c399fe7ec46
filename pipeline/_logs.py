"""Console logging for the CLI: one line per problem, tracebacks only with ``--debug``.

Prefect logs a failing task with its traceback (``exc_info``) to the console. The pipeline already
records every failure with a one-line message naming the file, series, row or key and the fix, and
the CLI prints those; a traceback under them is noise for the person reading a nightly log. Without
``--debug``, :func:`quiet_tracebacks` adds a filter to every console handler that drops the
traceback of each record (the one-line message stays). Prefect's API log handler is left alone, so
a Prefect server still receives the full record.
"""

from __future__ import annotations

import logging

__all__ = ["DropTracebacks", "quiet_tracebacks"]


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
