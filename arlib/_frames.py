"""Long frames from labelled results: the one place their layout is built.

Every labelled result turns into a long table — one row per number, one column per axis of the
result, holding series names, horizons, steps or dates, and the number in ``value`` (or in named
columns when a row holds several numbers, like a forecast's mean and bounds). pandas and polars
are imported only when a frame is asked for; arlib itself needs numpy and scipy alone.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from ._errors import InvalidInputError


@dataclass(frozen=True)
class Coded:
    """A text column of a long frame kept as positions into its few distinct labels (series
    names, regressor names): a long frame repeats each name many times, and building the
    column from positions costs one gather instead of one Python string per row."""

    codes: np.ndarray
    labels: tuple[str, ...]

    def __len__(self) -> int:
        return int(self.codes.shape[0])


#: Long columns: one numpy array (or coded text column) per column name, all of one length.
Columns = dict[str, "np.ndarray | Coded"]


def coded(labels: Sequence[Any], idx: np.ndarray) -> np.ndarray | Coded:
    """The column `labels[idx]`: coded when the labels are text, else a numpy array."""
    if len(labels) and all(isinstance(x, str) for x in labels):
        return Coded(np.asarray(idx, dtype=np.int64), tuple(labels))
    return np.asarray(labels)[idx]


# ---------------------------------------------------------------------------------------------
# outputs: long frames
# ---------------------------------------------------------------------------------------------


def long_columns(
    values: np.ndarray,
    axes: Sequence[tuple[str, np.ndarray]],
    *,
    value: str = "value",
    lead: Mapping[str, Any] | None = None,
) -> Columns:
    """Columns of the long layout of `values`: one row per entry, in C order.

    `axes` gives, per axis of `values`, its column name and labels (series names, horizons,
    dates); `lead` adds constant columns in front (e.g. the date of a fit).
    """
    arr = np.asarray(values)
    if len(axes) != arr.ndim or any(
        len(lab) != m for (_, lab), m in zip(axes, arr.shape, strict=True)
    ):
        msg = (
            f"labels {[(a, len(lab)) for a, lab in axes]!r} do not fit an array of shape "
            f"{arr.shape}; the array was changed after it was labelled — call to_frame() on the "
            "result itself"
        )
        raise InvalidInputError(msg)
    grid = np.indices(arr.shape).reshape(arr.ndim, arr.size)
    rows = arr.size
    out: Columns = {}
    for name, constant in (lead or {}).items():
        out[name] = np.repeat(np.asarray([constant]), rows)
    for (name, labels), idx in zip(axes, grid, strict=True):
        out[name] = coded(list(labels), idx)
    out[value] = arr.reshape(-1)
    return out


def to_pandas(columns: Columns, what: str) -> Any:
    """A pandas DataFrame from long columns (pandas is imported here, only when asked for)."""
    try:
        import pandas as pd
    except ImportError:
        msg = (
            f"{what}.to_frame() needs pandas, which is not installed; install it "
            "(`pip install pandas`) or use to_polars()"
        )
        raise ImportError(msg) from None

    def column(v: np.ndarray | Coded) -> Any:
        if isinstance(v, Coded):  # text as pandas infers it from a list of str, gathered
            return pd.Series(list(v.labels)).iloc[v.codes].reset_index(drop=True)
        return v.tolist() if v.dtype.kind == "O" else v

    return pd.DataFrame({k: column(v) for k, v in columns.items()})


def to_polars(columns: Columns, what: str) -> Any:
    """A polars DataFrame from long columns (polars is imported here, only when asked for)."""
    try:
        import polars as pl
    except ImportError:
        msg = (
            f"{what}.to_polars() needs polars, which is not installed; install it "
            "(`pip install polars`) or use to_frame()"
        )
        raise ImportError(msg) from None

    def column(name: str, v: np.ndarray | Coded) -> Any:
        if isinstance(v, Coded):
            return pl.Series(name, list(v.labels), dtype=pl.String).gather(v.codes)
        return pl.Series(name, v.tolist() if v.dtype.kind in "UO" else v)

    return pl.DataFrame([column(k, v) for k, v in columns.items()])


class FrameMixin:
    """`to_frame()` and `to_polars()` from a result's `_columns()` (its long layout)."""

    def _columns(self) -> Columns:
        raise NotImplementedError

    def to_frame(self) -> Any:
        """This result as a long pandas DataFrame (layout: see the class docstring)."""
        return to_pandas(self._columns(), type(self).__name__)

    def to_polars(self) -> Any:
        """This result as a long polars DataFrame (the same layout as `to_frame`)."""
        return to_polars(self._columns(), type(self).__name__)


