"""Fixtures of the fault tests: night 1 built once, night 2's news, and an uninterrupted night 2."""

from __future__ import annotations

import time
from dataclasses import dataclass
from pathlib import Path

import polars as pl
import pytest

from tests.bad_inputs.night import NIGHT1_ROWS, Night, csv_text, equities, night_one, rates


def write_night_two(night: Night) -> None:
    """Night 2's news: five new business days in both sources and a revised rates value (row 70).

    The revision makes rates_pair refit every window that holds row 70, so the night has real
    ingest, fit and write work for a kill to interrupt.
    """
    night.write("equities.csv", csv_text(equities(NIGHT1_ROWS + 5)))
    df = rates(NIGHT1_ROWS + 5)
    df = df.with_columns(
        pl.when(pl.int_range(pl.len()) == 70).then(pl.col("RT_X") * 1.01).otherwise(pl.col("RT_X")).alias("RT_X")
    )
    night.write("rates.csv", csv_text(df))


@dataclass(frozen=True)
class Reference:
    """Night 2 run without interruption from the same night-1 state."""

    night: Night
    tables: dict[str, pl.DataFrame]
    snapshot: dict[str, pl.DataFrame]
    seconds: float


@pytest.fixture(scope="session")
def fault_night_one(prefect_api: str, tmp_path_factory: pytest.TempPathFactory) -> Night:
    return night_one(tmp_path_factory.mktemp("faults-night1") / "scenario")


@pytest.fixture(scope="session")
def reference(fault_night_one: Night, tmp_path_factory: pytest.TempPathFactory) -> Reference:
    night = fault_night_one.copy(tmp_path_factory.mktemp("faults-reference") / "scenario")
    write_night_two(night)
    t0 = time.perf_counter()
    result = night.run()
    seconds = time.perf_counter() - t0
    assert result.exit_code == 0, result.stderr
    return Reference(night, night.tables(), night.snapshot_tables(), seconds)


@pytest.fixture
def night_two(fault_night_one: Night, tmp_path: Path) -> Night:
    """A private copy of night 1 with night 2's files written (not run yet)."""
    night = fault_night_one.copy(tmp_path / "scenario")
    write_night_two(night)
    return night
