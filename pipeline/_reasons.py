"""Skip reasons in the universe's own words.

The rolling engine (arlib) fits on a bare matrix, so its skip reasons name columns by position:
``series 1 is constant in this window`` or ``collinear regressors ['y0.L1', 'y2.L1']``. Before a
reason is stored, :func:`name_series` puts the universe's series names in their place
(``series 'EX_B'``, ``['EX_A.L1', 'EX_C.L1']``), so `window_fits.skip_reason` says which series.
"""

from __future__ import annotations

import re
from collections.abc import Sequence

__all__ = ["name_series"]

_SERIES_INDEX = re.compile(r"\bseries (\d+)\b")
_COLUMN = re.compile(r"'y(\d+)((?:\.L\d+)?)'")


def name_series(reason: str, names: Sequence[str]) -> str:
    """`reason` with arlib's positional names (series j, 'yj', 'yj.Lk') replaced by `names[j]`."""

    def by_index(m: re.Match[str]) -> str:
        j = int(m.group(1))
        return f"series {names[j]!r}" if j < len(names) else m.group(0)

    def by_column(m: re.Match[str]) -> str:
        j = int(m.group(1))
        return f"'{names[j]}{m.group(2)}'" if j < len(names) else m.group(0)

    return _COLUMN.sub(by_column, _SERIES_INDEX.sub(by_index, reason))