def date_lead(date: np.datetime64 | None) -> dict[str, Any]:
    """The leading ``date`` column of a result dated by its sample's last row (none if unknown)."""
    return {} if date is None else {"date": date}


def last_date(dates: np.ndarray | None) -> np.datetime64 | None:
    """The date naming a sample: its last row's (a window is named by its last date)."""
    return None if dates is None or dates.shape[0] == 0 else dates[-1]


# ---------------------------------------------------------------------------------------------
# rolling results
# ---------------------------------------------------------------------------------------------

#: Per-window numbers of a `RollingVAR` in its one-row-per-window frame (when stored).
ROLLING_SUMMARY = (
    "nobs", "lags", "ok", "skip_reason", "spectral_radius", "aic", "bic", "hq", "fpe",
    "condition_number", "total_connectedness", "portmanteau_p", "joint_total",
)  # fmt: skip

def rolling_axes(result: Any) -> dict[str, tuple[str, ...]]:
    """Column names of the axes after the window axis, per array attribute of a `RollingVAR`,
    as its fields declare them (`_rolling._axes`): "series" axes are labelled by series names;
    "lag" counts from 1, "horizon" from 0, "step" from 1, "band" by the band's "lo-hi" cycle
    lengths in rows."""
    return {f.name: f.metadata["axes"] for f in dataclasses.fields(result) if "axes" in f.metadata}


def _axis_labels(result: Any, axis: str, size: int) -> np.ndarray:
    if axis == "lag":
        return np.arange(1, size + 1)
    if axis == "horizon":
        return np.arange(size)
    if axis == "step":
        return np.arange(1, size + 1)
    if axis == "band":
        return np.array([f"{lo:g}-{hi:g}" for lo, hi in result.band_periods], dtype=object)
    return np.array(result.names, dtype=object)


def rolling_columns(result: Any, field: str | None) -> Columns:
    """The long columns of a `RollingVAR` (see `RollingVAR.to_frame`)."""
    lead: dict[str, np.ndarray] = {}
    if result.dates is not None:
        lead["date"] = np.asarray(result.dates)
    lead["end"] = np.asarray(result.ends)
    if field is None:
        lead["start"] = np.asarray(result.starts)
        for name in ROLLING_SUMMARY:
            value = getattr(result, name)
            if value is not None:
                lead[name] = np.asarray(value)
        summary: Columns = dict(lead)
        return summary
    layout = rolling_axes(result)
    if field not in layout:
        msg = (
            f"`field` must be one of {sorted(layout)!r} (or None for one row per window), "
            f"got {field!r}"
        )
        raise InvalidInputError(msg)
    values = getattr(result, field)
    if values is None:
        msg = (
            f"this RollingVAR has no `{field}`: it was not asked for when it was computed; pass "
            "the matching option to rolling_var (e.g. responses=, decomposition=, granger=True, "
            "frequency_bands=, joint=True)"
        )
        raise InvalidInputError(msg)
    values = np.asarray(values)
    W = values.shape[0]
    axes = [(name, _axis_labels(result, name, size))
            for name, size in zip(layout[field], values.shape[1:], strict=True)]  # fmt: skip
    per = int(np.prod(values.shape[1:], dtype=np.int64))
    out: Columns = {k: np.repeat(v, per) for k, v in lead.items()}
    grid = np.indices(values.shape[1:]).reshape(len(axes), per)
    for (name, labels), idx in zip(axes, grid, strict=True):
        out[name] = coded(list(labels), np.tile(idx, W))
    out["value"] = values.reshape(-1)
    return out


def model_date(model: Any) -> np.datetime64 | None:
    """The last date of the sample a model was fitted on (a `VARFit` with dates), else None."""
    date = getattr(model, "date", None)
    return date if isinstance(date, np.datetime64) else None
