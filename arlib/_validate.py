"""Errors, warnings and the boundary checks every public arlib function runs once.

Public functions call these helpers on entry; the private kernels behind them trust their inputs.
Each message names the argument, shows the offending numbers and suggests the fix.
"""

from __future__ import annotations

import os
import sys
import warnings
from collections.abc import Mapping, Sequence
from typing import TYPE_CHECKING, Any, Protocol, runtime_checkable

import numpy as np

from ._errors import ArlibError, InvalidInputError, UnstableProcessWarning
from ._labels import as_dates, as_labelled

if TYPE_CHECKING:
    from types import FrameType

__all__ = [
    "ArlibError",
    "InvalidInputError",
    "UnstableProcessWarning",
    "VARLike",
]


@runtime_checkable
class VARLike(Protocol):
    """What every function taking a model needs: a fit (`VARFit`) or a given process (`VARProcess`).

    Attributes
    ----------
    coefs : (p, n, n) array, ``coefs[i]`` is A_{i+1}.
    sigma_u : (n, n) innovation covariance.
    intercept : (n,) array or None.
    n, lags : number of series and lag order p.
    names : tuple of n series names.
    companion : (n·p, n·p) companion matrix; spectral_radius, is_stable : its stability.
    """

    @property
    def coefs(self) -> np.ndarray: ...
    @property
    def sigma_u(self) -> np.ndarray: ...
    @property
    def intercept(self) -> np.ndarray | None: ...
    @property
    def n(self) -> int: ...
    @property
    def lags(self) -> int: ...
    @property
    def names(self) -> tuple[str, ...]: ...
    @property
    def companion(self) -> np.ndarray: ...
    @property
    def spectral_radius(self) -> float: ...
    @property
    def is_stable(self) -> bool: ...


_PACKAGE_DIR = os.path.dirname(os.path.abspath(__file__))


def find_stacklevel() -> int:
    """Stack level of the first frame outside arlib, so a warning points at the caller's line."""
    frame: FrameType | None = sys._getframe(1)
    level = 1
    while frame is not None:
        filename = os.path.abspath(frame.f_code.co_filename)
        if not filename.startswith(_PACKAGE_DIR + os.sep):
            break
        frame = frame.f_back
        level += 1
    return level


def warn_unstable(radius: float, *, what: str = "fitted VAR") -> None:
    """Issue `UnstableProcessWarning` naming the spectral radius (the caller's line is blamed)."""
    msg = (
        f"the {what} is not stable: the companion matrix has spectral radius {radius:.6g} >= 1, "
        "so it has no stationary distribution and its responses do not die out; difference or "
        "transform the series, or use fewer lags"
    )
    warnings.warn(msg, UnstableProcessWarning, stacklevel=find_stacklevel())


def as_data(
    y: Any, names: Sequence[str] | None = None, *, arg: str = "y"
) -> tuple[np.ndarray, tuple[str, ...]]:
    """Wrap `y` once into a (T, n) float64 array plus n series names.

    A 1-D `y` becomes one column; a pandas/polars DataFrame gives its numeric columns and their
    names (its date column or DatetimeIndex is set aside, never fitted; see `as_dated_data`).
    Rejects other ranks, empty arrays and NaN/inf (naming the first offending row and series).
    Names default to ``y0, y1, ...``.
    """
    arr, labels, _ = as_dated_data(y, names, arg=arg)
    return arr, labels


