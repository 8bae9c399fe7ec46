"""Load on the served dashboard: concurrent clients posting real callback requests over loopback.

The dashboard runs as ``shockflow dashboard`` does (``dashboard.serve``: gunicorn with W worker
processes, default that of `DashboardSettings`, 2) in its own process group, on 127.0.0.1 and a
free port, over a serving snapshot. N client
threads in this process (default 20) each post to ``/_dash-update-component`` back to back, with
no pause, for D seconds (default 30) — bounded in time and in count (``--max-requests``). Each
request is a real callback payload: the callback list comes from the server's own
``/_dash-dependencies`` (what the browser reads), the values from a rotation of views (index,
shock paths in both identifications, variance shares, lead–lag, network, window comparison,
model health, own cycles, the date-window sync) over a rotation of date windows of every universe.
The on-demand bootstrap band (a deliberate "compute now" action) is left out.

Reported: requests served, throughput, latency p50/p95/p99/max (ms, request sent → whole body
read) overall and per view, and errors (transport errors, HTTP status other than 200/204, or a
view that failed: "could not be computed" in the body); the CPU seconds the server's processes
and this client process used, and the machine's load average before and after (the clients share
the machine with the server, and whatever else runs on it). Goal: zero errors and p95 < 300 ms.

    python -m bench load                       # via the bench registry (demo snapshot)
    python -m bench.load_dashboard [--snapshot FILE | --config FILE] [--clients 20] [--seconds 30]
                                   [--workers W]

Default snapshot: the demo's (``shockflow demo --no-serve`` writes demo_output/). Loopback only:
the server binds 127.0.0.1 and the clients connect there.
"""

from __future__ import annotations

import argparse
import itertools
import json
import os
import random
import signal
import statistics
import subprocess
import sys
import threading
import time
import urllib.error
import urllib.request
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

ROOT = Path(__file__).resolve().parents[1]
DEMO_SNAPSHOT = ROOT / "demo_output" / "shockflow-serving.duckdb"
HOST = "127.0.0.1"
TARGET_P95_MS = 300.0
REQUEST_TIMEOUT = 60.0

__all__ = ["LoadResult", "case", "main", "run"]

#: The server process: the CLI's serve path on 127.0.0.1:0; prints the bound port on stdout.
SERVER = """
import logging, sys
from dashboard import DashboardSettings, serve
logging.getLogger("dashboard").setLevel(logging.ERROR)
def ready(running):
    print(running.server_port, flush=True)
workers = int(sys.argv[2]) if len(sys.argv) > 2 else None
serve(DashboardSettings(snapshot=sys.argv[1], host="127.0.0.1", port=0), workers=workers, ready=ready)
"""


# -- requests ------------------------------------------------------------------------------------


def _pid(spec: dict[str, Any]) -> str:
    cid = spec["id"]
    return (
        (cid if isinstance(cid, str) else json.dumps(cid, sort_keys=True, separators=(",", ":")))
        + "."
        + spec["property"]
    )


def _outputs(key: str) -> list[dict[str, Any]]:
    out = []
    for part in key.strip(".").split("..."):
        cid, prop = part.rsplit(".", 1)
        out.append({"id": json.loads(cid) if cid.startswith("{") else cid, "property": prop})
    return out


def callback_body(
    dependencies: list[dict[str, Any]], output_prefix: str, values: dict[str, Any]
) -> bytes:
    """The JSON body the browser posts for the callback whose output key starts with `output_prefix`.

    `dependencies` is the server's ``/_dash-dependencies`` list; `values` maps "id.property" to the
    value sent (the first key is the input that changed).
    """
    spec = next(d for d in dependencies if d["output"].startswith(output_prefix))
    from dashboard.callbacks import asks

    values = {**values, **asks(values)}  # a tab's view is sent its inputs as one list

    def fill(specs: list[dict[str, Any]]) -> list[dict[str, Any]]:
        return [
            {"id": s["id"], "property": s["property"], "value": values.get(_pid(s))} for s in specs
        ]

    body = {
        "output": spec["output"], "outputs": _outputs(spec["output"]), "inputs": fill(spec["inputs"]),
        "state": fill(spec["state"]), "changedPropIds": [next(iter(values))],
    }  # fmt: skip
    return json.dumps(body).encode()


