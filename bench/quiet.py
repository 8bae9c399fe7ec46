"""A rerun with nothing to do, on the demo: the flow as before vs the check before Prefect starts.

Case (issue 14 item 5): the demo (data_samples/demo.toml, the invented Veloria market) is run once
in full; then, interleaved, best of 3 each, in fresh processes with no Prefect server running:

- **before**: ``shockflow run --always-flow`` — what every rerun did until now: start Prefect's
  temporary server, run the nightly flow, find nothing new;
- **after**: ``shockflow run`` — the in-process read-only check (pipeline.quiet) finds nothing to
  do and ends before Prefect starts.

Wall time is process start to exit (``time.perf_counter`` around the subprocess). Target: ≤ 3 s.

    python -m bench quiet
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from . import environment_line, print_table

__all__ = ["main", "run"]

TARGET_S = 3.0
BIN = Path(sys.executable).parent


def _run(config: Path, env: dict[str, str], *extra: str) -> tuple[float, dict[str, object]]:
    t0 = time.perf_counter()
    done = subprocess.run(
        [str(BIN / "shockflow"), "run", "--config", str(config), "--json", *extra],
        env=env, capture_output=True, text=True, check=False,
    )
    wall = time.perf_counter() - t0
    if done.returncode != 0:
        msg = f"shockflow run exited {done.returncode}: {done.stderr[-2000:]}"
        raise RuntimeError(msg)
    return wall, json.loads(done.stdout)


def run(repeat: int = 3) -> dict[str, list[float]]:
    from shockflow.cli import demo_config

    folder = Path(tempfile.mkdtemp(prefix="shockflow-quiet-"))
    env = {k: v for k, v in os.environ.items() if not k.startswith("PREFECT_")}
    env.update({"PREFECT_HOME": str(folder / "prefect-home"), "DO_NOT_TRACK": "1"})
    env.pop("SHOCKFLOW_CONFIG", None)
    times: dict[str, list[float]] = {"before": [], "after": []}
    try:
        config = demo_config(folder / "demo")
        first, _ = _run(config, env)
        for _ in range(repeat):
            wall, doc = _run(config, env, "--always-flow")
            assert doc["orchestrated"] is True
            times["before"].append(wall)
            wall, doc = _run(config, env)
            assert doc["orchestrated"] is False, doc
            times["after"].append(wall)
        checks = float(doc["seconds"]["total"])  # type: ignore[index]  # the JSON document's documented shape
    finally:
        shutil.rmtree(folder, ignore_errors=True)
    before, after = min(times["before"]), min(times["after"])
    print(environment_line())
    print_table(
        "a rerun with nothing to do, demo, best of 3 interleaved (process start to exit, s)",
        ["", "before: flow (--always-flow)", "after: check, no Prefect"],
        [
            ["best", f"{before:.2f}", f"{after:.2f}"],
            ["all runs", " ".join(f"{t:.1f}" for t in times["before"]), " ".join(f"{t:.1f}" for t in times["after"])],
        ],
        notes=[
            f"first (full) demo run {first:.1f} s; the check itself {checks:.2f} s of the quiet run",
            f"after / before = {after / before:.2f} (speed-up {before / after:.1f}x); "
            f"target <= {TARGET_S:.0f} s: {'ok' if after <= TARGET_S else 'MISSED on this machine now'}",
        ],
    )
    return times


def main() -> None:
    run()


if __name__ == "__main__":
    main()
