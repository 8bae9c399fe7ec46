"""Fixtures of the pipeline tests.

Prefect: the session's ONE test harness is `prefect_api` in tests/conftest.py (each start costs
30–50 s on a busy machine); `prefect_harness` is its alias for tests that need no URL.
"""

from __future__ import annotations

import pytest


@pytest.fixture(scope="session")
def prefect_harness(prefect_api: str) -> None:
    """The session's one Prefect test harness (tests/conftest.py `prefect_api`), URL not needed."""
    del prefect_api
