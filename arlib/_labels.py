"""Labels at the boundary: DataFrames in, names and dates carried through, long frames out.

Inputs. Every public function taking data `y` accepts, besides a numpy array (unchanged), a
pandas or polars DataFrame (or Series):

- numeric columns (integers, floats, decimals — as float64) become the series, their column
  names the series names;
- a date column (pandas datetime64 / Python dates, polars Date / Datetime) or a pandas
  DatetimeIndex becomes the dates of the rows — never a series; a pandas PeriodIndex (e.g.
  quarters) dates each row by the last day of its period;
- any other column (text, booleans, categories, lists, time-zone-aware timestamps) is refused
  with an error naming it.

Dates are calendar dates without time zone (``numpy.datetime64``, day precision when every
value falls on midnight), strictly increasing (rows oldest first). pandas and polars are imported
only when the caller already uses them: arlib itself needs numpy and scipy alone.

Outputs. Labelled results offer ``to_frame()`` (pandas) and ``to_polars()`` (polars), both in a
long layout: one row per number, one column per axis of the result (named after the axis and
holding series names, horizons, steps or dates), and the number itself in ``value`` (or in
named columns for results with several numbers per row, e.g. a forecast's mean and bounds).
The layout of each result is documented on its ``to_frame`` method and in README's Python API
section. Responses and decompositions are returned as `LabelledArray`, a read-only numpy array
that also carries its labels; anything computed from it (arithmetic, slicing, numpy functions)
is a plain array again, so labels never describe numbers they do not belong to.
"""

from __future__ import annotations

import sys
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from ._errors import InvalidInputError
from ._frames import Columns, date_lead, long_columns, to_pandas, to_polars

__all__ = ["LabelledArray", "LabelledData", "as_dates", "as_labelled"]

# ---------------------------------------------------------------------------------------------
# inputs
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class LabelledData:
    """`y` unwrapped at the boundary: values (T, n) or whatever the array was, names, dates.

    `values` is the input's numbers (not yet checked for shape or finiteness — the callers' own
    checks do that); `names` the frame's column names, or for other inputs the caller's
    `names` as given (None for none; checked by `as_names`); `dates` a (T,) datetime64 array
    or None.
    """

    values: Any
    names: Any
    dates: np.ndarray | None


def _loaded(package: str) -> Any:
    """The package's module if something already imported it, else None. A frame can only
    come from an imported package, so arlib never imports pandas or polars to look."""
    return sys.modules.get(package)


def is_frame(y: Any) -> bool:
    """True for a pandas or polars DataFrame or Series (whose columns name the series)."""
    pd = _loaded("pandas")
    pl = _loaded("polars")
    return (pd is not None and isinstance(y, pd.DataFrame | pd.Series)) or (
        pl is not None and isinstance(y, pl.DataFrame | pl.Series)
    )


def as_labelled(y: Any, names: Sequence[str] | None, *, arg: str = "y") -> LabelledData:
    """Unwrap a pandas/polars DataFrame or Series into values, names and dates.

    Anything else (numpy arrays, lists) passes through unchanged with the given `names` and no
    dates. Giving `names` together with a DataFrame is refused (the columns already name the
    series); rename the columns instead.
    """
    pd = _loaded("pandas")
    pl = _loaded("polars")
    if pd is not None and isinstance(y, pd.DataFrame | pd.Series):
        data = _from_pandas(pd, y, arg)
    elif pl is not None and isinstance(y, pl.DataFrame | pl.Series):
        data = _from_polars(pl, y, arg)
    else:
        return LabelledData(y, names, None)  # `names` checked by the caller (as_names)
    if names is not None:
        msg = (
            f"`names` was given together with a {type(y).__name__} `{arg}`, whose columns already "
            f"name the series ({list(data.names or ())!r}); rename the columns instead of passing "
            "`names`"
        )
        raise InvalidInputError(msg)
    return data


_YES_NO = "; a yes/no column is not a series (cast it to float if it is one)"


def _refuse_column(arg: str, column: str, dtype: Any, hint: str, *, pandas: bool) -> None:
    drop = f"{arg}.drop(columns={column!r})" if pandas else f"{arg}.drop({column!r})"
    msg = (
        f"`{arg}` column {column!r} has type {dtype}, which is neither a numeric series nor a "
        f"date column; drop it (e.g. `{drop}`) or convert it to numbers{hint}"
    )
    raise InvalidInputError(msg)


