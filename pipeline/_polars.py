"""Typed readings of polars results whose declared types are wider than what the caller holds.

polars declares ``Series.arg_max`` as ``int | None`` (None for an empty series) and
``Series.min``/``max`` as any Python literal; the helpers below state what the pipeline knows at the
call (a boolean mask with a True in it; a non-empty Date column) and check it, so the rest of the
code is typed without casts.
"""

from __future__ import annotations

from datetime import date

import polars as pl

__all__ = ["date_bounds", "first_true"]


def first_true(mask: pl.Series) -> int:
    """Position of the first True of a boolean series that holds one (call after ``mask.any()``)."""
    i = mask.arg_max()
    if i is None:  # an empty series: callers check ``mask.any()`` first
        msg = f"series {mask.name!r} is empty; there is no first True"
        raise ValueError(msg)
    return i


def date_bounds(dates: pl.Series) -> tuple[date, date]:
    """First and last date of a non-empty Date series (nulls ignored)."""
    lo, hi = dates.min(), dates.max()
    if not (isinstance(lo, date) and isinstance(hi, date)):
        msg = f"column {dates.name!r} has type {dates.dtype} and bounds {lo!r}, {hi!r}; expected non-empty dates"
        raise TypeError(msg)
    return lo, hi
