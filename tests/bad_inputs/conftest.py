"""Fixtures of the bad-input corpus: night 1 is built once per session and copied per case."""

from __future__ import annotations

from pathlib import Path

import pytest

from tests.bad_inputs.night import Night, night_one, start_night_two


@pytest.fixture(scope="session")
def night_one_template(prefect_api: str, tmp_path_factory: pytest.TempPathFactory) -> Night:
    """Night 1 run once (both sources ingested, both universes fitted, snapshot published)."""
    return night_one(tmp_path_factory.mktemp("night1") / "scenario")


@pytest.fixture
def night(night_one_template: Night, tmp_path: Path) -> Night:
    """A private copy of night 1's folder with night 2's ordinary news (one new equities day)."""
    copy = night_one_template.copy(tmp_path / "scenario")
    start_night_two(copy)
    return copy