def as_dated_data(
    y: Any,
    names: Sequence[str] | None = None,
    dates: Any = None,
    *,
    arg: str = "y",
    gaps: bool = False,
) -> tuple[np.ndarray, tuple[str, ...], np.ndarray | None]:
    """`as_data` plus the (T,) dates of the rows, or None when neither `y` nor `dates` has any.

    Dates come from a DataFrame's date column or DatetimeIndex, or from `dates` for arrays
    (a frame with dates and `dates=` together is refused). With ``gaps=True`` NaN rows are kept
    (inf is still refused) for the callers that handle gaps themselves.
    """
    data = as_labelled(y, names, arg=arg)
    arr = as_real_array(data.values, arg, "a numeric array of shape (T, n)")
    if arr.ndim == 1:
        arr = arr[:, None]
    if arr.ndim != 2:
        msg = (
            f"`{arg}` must be 1-D (one series) or 2-D (T rows, n series); got shape {arr.shape}; "
            "stack the series as columns"
        )
        raise InvalidInputError(msg)
    if arr.shape[0] == 0 or arr.shape[1] == 0:
        msg = f"`{arg}` is empty (shape {arr.shape}); pass at least one series with data rows"
        if data.dates is not None and arr.shape[1] == 0:
            msg += " (a DataFrame's date column is not a series: it needs numeric columns too)"
        raise InvalidInputError(msg)
    labels = as_names(data.names, arr.shape[1])
    when = data.dates
    if dates is not None:
        if when is not None:
            msg = (
                f"`dates` was given together with a `{arg}` that carries its own dates (a date "
                "column or DatetimeIndex); drop one of them"
            )
            raise InvalidInputError(msg)
        when = as_dates(dates, arg="dates", rows=arr.shape[0])
    bad = np.isinf(arr) if gaps else ~np.isfinite(arr)
    if bad.any():
        rows, cols = np.nonzero(bad)
        at = f" ({when[rows[0]]})" if when is not None else ""
        if gaps:
            msg = (
                f"`{arg}` has {int(bad.sum())} infinite value(s); the first is at row {rows[0]}"
                f"{at} of series {labels[cols[0]]!r}; replace them with NaN (a gap) or a finite "
                "value"
            )
        else:
            kind = "NaN" if np.isnan(arr[rows[0], cols[0]]) else "inf"
            msg = (
                f"`{arg}` has {bad.sum()} non-finite value(s); the first is {kind} at row "
                f"{rows[0]}{at} of series {labels[cols[0]]!r}; drop or fill missing rows before "
                "fitting"
            )
        raise InvalidInputError(msg)
    return arr, labels, when


def as_real_array(value: Any, arg: str, what: str) -> np.ndarray:
    """`value` as a new float64 array, refusing what numpy would turn into numbers silently or
    cryptically: None, complex values (their imaginary parts would be dropped), text.

    `what` describes the expected value in the message, e.g. "a numeric array of shape (T, n)".
    """
    if value is None:
        msg = f"`{arg}` must be {what}, got None"
        raise InvalidInputError(msg)
    try:
        raw = np.asarray(value)
    except (TypeError, ValueError) as exc:
        msg = f"`{arg}` must be {what}; converting it failed: {exc}"
        raise InvalidInputError(msg) from exc
    if np.iscomplexobj(raw):
        msg = (
            f"`{arg}` holds complex numbers (dtype {raw.dtype}); pass real values — e.g. the "
            "real part (`.real`) or the modulus (`abs(...)`) if that is what you mean"
        )
        raise InvalidInputError(msg)
    try:
        return np.array(raw, dtype=np.float64, copy=True)
    except (TypeError, ValueError) as exc:
        msg = f"`{arg}` must be {what}; converting it failed: {exc}"
        raise InvalidInputError(msg) from exc


def as_names(names: Sequence[str] | None, n: int, *, arg: str = "names") -> tuple[str, ...]:
    """n distinct series names as strings; defaults to ``y0 .. y{n-1}``."""
    if names is None:
        return tuple(f"y{i}" for i in range(n))
    if isinstance(names, str):
        msg = f"`{arg}` must be a sequence of {n} strings, got the single string {names!r}"
        raise InvalidInputError(msg)
    try:
        labels = tuple(str(name) for name in names)
    except TypeError:
        msg = f"`{arg}` must be a sequence of {n} strings (one per series), got {names!r}"
        raise InvalidInputError(msg) from None
    if len(labels) != n:
        msg = f"`{arg}` has {len(labels)} entries for {n} series; give exactly one name per column"
        raise InvalidInputError(msg)
    if len(set(labels)) != n:
        dup = sorted({x for x in labels if labels.count(x) > 1})
        msg = f"`{arg}` repeats {dup!r}; series names must be distinct"
        raise InvalidInputError(msg)
    return labels


