"""The value every source adapter returns."""

from __future__ import annotations

from dataclasses import dataclass

import polars as pl

__all__ = ["SourceFrame"]


@dataclass(frozen=True)
class SourceFrame:
    """Validated long rows of one source.

    `frame` has columns series (str), date (Date), value (Float64), one row per series × date,
    sorted; `origins` names the files / URL / query read; `rows_read` counts long rows before
    missing values were dropped is not tracked — it is the number of rows returned.
    """

    source: str
    frame: pl.DataFrame
    origins: tuple[str, ...]

    @property
    def rows(self) -> int:
        """Number of (series, date, value) rows."""
        return self.frame.height

    @property
    def series(self) -> list[str]:
        """Distinct series names, sorted."""
        return self.frame["series"].unique().sort().to_list()
