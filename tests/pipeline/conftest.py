"""Fixtures of the pipeline tests: ONE Prefect test harness per session, and small data sets."""

from __future__ import annotations

import os
from collections.abc import Iterator

import pytest

#: What the project's own Prefect processes get (the harness's server is a subprocess: it reads
#: these from the environment).
PREFECT_TEST_ENV = {
    "DO_NOT_TRACK": "1",
    "PREFECT_SERVER_ANALYTICS_ENABLED": "false",
    "PREFECT_SERVER_EPHEMERAL_STARTUP_TIMEOUT_SECONDS": "120",
    "PREFECT_LOGGING_LEVEL": "WARNING",
}


@pytest.fixture(scope="session")
def prefect_harness() -> Iterator[None]:
    """Prefect's test harness (a temporary server and database), started once per session."""
    from prefect.testing.utilities import prefect_test_harness

    saved = {k: os.environ.get(k) for k in PREFECT_TEST_ENV}
    os.environ.update(PREFECT_TEST_ENV)
    try:
        with prefect_test_harness(server_startup_timeout=120):
            yield
    finally:
        for k, v in saved.items():
            if v is None:
                os.environ.pop(k, None)
            else:
                os.environ[k] = v
