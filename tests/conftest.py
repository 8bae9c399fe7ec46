"""Session-wide test helpers shared by every test folder."""

from __future__ import annotations

import os
import shutil

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