def _from_pandas(pd: Any, y: Any, arg: str) -> LabelledData:
    frame = y.to_frame() if isinstance(y, pd.Series) else y
    if isinstance(y, pd.Series) and y.name is None:
        frame.columns = ["y0"]
    api = pd.api.types
    series: list[str] = []
    values: list[np.ndarray] = []
    date_cols: list[str] = []
    date_values: Any = None
    for name in frame.columns:
        col = frame[name]
        label = str(name)
        if isinstance(col, pd.DataFrame):
            msg = f"`{arg}` has the column name {label!r} more than once; series names must be distinct"
            raise InvalidInputError(msg)
        dtype = col.dtype
        if api.is_bool_dtype(dtype):
            _refuse_column(arg, label, dtype, _YES_NO, pandas=True)
        if api.is_datetime64_any_dtype(dtype) or (
            api.is_object_dtype(dtype)
            and api.infer_dtype(col, skipna=False) in ("date", "datetime")
        ):
            date_cols.append(label)
            date_values = col
            continue
        if (api.is_numeric_dtype(dtype) and not api.is_complex_dtype(dtype)) or (
            api.is_object_dtype(dtype) and api.infer_dtype(col, skipna=True) == "decimal"
        ):  # integers, floats, and Decimal objects (as float64)
            series.append(label)
            values.append(col.astype(np.float64).to_numpy(dtype=np.float64, na_value=np.nan))
            continue
        _refuse_column(arg, label, dtype, "", pandas=True)
    index = frame.index
    if isinstance(index, pd.PeriodIndex):  # a period is labelled by its last day
        index = index.to_timestamp(how="end").normalize()
    index_dates = isinstance(index, pd.DatetimeIndex)
    _one_date_source(arg, date_cols, index_dates)
    dates = None
    if date_cols:
        dates = _pandas_dates(pd, date_values, arg, f"date column {date_cols[0]!r}")
    elif index_dates:
        dates = _pandas_dates(pd, index.to_series(), arg, "DatetimeIndex")
    return LabelledData(_stack(values, len(frame)), tuple(series), dates)


def _pandas_dates(pd: Any, col: Any, arg: str, where: str) -> np.ndarray:
    tz = getattr(col.dtype, "tz", None)
    if tz is not None:
        msg = (
            f"`{arg}` {where} has time zone {tz}; arlib dates are calendar dates without a time "
            "zone — convert them, e.g. `.dt.tz_localize(None)` (or `.tz_localize(None)` on the index)"
        )
        raise InvalidInputError(msg)
    if col.isna().any():
        row = int(np.flatnonzero(col.isna().to_numpy())[0])
        msg = f"`{arg}` {where} is missing at row {row}; every row needs a date — drop or fill that row"
        raise InvalidInputError(msg)
    values = list(col) if pd.api.types.is_object_dtype(col.dtype) else col.to_numpy()
    return as_dates(values, what=f"`{arg}` {where}")


def _from_polars(pl: Any, y: Any, arg: str) -> LabelledData:
    frame = y.to_frame() if isinstance(y, pl.Series) else y
    series: list[str] = []
    values: list[np.ndarray] = []
    date_cols: list[str] = []
    for name, dtype in frame.schema.items():
        if dtype == pl.Date or isinstance(dtype, pl.Datetime):
            if getattr(dtype, "time_zone", None):
                msg = (
                    f"`{arg}` column {name!r} has time zone {dtype.time_zone}; arlib dates are "
                    "calendar dates without a time zone — convert them, e.g. "
                    f"`pl.col({name!r}).dt.replace_time_zone(None)`"
                )
                raise InvalidInputError(msg)
            date_cols.append(name)
            continue
        if dtype.is_numeric():  # integers, floats and decimals (as float64)
            series.append(name)
            values.append(frame[name].cast(pl.Float64).fill_null(float("nan")).to_numpy())
            continue
        _refuse_column(arg, name, dtype, _YES_NO if dtype == pl.Boolean else "", pandas=False)
    _one_date_source(arg, date_cols, False)
    dates = None
    if date_cols:
        col = frame[date_cols[0]]
        if col.null_count():
            row = int(np.flatnonzero(col.is_null().to_numpy())[0])
            msg = (
                f"`{arg}` date column {date_cols[0]!r} is missing at row {row}; every row needs a "
                "date — drop or fill that row"
            )
            raise InvalidInputError(msg)
        dates = as_dates(col.to_numpy(), what=f"`{arg}` date column {date_cols[0]!r}")
    return LabelledData(_stack(values, frame.height), tuple(series), dates)