def as_rng(rng: Any, arg: str = "rng") -> np.random.Generator:
    """The one rule for randomness everywhere in arlib: a numpy Generator is used as it is
    (its state advances), an integer seeds a new ``np.random.default_rng(seed)`` (the same
    seed gives the same draws), None draws fresh entropy from the operating system (not
    reproducible). Anything else — bools, floats, legacy ``RandomState`` — is refused."""
    if isinstance(rng, np.random.Generator):
        return rng
    if rng is None or (isinstance(rng, int | np.integer) and not isinstance(rng, bool)):
        if rng is not None and rng < 0:
            msg = f"`{arg}` as an integer seed must be >= 0, got {rng!r}"
            raise InvalidInputError(msg)
        return np.random.default_rng(None if rng is None else int(rng))
    msg = (
        f"`{arg}` must be a numpy Generator, an integer seed or None, got {rng!r} "
        f"({type(rng).__name__}); pass e.g. {arg}=42 or {arg}=np.random.default_rng(42)"
    )
    raise InvalidInputError(msg)


def check_int(value: Any, arg: str, *, minimum: int, hint: str = "") -> int:
    """`value` as an int >= minimum (bools and non-integral numbers are refused)."""
    if isinstance(value, bool) or not isinstance(value, int | np.integer):
        msg = f"`{arg}` must be an integer >= {minimum}, got {value!r}"
        raise InvalidInputError(msg)
    if value < minimum:
        msg = f"`{arg}` must be >= {minimum}, got {value!r}" + (f"; {hint}" if hint else "")
        raise InvalidInputError(msg)
    return int(value)


def check_option(value: Any, arg: str, options: Mapping[str, Any] | Sequence[str]) -> str:
    """`value` if it is one of `options` (keys of a dict, or a list of strings)."""
    choices = list(options)
    if not isinstance(value, str) or value not in choices:
        msg = f"`{arg}` must be one of {choices!r}, got {value!r}"
        raise InvalidInputError(msg)
    return value


def check_fraction(value: Any, arg: str) -> float:
    """A number strictly between 0 and 1 (e.g. band coverage)."""
    try:
        out = float(value)
    except (TypeError, ValueError):
        out = float("nan")
    if not 0.0 < out < 1.0:
        msg = f"`{arg}` must be a number strictly between 0 and 1 (e.g. 0.9), got {value!r}"
        raise InvalidInputError(msg)
    return out


def check_model(model: object, arg: str = "fit") -> VARLike:
    """`model` if it quacks like a VAR (a `VARFit` or `VARProcess`), else a clear error."""
    if not isinstance(model, VARLike):
        msg = (
            f"`{arg}` must be a VAR fit (from `fit_var`) or a process (from `var_process`), "
            f"got {type(model).__name__}; fit the data first with arlib.fit_var(y, lags)"
        )
        raise InvalidInputError(msg)
    return model


def series_indices(which: Any, names: tuple[str, ...], arg: str) -> tuple[int, ...]:
    """Column positions from an int, a name, or a sequence of them (distinct, in range)."""
    if isinstance(which, int | np.integer | str):
        items = [which]
    elif isinstance(which, Sequence) and not isinstance(which, bytes):
        items = list(which)
    elif isinstance(which, np.ndarray) and which.ndim == 1:
        items = which.tolist()
    else:
        msg = (
            f"`{arg}` must be a column index (an integer 0..{len(names) - 1}), a series name "
            f"(one of {list(names)!r}) or a list of them, got {which!r}"
        )
        raise InvalidInputError(msg)
    if not items:
        msg = f"`{arg}` is empty; name at least one series (an index 0..{len(names) - 1} or a name)"
        raise InvalidInputError(msg)
    out: list[int] = []
    for item in items:
        if isinstance(item, str):
            if item not in names:
                msg = f"`{arg}` names series {item!r}, which is not among {list(names)!r}"
                raise InvalidInputError(msg)
            out.append(names.index(item))
        elif isinstance(item, int | np.integer) and not isinstance(item, bool):
            if not 0 <= item < len(names):
                msg = (
                    f"`{arg}` has index {item!r}, outside 0..{len(names) - 1} for {len(names)} "
                    "series"
                )
                raise InvalidInputError(msg)
            out.append(int(item))
        else:
            msg = f"`{arg}` entries must be column indices or series names, got {item!r}"
            raise InvalidInputError(msg)
    if len(set(out)) != len(out):
        msg = f"`{arg}` lists a series twice: {items!r}"
        raise InvalidInputError(msg)
    return tuple(out)


def readonly(*arrays: np.ndarray | None) -> None:
    """Mark arrays read-only in place (results are immutable)."""
    for a in arrays:
        if a is not None:
            a.flags.writeable = False
