"""Rows of the declared result tables, from an arlib rolling or TVP result.

A table declared in serving/_schema.py with `fill` and column `source`s needs no writer of its own:
for every such table whose `needs` attribute the result carries (not None), `declared_tables`
builds its rows — one per fitted window (`fill = "window"`, each source array (W, *shape) taken at
the fitted windows) or one per fitted window and frequency band (`fill = "band"`, each source
(W, d, *shape), plus the band key from the result's `band_periods` and `band_truncation`). A scalar
source (a setting such as `lag_decay`) is repeated on every row. Array columns are stored
flattened in C order, a NaN in a nullable scalar column as NULL (docs/warehouse.md).
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np
import polars as pl

from serving import SCHEMA, Column, Table

__all__ = ["declared_tables", "list_column"]

#: SQL type of a scalar column → the polars dtype it is written as.
_DTYPES = {"DOUBLE": pl.Float64, "INTEGER": pl.Int32, "BIGINT": pl.Int64, "BOOLEAN": pl.Boolean}

#: Head columns (run_id, universe, window_end) for fitted-window positions, each repeated `times`.
Head = Callable[[np.ndarray, int], dict[str, Any]]


def declared_tables(result: Any, k: np.ndarray, head: Head) -> dict[str, pl.DataFrame]:
    """Every declared table the result carries, as frames; `k` are the fitted windows' positions."""
    out: dict[str, pl.DataFrame] = {}
    for t in SCHEMA:
        if t.fill and getattr(result, t.needs, None) is not None:
            out[t.name] = _frame(t, result, k, head)
    return out


def _frame(t: Table, result: Any, k: np.ndarray, head: Head) -> pl.DataFrame:
    K = k.size
    cols: dict[str, Any] = {}
    if t.fill == "band":
        periods = tuple(result.band_periods)
        d = len(periods)
        kk, band = np.repeat(k, d), np.tile(np.arange(d), K)
        cols.update(head(k, d))
        cols["band"] = pl.Series(band, dtype=pl.Int32)
        cols["period_lo"] = np.tile([float(lo) for lo, _ in periods], K)
        cols["period_hi"] = np.tile([float(hi) for _, hi in periods], K)
        cols["truncation"] = pl.Series([int(result.band_truncation)] * (K * d), dtype=pl.Int32)

        def pick(a: np.ndarray) -> np.ndarray:
            return a[kk, band]
    else:
        cols.update(head(k, 1))

        def pick(a: np.ndarray) -> np.ndarray:
            return a[k]

    rows = len(cols["window_end"])
    for c in t.columns:
        if c.source:
            cols[c.name] = _column(c, getattr(result, c.source), pick, rows, t.name)
    return pl.DataFrame(cols).select(list(t.column_names))


def _column(c: Column, value: Any, pick: Callable[[np.ndarray], np.ndarray], rows: int, table: str) -> pl.Series:
    if value is None:
        msg = f"{table}.{c.name}: the result carries no `{c.source}`, which the declaration fills it from"
        raise ValueError(msg)
    a = np.asarray(value)
    if c.shape:
        return list_column(pick(a)).alias(c.name)
    dtype = _DTYPES[c.type]
    values = np.full(rows, a.item()) if a.ndim == 0 else pick(a)
    s = pl.Series(c.name, values).cast(dtype)
    return s.fill_nan(None) if dtype == pl.Float64 and not c.not_null else s


def list_column(a: np.ndarray) -> pl.Series:
    """(W, ...) array → List(Float64) column, each row flattened in C order (the warehouse's
    array layout; every array column of the fit stage is written through it)."""
    W = a.shape[0]
    flat = np.ascontiguousarray(a, dtype=np.float64).reshape(W, -1)
    if W == 0:
        return pl.Series([], dtype=pl.List(pl.Float64))
    return pl.Series(flat).cast(pl.List(pl.Float64))