def _one_date_source(arg: str, date_cols: list[str], index_dates: bool) -> None:
    if len(date_cols) + int(index_dates) > 1:
        found = [repr(c) for c in date_cols] + (["the DatetimeIndex"] if index_dates else [])
        msg = (
            f"`{arg}` has more than one date column ({', '.join(found)}); keep the one that dates "
            "the rows and drop the others (or reset the index)"
        )
        raise InvalidInputError(msg)


def _stack(values: list[np.ndarray], rows: int) -> np.ndarray:
    return np.column_stack(values) if values else np.empty((rows, 0))


def as_dates(
    dates: Any, *, arg: str = "dates", rows: int | None = None, what: str | None = None
) -> np.ndarray:
    """(T,) read-only datetime64 dates, strictly increasing; day precision when all are midnight.

    Accepts numpy datetime64 arrays, Python dates/datetimes, ISO strings ("2024-01-31") and
    pandas/polars date columns (through numpy). `rows` checks the length against the data;
    `what` names the dates in messages (default: the argument, `dates`).
    """
    label = what if what is not None else f"`{arg}`"
    try:
        raw = np.asarray(dates)
        arr = raw if np.issubdtype(raw.dtype, np.datetime64) else raw.astype("datetime64")
    except (TypeError, ValueError) as exc:
        msg = (
            f"{label} must be dates (numpy datetime64, datetime.date or 'YYYY-MM-DD' strings); "
            f"converting failed: {exc}"
        )
        raise InvalidInputError(msg) from exc
    if arr.ndim != 1:
        msg = f"{label} must be 1-D (one date per row), got shape {arr.shape}"
        raise InvalidInputError(msg)
    if rows is not None and arr.shape[0] != rows:
        msg = f"{label} has {arr.shape[0]} dates for {rows} rows of data; give one date per row"
        raise InvalidInputError(msg)
    if np.isnat(arr).any():
        row = int(np.flatnonzero(np.isnat(arr))[0])
        msg = f"{label} is missing at row {row}; every row needs a date — drop or fill that row"
        raise InvalidInputError(msg)
    day = arr.astype("datetime64[D]")
    if arr.size and np.all(day == arr):
        arr = day
    if arr.size > 1:
        back = np.flatnonzero(np.diff(arr) <= np.timedelta64(0))
        if back.size:
            r = int(back[0]) + 1
            msg = (
                f"{label} must be strictly increasing (rows oldest first): row {r} "
                f"({arr[r]}) does not come after row {r - 1} ({arr[r - 1]}); sort the rows by "
                "date and drop duplicate dates"
            )
            raise InvalidInputError(msg)
    out = np.array(arr, copy=True)
    out.flags.writeable = False
    return out


def date_rows(values: Any, dates: np.ndarray | None, arg: str) -> np.ndarray | None:
    """Row positions of the dates in `values` (a date, or a sequence of dates), or None when
    `values` holds no dates (integer rows pass through to the caller's own checks)."""
    raw = np.asarray(values)
    if raw.dtype.kind in "iub" or (raw.dtype == object and raw.size == 0):
        return None
    if raw.dtype.kind == "f" and raw.size == 0:
        return None
    try:
        wanted = raw if np.issubdtype(raw.dtype, np.datetime64) else raw.astype("datetime64")
    except (TypeError, ValueError):
        return None
    if dates is None:
        msg = (
            f"`{arg}` is given as dates, but the data has none; pass a DataFrame with a date "
            "column (or DatetimeIndex), or `dates=`, or give row positions instead"
        )
        raise InvalidInputError(msg)
    flat = np.atleast_1d(wanted).astype(dates.dtype)
    pos = np.searchsorted(dates, flat)
    inside = pos < dates.shape[0]
    found = inside & (dates[np.minimum(pos, dates.shape[0] - 1)] == flat)
    if not found.all():
        bad = flat[np.flatnonzero(~found)[0]]
        msg = (
            f"`{arg}` names the date {bad}, which is not a date of the data ({dates[0]} .. "
            f"{dates[-1]}, {dates.shape[0]} rows); use dates that appear in the data"
        )
        raise InvalidInputError(msg)
    return pos.reshape(np.shape(wanted)).astype(np.int64)


# ---------------------------------------------------------------------------------------------
# labelled arrays (responses, decompositions)
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class _ArrayLabels:
    axes: tuple[tuple[str, tuple[Any, ...]], ...]
    names: tuple[str, ...]
    date: np.datetime64 | None
    kind: str


def _plain(obj: Any) -> Any:
    """`obj` with every LabelledArray inside (lists, tuples, dicts) viewed as a plain ndarray."""
    if isinstance(obj, LabelledArray):
        return obj.view(np.ndarray)
    if isinstance(obj, tuple | list):
        return type(obj)(_plain(x) for x in obj)
    if isinstance(obj, dict):
        return {k: _plain(v) for k, v in obj.items()}
    return obj


