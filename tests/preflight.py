"""Say plainly, before the suite runs, which system packages the tests need and what will skip.

Run by `make test`. Under CI (`CI=true`) a missing package is an error: nothing may skip there.
"""

from __future__ import annotations

import os
import shutil
import sys


def main() -> int:
    chromium = shutil.which("chromium")
    if chromium:
        print(f"preflight: browser tests will use {chromium}")
        return 0
    if os.environ.get("CI", "").lower() in {"1", "true", "yes"}:
        print(
            "preflight: Debian's `chromium` is not installed, and under CI the browser tests may not "
            "skip. Install it with `apt-get install -y chromium` (.ci/run does this).",
            file=sys.stderr,
        )
        return 1
    print(
        "preflight: SKIPPING browser tests (PDF export and dashboard-in-a-browser): Debian's "
        "`chromium` is not installed. Install it with `sudo apt-get install -y chromium` to run them."
    )
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
