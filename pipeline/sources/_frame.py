"""The value every source adapter returns."""

from __future__ import annotations

from dataclasses import dataclass

import polars as pl

__all__ = ["SourceFrame"]


@dataclass(frozen=True)
class SourceFrame:
    """Validated long rows of one source.

    `frame` has columns series (Categorical: each name stored once), date (Date), value (Float64),
    one row per series × date, sorted by series and date; `origins` names the files / URL / query
    read; `rows` is the number of rows returned (missing values are not counted).
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