class LabelledArray(np.ndarray):
    """A read-only numpy array that also knows what its axes mean: series names, the date of
    the fit it came from, the identification or method.

    Returned by `impulse_responses`, `variance_decomposition` and `ma_coefficients`. It is a
    numpy array in every respect (indexing, arithmetic, numpy functions); what is computed from
    it is a plain ``numpy.ndarray`` — the labels stay with the result they describe.

    Attributes
    ----------
    names : the n series names.   date : the fit's last date (numpy datetime64) or None.
    kind : the identification ("cholesky", "generalized", "unit", with " cumulative" for
        running sums) or decomposition method.
    axes : tuple of the axis names, e.g. ("horizon", "response", "shock").

    ``to_frame()`` / ``to_polars()`` give the long layout: ``date`` (when known), one column per
    axis — responses: ``horizon`` (0..H), ``response``, ``shock``; decompositions: ``step``
    (1..H), ``variable``, ``shock``; MA coefficients: ``horizon``, ``response``, ``innovation`` —
    then ``value``.
    """

    _labels: _ArrayLabels | None

    @classmethod
    def wrap(
        cls,
        array: np.ndarray,
        axes: Sequence[tuple[str, Sequence[Any]]],
        *,
        names: tuple[str, ...],
        date: np.datetime64 | None,
        kind: str,
    ) -> LabelledArray:
        """`array` (made read-only) with its labels."""
        out = array.view(cls)
        out._labels = _ArrayLabels(tuple((a, tuple(lab)) for a, lab in axes), names, date, kind)
        out.flags.writeable = False
        return out

    def __array_finalize__(self, obj: Any) -> None:
        # views, reshapes and transposes made by numpy carry no labels (they may not fit)
        self._labels = None

    def __array_ufunc__(self, ufunc: Any, method: str, *inputs: Any, **kwargs: Any) -> Any:
        if "out" in kwargs:
            kwargs["out"] = _plain(kwargs["out"])
        return getattr(ufunc, method)(*_plain(inputs), **kwargs)

    def __array_function__(
        self, func: Callable[..., Any], types: Any, args: Any, kwargs: Any
    ) -> Any:
        return func(*_plain(args), **_plain(kwargs))

    def __getitem__(self, key: Any) -> Any:
        return self.view(np.ndarray)[key]

    def copy(self, order: Any = "C") -> LabelledArray:
        """A writable copy that keeps the labels."""
        out = np.ndarray.copy(self, order=order).view(LabelledArray)
        out._labels = self._labels
        return out

    def __copy__(self) -> LabelledArray:
        return self.copy()

    def __deepcopy__(self, memo: Any) -> LabelledArray:
        return self.copy()

    def __reduce__(self) -> Any:
        reduced: Any = super().__reduce__()  # ndarray's (function, args, state)
        fn, args, state = reduced
        return fn, args, (state, self._labels)

    def __setstate__(self, state: Any) -> None:
        base, labels = state
        super().__setstate__(base)
        self._labels = labels

    def _need(self) -> _ArrayLabels:
        if self._labels is None:
            msg = (
                "this array was derived from a labelled result (by a view, reshape or transpose), "
                "so its labels no longer apply; use the result returned by arlib itself"
            )
            raise InvalidInputError(msg)
        return self._labels

    @property
    def names(self) -> tuple[str, ...]:
        """The n series names."""
        return self._need().names

    @property
    def date(self) -> np.datetime64 | None:
        """The last date of the fit these numbers come from, or None when it had no dates."""
        return self._need().date

    @property
    def kind(self) -> str:
        """Identification or method, e.g. "cholesky", "generalized cumulative"."""
        return self._need().kind

    @property
    def axes(self) -> tuple[str, ...]:
        """Axis names, e.g. ("horizon", "response", "shock")."""
        return tuple(a for a, _ in self._need().axes)

    def _columns(self) -> Columns:
        labels = self._need()
        axes = [(a, np.asarray(lab)) for a, lab in labels.axes]
        return long_columns(self.view(np.ndarray), axes, lead=date_lead(labels.date))

    def to_frame(self) -> Any:
        """Long pandas DataFrame: ``date`` (when known), one column per axis, ``value``."""
        return to_pandas(self._columns(), "LabelledArray")

    def to_polars(self) -> Any:
        """Long polars DataFrame, the same layout as `to_frame`."""
        return to_polars(self._columns(), "LabelledArray")
