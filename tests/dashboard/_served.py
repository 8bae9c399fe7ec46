"""`dashboard.serve` in a child process, as ``shockflow dashboard`` runs it, for the serve tests.

`Served(snapshot, workers, **settings)` starts `serve` (gunicorn, `workers` processes, or the default
count when None) in its own session on 127.0.0.1 and a free port; `stop()` ends it and keeps its
stdout/stderr; `stop_all()` (an autouse fixture of each test module) kills whatever a test left.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

import pytest

ROOT = Path(__file__).resolve().parents[2]
PROC = Path("/proc")
needs_proc = pytest.mark.skipif(not (PROC / "self" / "stat").exists(), reason="reads /proc (Linux)")

#: The child: `serve` with the given snapshot and workers; prints the bound port once ready.
SERVER = """
import json, sys
from dashboard import DashboardSettings, serve
def ready(running):
    print(running.server_port, flush=True)
workers = None if sys.argv[2] == "default" else int(sys.argv[2])
extra = json.loads(sys.argv[3])
serve(DashboardSettings(snapshot=sys.argv[1], port=0, **extra), workers=workers, ready=ready)
print("serve returned", flush=True)
"""


_STARTED: list[Served] = []


def stop_all() -> None:
    """Kill every server a test started and has not stopped (their own process groups)."""
    while _STARTED:
        served = _STARTED.pop()
        if served.proc.poll() is None:
            try:
                os.killpg(served.proc.pid, signal.SIGKILL)
            except ProcessLookupError:
                pass
            served.proc.wait(10)


class Served:
    """`serve` in a child process group; `base` is its URL."""

    def __init__(self, snapshot: Path, workers: int | None, **settings: Any) -> None:
        env = {**os.environ, "PYTHONPATH": str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", "")}
        self.stdout = self.stderr = ""
        self._err = tempfile.TemporaryFile(mode="w+")  # a file, so logs can never fill a pipe
        self.proc = subprocess.Popen(
            [sys.executable, "-c", SERVER, str(snapshot), "default" if workers is None else str(workers),
             json.dumps(settings)],
            stdout=subprocess.PIPE, stderr=self._err, text=True, env=env, cwd=ROOT,
            start_new_session=True,
        )  # fmt: skip
        _STARTED.append(self)
        assert self.proc.stdout is not None
        line = self.proc.stdout.readline().strip()
        if not line.isdigit():
            self.stop()
            pytest.fail(f"serve did not start: {line!r} {self.stderr[-2000:]}")
        self.port = int(line)
        self.base = f"http://127.0.0.1:{self.port}/"

    def workers(self) -> list[int]:
        """Process ids of the server's worker processes (children of the server process)."""
        out = []
        for stat in PROC.glob("[0-9]*/stat"):
            try:
                if int(stat.read_text().rsplit(")", 1)[1].split()[1]) == self.proc.pid:
                    out.append(int(stat.parent.name))
            except (OSError, ValueError, IndexError):
                continue
        return sorted(out)

    def wait_workers(self, count: int, timeout: float = 60.0) -> list[int]:
        """The worker pids once `count` of them run (they start after the address is bound)."""
        deadline = time.monotonic() + timeout
        while len(pids := self.workers()) < count and time.monotonic() < deadline:
            time.sleep(0.1)
        return pids

    def group_alive(self) -> list[int]:
        """Processes still in the server's process group (the server's session)."""
        alive = []
        for stat in PROC.glob("[0-9]*/stat"):
            try:
                fields = stat.read_text().rsplit(")", 1)[1].split()
                if int(fields[2]) == self.proc.pid and fields[0] != "Z":
                    alive.append(int(stat.parent.name))
            except (OSError, ValueError, IndexError):
                continue
        return alive

    def stop(self, sig: int = signal.SIGTERM, timeout: float = 30.0) -> int:
        if self.proc.poll() is None:
            self.proc.send_signal(sig)
            try:
                self.proc.wait(timeout)
            except subprocess.TimeoutExpired:
                os.killpg(self.proc.pid, signal.SIGKILL)  # this test's own child session
                self.proc.wait(10)
        out, _ = self.proc.communicate()
        self.stdout = out or ""
        self._err.seek(0)
        self.stderr = self._err.read()
        self._err.close()
        return int(self.proc.returncode)
