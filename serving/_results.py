"""A declared result table read back as arrays: `Snapshot.results(table, universe)`.

For a table declared with `fill` (serving/_schema.py), every stored window's row set becomes one
position of the arrays: a per-window table gives each column (W,) or (W, *shape), a per-band table
(W, d) or (W, d, *shape), with shape symbols resolved for the universe (n = its series). The band
key (periods, truncation) is read once. Arrays are read-only; a row set that is not whole (a band
missing, an array of the wrong length, a NULL where the schema forbids it) is a malformed snapshot
and raises `StoredArrayError` naming the table and column.
"""

from __future__ import annotations

import bisect
import dataclasses
import datetime as dt
import math
from collections.abc import Mapping
from typing import Any

import numpy as np

from ._errors import StoredArrayError, WindowError
from ._schema import Table

__all__ = ["StoredResult", "position", "stored_result"]


@dataclasses.dataclass(frozen=True, eq=False)
class StoredResult:
    """Every stored window of one declared result table for one universe.

    table: the table's name; ends: W window ends, increasing; periods: the d bands as
    (shortest, longest] cycle lengths in rows (() for a per-window table); truncation: the MA terms
    behind band results (None otherwise); values: column name → read-only array, (W, …) for a
    per-window table and (W, d, …) for a per-band one.
    """

    table: str
    ends: list[dt.date]
    periods: tuple[tuple[float, float], ...]
    truncation: int | None
    values: Mapping[str, np.ndarray]

    def __getitem__(self, column: str) -> np.ndarray:
        try:
            return self.values[column]
        except KeyError:
            msg = f"{self.table} has no column {column!r}; it has {sorted(self.values)}"
            raise KeyError(msg) from None

    def at(self, end: dt.date) -> int:
        """Position of window `end` (WindowError when the table stores nothing for it)."""
        return position(self.ends, end, f"{self.table} results")


def position(ends: list[dt.date], end: dt.date, what: str) -> int:
    """Index of `end` in the increasing `ends`; WindowError "no <what> stored …" when absent."""
    k = bisect.bisect_left(ends, end)
    if k == len(ends) or ends[k] != end:
        msg = f"no {what} stored for the window ending {end}"
        raise WindowError(msg)
    return k


def stored_result(t: Table, arrow: Any, n: int) -> StoredResult | None:
    """`arrow`: the universe's rows of `t` (a pyarrow Table ordered by window end, then band)."""
    rows = arrow.num_rows
    if rows == 0:
        return None
    per = 1
    periods: tuple[tuple[float, float], ...] = ()
    truncation = None
    if t.fill == "band":
        band = arrow.column("band").to_numpy()
        per = int(band.max()) + 1
        if rows % per or np.any(band != np.tile(np.arange(per), rows // per)):
            msg = f"{t.name}: stored rows are not whole windows of {per} bands; publish again with `shockflow run`"
            raise StoredArrayError(msg)
        lo = arrow.column("period_lo").to_numpy()[:per]
        hi = arrow.column("period_hi").to_numpy()[:per]
        periods = tuple((float(a), float(b)) for a, b in zip(lo, hi, strict=True))
        truncation = int(arrow.column("truncation")[0].as_py())
    W = rows // per
    lead = (W, per) if t.fill == "band" else (W,)
    values: dict[str, np.ndarray] = {}
    for c in t.columns:
        if c.source:
            what = f"{t.name}.{c.name}"
            values[c.name] = _array(arrow.column(c.name), c.type, lead, tuple(n for _ in c.shape), c.not_null, what)
    ends = arrow.column("window_end").to_pylist()[::per]
    return StoredResult(t.name, ends, periods, truncation, values)


def _array(column: Any, sql_type: str, lead: tuple[int, ...], shape: tuple[int, ...], not_null: bool,
           what: str) -> np.ndarray:
    """One stored column as a read-only array (lead + shape): float for DOUBLE and arrays (NULL →
    NaN where allowed), the column's own dtype otherwise (INTEGER, BOOLEAN: NOT NULL)."""
    col = column.combine_chunks()
    nulls = col.null_count
    if nulls and not_null:
        msg = f"{what} holds NULL, which docs/warehouse.md does not allow; publish the snapshot again with `shockflow run`"
        raise StoredArrayError(msg)
    if not shape:
        out = col.to_numpy(zero_copy_only=False)  # a DOUBLE's NULLs come back as NaN
        return _readonly(np.asarray(out, dtype=np.float64 if sql_type == "DOUBLE" else None).reshape(lead))
    size = math.prod(shape)
    lengths = col.value_lengths().to_numpy(zero_copy_only=False)
    valid = ~np.isnan(np.asarray(lengths, dtype=np.float64))
    if np.any(lengths[valid] != size):
        msg = f"{what}: a stored array does not hold {size} values (shape {shape}); publish again with `shockflow run`"
        raise StoredArrayError(msg)
    out = np.full((len(col), size), np.nan)
    out[valid] = np.asarray(col.flatten().to_numpy(zero_copy_only=False), dtype=np.float64).reshape(-1, size)
    return _readonly(out.reshape(*lead, *shape))


def _readonly(a: np.ndarray) -> np.ndarray:
    a.flags.writeable = False
    return a
