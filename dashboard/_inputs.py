"""Input parsing for the dashboard's views: everything from the browser is untrusted.

Each ``parse_*`` turns one raw input value into a checked one or raises `WindowError` with a line
the page can show (quoting what was typed). `guard` wraps a view so expected trouble becomes a
message chart instead of an error. No Dash here; views and callbacks import it.
"""

from __future__ import annotations

import datetime as dt
import functools
import logging
import math
import re
from collections.abc import Callable, Sequence
from typing import Any, cast

import numpy as np

import charts

from ._errors import DashboardError, WindowError
from .data import Universe

__all__ = [
    "BAND_CHOICES",
    "FAILED",
    "IDENTIFICATIONS",
    "MAX_HORIZON",
    "Rows",
    "ViewResult",
    "flag",
    "grid_index",
    "guard",
    "iso",
    "num",
    "nums",
    "page_text",
    "parse_choice",
    "parse_fraction",
    "parse_horizon",
    "parse_order",
    "wrap_text",
]

log = logging.getLogger("dashboard.callbacks")

IDENTIFICATIONS = {"generalized": "generalized (order-free)", "cholesky": "Cholesky (recursive ordering)"}
BAND_CHOICES = {"none": "no band", "stored": "stored band", "bootstrap": "compute a bootstrap band now"}
MAX_HORIZON = 60
Rows = list[dict[str, Any]]
ViewResult = tuple[charts.Figure, Rows, str]


def parse_horizon(value: Any) -> int:
    try:
        h = int(value.strip()) if isinstance(value, str) else int(value)
    except (TypeError, ValueError, OverflowError):
        h = -1
    if isinstance(value, bool) or not 1 <= h <= MAX_HORIZON or (isinstance(value, float) and h != value):
        typed = "nothing" if value in (None, "") else repr(str(value).strip()[:20])
        msg = f"Horizon must be a whole number of steps from 1 to {MAX_HORIZON}; you typed {typed}."
        raise WindowError(msg)
    return h


def parse_choice(value: Any, choices: Sequence[str] | dict[str, str], name: str) -> str:
    if not isinstance(value, str) or value not in choices:
        msg = f"`{name}` must be one of {list(choices)}, got {str(value)[:40]!r}"
        raise WindowError(msg)
    return value


def parse_fraction(value: Any, name: str, lo: float, hi: float) -> float:
    try:
        x = float(value)
    except (TypeError, ValueError):
        x = math.nan
    if isinstance(value, bool) or not (lo < x <= hi):
        msg = f"`{name}` must be a number in ({lo:g}, {hi:g}], got {str(value)[:20]!r}"
        raise WindowError(msg)
    return x


def parse_order(value: Any, universe: Universe) -> tuple[str, ...]:
    """A Cholesky ordering: the chosen series first (in the chosen order), the rest as stored."""
    chosen: list[str] = []
    if isinstance(value, (list, tuple)):
        for s in value:
            if isinstance(s, str) and s in universe.series and s not in chosen:
                chosen.append(s)
    return (*chosen, *[s for s in universe.series if s not in chosen])


def flag(value: Any, name: str) -> bool:
    if isinstance(value, bool):
        return value
    if isinstance(value, (list, tuple)):
        return name in value
    return False


def iso(d: Any) -> str:
    return d.isoformat() if isinstance(d, dt.date) else str(d)


def num(x: Any) -> float | None:
    """A float for the CSV rows; NaN and None become empty cells."""
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def nums(values: Any) -> list[float | None]:
    """`_num` of every element of an array, in C order (one `tolist`, a loop only over gaps)."""
    arr = np.asarray(values, dtype=np.float64).ravel()
    out = cast("list[float | None]", arr.tolist())  # a list of floats, read as the wider element type
    if not np.isfinite(arr).all():
        out = [v if math.isfinite(v) else None for v in arr.tolist()]
    return out


def grid_index(H1: int, n: int) -> list[tuple[int, int, int]]:
    """(h, i, j) in the C order of an (H1, n, n) array."""
    return [(h, i, j) for h in range(H1) for i in range(n) for j in range(n)]


#: What a view says when it failed unexpectedly (the server log has the traceback).
FAILED = "This view could not be computed; the server log has the details."


def guard(
    view: Callable[..., ViewResult], *, height: int = 320
) -> Callable[..., ViewResult]:
    """Turn expected trouble into a message chart; never show a traceback or internals to the page."""

    def wrapper(*args: Any, **kwargs: Any) -> ViewResult:
        import arlib

        try:
            return view(*args, **kwargs)
        except (DashboardError, arlib.ArlibError) as exc:
            text = page_text(str(exc))
            return charts.message_figure(wrap_text(text), height=height), [], text
        except Exception:
            log.exception("view %s failed", view.__name__)
            text = FAILED
            return charts.message_figure(text, height=height), [], text

    functools.update_wrapper(wrapper, view, assigned=("__name__", "__doc__"), updated=())  # and __wrapped__
    return wrapper


def page_text(text: str) -> str:
    """An error message as the page shows it: names in backticks become plain words (the page is
    not Markdown, so the backticks would show literally)."""
    return re.sub(r"`([^`]*)`", r"\1", text)


def wrap_text(text: str, width: int = 90) -> str:
    words, lines, line = text.split(), [], ""
    for w in words:
        if len(line) + len(w) + 1 > width:
            lines.append(line)
            line = w
        else:
            line = f"{line} {w}".strip()
    lines.append(line)
    return "<br>".join(lines)