def _windows(ends: list[Any], universe: str, count: int) -> list[dict[str, str]]:
    """Date windows to rotate through: the whole history, then fifth-long ones across it."""
    out = [{"universe": universe, "start": ends[0].isoformat(), "end": ends[-1].isoformat()}]
    span = max(2, len(ends) // 5)
    for k in range(1, count):
        j = min(len(ends) - 1, span + (k * (len(ends) - span - 1)) // max(1, count - 1))
        out.append(
            {"universe": universe, "start": ends[j - span].isoformat(), "end": ends[j].isoformat()}
        )
    return out


def build_requests(
    snapshot: Path, dependencies: list[dict[str, Any]], *, windows: int = 8
) -> list[tuple[str, bytes]]:
    """(view name, body) for every view × date window of every universe in the snapshot."""
    from dashboard.data import Snapshot

    snap = Snapshot(snapshot)
    try:
        out: list[tuple[str, bytes]] = []
        for name in sorted(snap.universes()):
            u = snap.universe(name)
            series = list(u.series)
            reverse = series[::-1]
            ends = [d for d, _ in snap.index_history(name)]
            if not ends:
                continue
            for s in _windows(ends, name, windows):
                views: list[tuple[str, str, dict[str, Any]]] = [
                    ("date window (sync)", "..window-start.value", {"window-start.value": s["start"], "universe.value": name, "window-end.value": s["end"]}),
                    ("connectedness index", "..index-graph.figure", {"window-state.data": s, "stress-quantile.value": 0.9}),
                    ("shock paths, generalized", "..paths-graph.figure", {"window-state.data": s, "identification.value": "generalized", "cholesky-ordering.value": series, "cumulative.value": [], "horizon.value": u.horizon, "bands.value": "stored", "views.value": "paths"}),
                    ("shock paths, Cholesky reordered", "..paths-graph.figure", {"window-state.data": s, "identification.value": "cholesky", "cholesky-ordering.value": reverse, "cumulative.value": ["cumulative"], "horizon.value": u.horizon + 10, "bands.value": "none", "views.value": "paths"}),
                    ("variance shares", "..shares-graph.figure", {"window-state.data": s, "cholesky-ordering.value": reverse, "horizon.value": u.horizon, "views.value": "shares"}),
                    ("lead-lag", "..leadlag-graph.figure", {"window-state.data": s, "granger-level.value": u.granger_level, "views.value": "leadlag"}),
                    ("network", "..network-graph.figure", {"window-state.data": s, "network-mode.value": "mean", "network-size.value": "to", "views.value": "network"}),
                    ("compare windows", "..compare-pairs-graph.figure", {"window-state.data": s, "identification.value": "generalized", "cholesky-ordering.value": series, "horizon.value": u.horizon, "views.value": "compare"}),
                    ("model health", "..health-graph.figure", {"window-state.data": s, "near-one.value": 0.98, "views.value": "health"}),
                    ("own cycles", "..cycles-graph.figure", {"window-state.data": s, "views.value": "cycles"}),
                ]  # fmt: skip
                out.extend(
                    (view, callback_body(dependencies, prefix, values))
                    for view, prefix, values in views
                )
        if not out:
            msg = f"snapshot {snapshot} holds no fitted windows; run the pipeline first"
            raise SystemExit(msg)
        return out
    finally:
        snap.reader.close()


# -- the server ------------------------------------------------------------------------------------


class Server:
    """`dashboard.serve` in a child process on 127.0.0.1:<free port>; stopped on exit."""

    def __init__(self, snapshot: Path, workers: int | None = None) -> None:
        env = {
            **os.environ,
            "PYTHONPATH": str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""),
        }
        args = [sys.executable, "-c", SERVER, str(snapshot)]
        if workers is not None:
            args.append(str(workers))
        self.proc = subprocess.Popen(
            args, stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, text=True, env=env, cwd=ROOT,
            start_new_session=True,
        )  # fmt: skip
        assert self.proc.stdout is not None
        line = self.proc.stdout.readline().strip()
        if not line.isdigit():
            self.stop()
            msg = f"the dashboard did not start over {snapshot} (exit code {self.proc.returncode})"
            raise SystemExit(msg)
        self.base = f"http://{HOST}:{int(line)}/"

    def get_json(self, path: str) -> Any:
        with urllib.request.urlopen(self.base + path, timeout=REQUEST_TIMEOUT) as r:
            return json.loads(r.read())

    def cpu_seconds(self) -> float | None:
        """User + system CPU seconds so far of the server and its worker processes (Linux /proc;
        None elsewhere). Workers are the processes whose parent is the server."""
        total = 0
        found = False
        for stat in Path("/proc").glob("[0-9]*/stat"):
            try:
                fields = stat.read_text().rsplit(")", 1)[1].split()
            except (OSError, IndexError):
                continue  # a process that ended meanwhile
            try:
                pid, ppid = int(stat.parent.name), int(fields[1])
                if self.proc.pid in (pid, ppid):
                    total += int(fields[11]) + int(fields[12])
                    found = True
            except (ValueError, IndexError):
                continue
        return total / os.sysconf("SC_CLK_TCK") if found else None

    def stop(self) -> None:
        """SIGTERM: the server stops its workers and exits; if it hangs, its process group is killed."""
        if self.proc.poll() is None:
            self.proc.terminate()
            try:
                self.proc.wait(20)
            except subprocess.TimeoutExpired:
                try:
                    os.killpg(self.proc.pid, signal.SIGKILL)  # the server's own session
                except ProcessLookupError:
                    pass
                self.proc.wait(10)

    def __enter__(self) -> Server:
        return self

    def __exit__(self, *exc: object) -> None:
        self.stop()


# -- the load --------------------------------------------------------------------------------------


@dataclass
class LoadResult:
    """What the clients saw."""

    clients: int
    seconds: float
    think: float = 0.0
    workers: int | None = None
    server_cpu_s: float | None = None
    client_cpu_s: float | None = None
    load_before: tuple[float, float, float] | None = None
    load_after: tuple[float, float, float] | None = None
    latencies_ms: list[float] = field(default_factory=list)
    by_view: dict[str, list[float]] = field(default_factory=dict)
    errors: list[str] = field(default_factory=list)

    @property
    def served(self) -> int:
        return len(self.latencies_ms)

    def quantile(self, q: float, values: list[float] | None = None) -> float:
        data = sorted(self.latencies_ms if values is None else values)
        if not data:
            return float("nan")
        return data[min(len(data) - 1, round(q * (len(data) - 1)))]

    @property
    def ok(self) -> bool:
        return not self.errors and self.served > 0 and self.quantile(0.95) < TARGET_P95_MS


def _post(base: str, body: bytes) -> tuple[int, bytes]:
    req = urllib.request.Request(
        base + "_dash-update-component",
        data=body,
        method="POST",
        headers={"Content-Type": "application/json"},
    )
    try:
        with urllib.request.urlopen(req, timeout=REQUEST_TIMEOUT) as r:
            return r.status, r.read()
    except urllib.error.HTTPError as exc:
        return exc.code, exc.read()


def drive(
    base: str,
    requests: list[tuple[str, bytes]],
    *,
    clients: int = 20,
    seconds: float = 30.0,
    max_requests: int = 100_000,
    think: float = 0.0,
    post: Callable[[str, bytes], tuple[int, bytes]] = _post,
) -> LoadResult:
    """`clients` threads post `requests` in rotation until `seconds` or `max_requests`.

    Back to back (`think` = 0), or each client pausing `think` seconds (±50%, seeded) after each
    answer, as a person reading the chart would.
    """
    result = LoadResult(clients=clients, seconds=seconds, think=think)
    lock = threading.Lock()
    counter = itertools.count()
    deadline = time.monotonic() + seconds

    def client(k: int) -> None:
        rng = random.Random(k)
        i = k * 7  # clients start at different places of the rotation
        if think:
            time.sleep(rng.uniform(0, think))  # spread the first requests
        while time.monotonic() < deadline and next(counter) < max_requests:
            view, body = requests[i % len(requests)]
            i += 1
            t0 = time.perf_counter()
            try:
                status, data = post(base, body)
                error = None
                if status not in (200, 204):
                    error = f"{view}: HTTP {status}"
                elif b"could not be computed" in data:
                    error = f"{view}: the view failed (see the server log)"
            except Exception as exc:  # transport errors count
                error = f"{view}: {type(exc).__name__}: {exc}"
            ms = (time.perf_counter() - t0) * 1000.0
            with lock:
                if error is None:
                    result.latencies_ms.append(ms)
                    result.by_view.setdefault(view, []).append(ms)
                else:
                    result.errors.append(error)
            if think:
                time.sleep(think * rng.uniform(0.5, 1.5))

    threads = [threading.Thread(target=client, args=(k,), daemon=True) for k in range(clients)]
    t0 = time.monotonic()
    for t in threads:
        t.start()
    for t in threads:
        t.join(seconds + REQUEST_TIMEOUT + 5)
    result.seconds = time.monotonic() - t0
    return result


def _loadavg() -> tuple[float, float, float] | None:
    try:
        return os.getloadavg()
    except OSError:
        return None


def run(
    snapshot: Path,
    *,
    clients: int = 20,
    seconds: float = 30.0,
    max_requests: int = 100_000,
    paces: tuple[float, ...] = (0.0,),
    workers: int | None = None,
) -> tuple[LoadResult, list[LoadResult]]:
    """Serve `snapshot` with `workers` processes (None: the settings' default); one client visits
    every request once (cold: each worker's first answers, own-cycle fits included), then for each
    pace in `paces` (think seconds, 0 = back to back) `clients` clients load it. Returns (cold
    pass, [load per pace])."""
    if not Path(snapshot).is_file():
        msg = (
            f"no serving snapshot at {snapshot}; build the demo first: `shockflow demo --no-serve`"
        )
        raise SystemExit(msg)
    if workers is None:
        from dashboard.settings import DEFAULT_WORKERS

        workers = DEFAULT_WORKERS
    with Server(Path(snapshot), workers) as server:
        dependencies = server.get_json("_dash-dependencies")
        requests = build_requests(Path(snapshot), dependencies)
        cold = drive(server.base, requests, clients=1, seconds=3600.0, max_requests=len(requests))
        loads = []
        for think in paces:
            cpu0 = server.cpu_seconds()
            mine0 = time.process_time()
            load0 = _loadavg()
            result = drive(
                server.base,
                requests,
                clients=clients,
                seconds=seconds,
                max_requests=max_requests,
                think=think,
            )
            cpu1 = server.cpu_seconds()
            if cpu0 is not None and cpu1 is not None:
                result.server_cpu_s = cpu1 - cpu0
            result.client_cpu_s = time.process_time() - mine0
            result.workers, result.load_before, result.load_after = workers, load0, _loadavg()
            loads.append(result)
        return cold, loads


def report(result: LoadResult) -> str:
    pace = f"pausing {result.think:g} s (±50%) between requests" if result.think else "back to back"
    served = max(result.served, 1)
    lines = [
        f"{result.clients} clients, {pace}, {result.seconds:.1f} s on {HOST}, {result.workers} "
        f"server worker process(es): {result.served} requests served "
        f"({result.served / max(result.seconds, 1e-9):.1f}/s), {len(result.errors)} errors",
        "CPU: "
        + (
            f"server {result.server_cpu_s:.1f} s ({1000 * result.server_cpu_s / served:.1f} ms per request)"
            if result.server_cpu_s is not None
            else "server unknown"
        )
        + (
            f", clients {result.client_cpu_s:.1f} s ({1000 * result.client_cpu_s / served:.1f} ms per request)"
            if result.client_cpu_s is not None
            else ""
        )
        + f"; {os.cpu_count()} cores, load average "
        + (
            f"{result.load_before[0]:.2f} before, {result.load_after[0]:.2f} after (1 min)"
            if result.load_before and result.load_after
            else "unknown"
        ),
        f"latency ms: p50 {result.quantile(0.5):.0f}, p95 {result.quantile(0.95):.0f}, "
        f"p99 {result.quantile(0.99):.0f}, max {max(result.latencies_ms, default=float('nan')):.0f}"
        f"  (goal: 0 errors, p95 < {TARGET_P95_MS:.0f}) → {'met' if result.ok else 'NOT met'}",
        f"{'view':34s} {'requests':>8s} {'p50 ms':>7s} {'p95 ms':>7s}",
    ]
    for view, values in sorted(result.by_view.items()):
        lines.append(
            f"{view:34s} {len(values):8d} {statistics.median(values):7.0f} {result.quantile(0.95, values):7.0f}"
        )
    for error in dict.fromkeys(result.errors[:5]):
        lines.append(f"error: {error}")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--snapshot", type=Path, help="serving snapshot file (default: the demo's)")
    parser.add_argument(
        "--config", type=Path, help="pipeline config; its [warehouse] snapshot is served"
    )
    parser.add_argument("--clients", type=int, default=20)
    parser.add_argument(
        "--workers", type=int, default=None, help="server worker processes (default: as serve)"
    )
    parser.add_argument("--seconds", type=float, default=30.0)
    parser.add_argument("--max-requests", type=int, default=100_000)
    parser.add_argument(
        "--think", type=float, action="append",
        help="seconds each client pauses between requests; repeat for several runs (default: 0 and 1)",
    )  # fmt: skip
    args = parser.parse_args(argv)
    if not 1 <= args.clients <= 200 or not 0 < args.seconds <= 600:
        parser.error("use 1..200 clients for at most 600 s")
    if args.workers is not None and not 1 <= args.workers <= 16:
        parser.error("use 1..16 worker processes")
    if args.snapshot:
        snapshot = args.snapshot
    elif args.config:
        from pipeline.config import load_config

        snapshot = load_config(args.config).warehouse.snapshot
    else:
        snapshot = DEMO_SNAPSHOT
    paces = tuple(args.think) if args.think else (0.0, 1.0)
    cold, loads = run(
        snapshot,
        clients=args.clients,
        seconds=args.seconds,
        max_requests=args.max_requests,
        paces=paces,
        workers=args.workers,
    )
    print(f"dashboard under load — {snapshot}")
    print(
        f"first answer for each of {cold.served + len(cold.errors)} view × window requests (cold, one client): "
        f"p50 {cold.quantile(0.5):.0f} ms, p95 {cold.quantile(0.95):.0f} ms, max "
        f"{max(cold.latencies_ms, default=float('nan')):.0f} ms, {len(cold.errors)} errors"
    )
    for result in loads:
        print()
        print(report(result))
    return 0 if all(r.ok for r in loads) and not cold.errors else 1


def case() -> None:
    """Entry for ``python -m bench load`` (cases are called without arguments)."""
    main([])


if __name__ == "__main__":
    raise SystemExit(main())
