"""Session-wide test helpers shared by every test folder."""

from __future__ import annotations

import os
import shutil
from collections.abc import Iterator

import pytest

IN_CI = os.environ.get("CI", "").lower() in {"1", "true", "yes"}


@pytest.fixture(scope="session")
def chromium_path() -> str:
    """Path of Debian's chromium; skips (or, under CI, fails) when it is missing."""
    path = shutil.which("chromium")
    if path is None:
        msg = "Debian's `chromium` is not installed (apt-get install -y chromium)"
        if IN_CI:
            pytest.fail(msg + "; under CI browser tests may not skip")
        pytest.skip(msg)
    return path


#: Flags every headless Chromium start uses: no sandbox (root), no GPU, no calls home.
CHROMIUM_ARGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--no-first-run",
]


#: What the project's own Prefect processes get in tests (the harness's server is a subprocess and
#: reads these from the environment; so do `shockflow` subprocesses the tests start).
PREFECT_TEST_ENV = {
    "DO_NOT_TRACK": "1",
    "PREFECT_SERVER_ANALYTICS_ENABLED": "false",
    "PREFECT_SERVER_EPHEMERAL_STARTUP_TIMEOUT_SECONDS": "120",
    "PREFECT_LOGGING_LEVEL": "WARNING",
}


@pytest.fixture(scope="session")
def prefect_api() -> Iterator[str]:
    """Prefect's test harness (a temporary server and database), started once per session.

    The session's ONLY harness: every Prefect test requests this fixture (or its alias
    `prefect_harness` in tests/pipeline/conftest.py); do not start another one.

    Yields the server's API URL: subprocesses given ``PREFECT_API_URL`` = this URL use the same
    server instead of each starting a temporary one (which takes 5–60 s on a busy machine).
    """
    from prefect.settings import PREFECT_API_URL
    from prefect.testing.utilities import prefect_test_harness

    saved = {k: os.environ.get(k) for k in PREFECT_TEST_ENV}
    os.environ.update(PREFECT_TEST_ENV)
    try:
        with prefect_test_harness(server_startup_timeout=120):
            yield str(PREFECT_API_URL.value())
    finally:
        for k, v in saved.items():
            if v is None:
                os.environ.pop(k, None)
            else:
                os.environ[k] = v
