"""`dashboard.serve` as ``shockflow dashboard`` runs it: gunicorn, several worker processes.

Each test starts `serve` in a child process (its own session, so the test can signal the whole
group as a terminal's Ctrl+C would) on 127.0.0.1 and a free port, over a small arlib-built snapshot
(tests/dashboard/_snapshot.py: simulated data, not market data), and talks to it over HTTP.

- it listens on loopback only and answers, with the configured number of worker processes;
- Ctrl+C (SIGINT to the process group) stops the server and every worker, exit status 0, without a
  traceback;
- with two worker processes and the serving file replaced back and forth under concurrent load
  (as the pipeline's publish does: a new file, then ``os.replace``), every answer is wholly one
  snapshot's — each worker pins a request to one file — and once the swaps end every answer shows
  the last file, and each worker process holds that file open (it noticed the replacement itself).
"""

from __future__ import annotations

import json
import os
import shutil
import signal
import threading
import time
import urllib.request
from pathlib import Path
from typing import Any

import pytest

from dashboard import DashboardError, DashboardSettings, create_app, serve
from dashboard.callbacks import asks

from ._served import PROC, Served, needs_proc, stop_all
from ._snapshot import SERIES, write_snapshot
from .conftest import read

ROOT = Path(__file__).resolve().parents[2]
UNIVERSE = "demo_four"
HORIZON = 8  # shock paths asked for (the snapshot stores 10: the stored paths, cut)

@pytest.fixture(autouse=True)
def _no_server_left() -> Any:
    """Whatever a test asserts, the servers it started end with it (their own process groups)."""
    yield
    stop_all()


def get(url: str) -> tuple[int, bytes]:
    with urllib.request.urlopen(url, timeout=30) as r:
        return r.status, r.read()


def post(base: str, body: dict[str, Any]) -> dict[str, Any]:
    req = urllib.request.Request(
        base + "_dash-update-component", data=json.dumps(body).encode(), method="POST",
        headers={"Content-Type": "application/json"},
    )  # fmt: skip
    with urllib.request.urlopen(req, timeout=60) as r:
        assert r.status == 200
        return json.loads(r.read())


@pytest.fixture(scope="module")
def small_snapshot(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return write_snapshot(tmp_path_factory.mktemp("serve") / "a.duckdb", T=260, window=120, step=20)


# -- listening, workers, stopping ----------------------------------------------------------------


def test_serve_refuses_a_port_in_use_in_one_line(small_snapshot: Path) -> None:
    import socket

    with socket.socket() as taken:
        taken.bind(("127.0.0.1", 0))
        taken.listen(1)
        port = taken.getsockname()[1]
        with pytest.raises(DashboardError) as err:
            serve(DashboardSettings(snapshot=small_snapshot), port=port)
    text = str(err.value)
    assert "\n" not in text and str(port) in text and "--port" in text


@needs_proc
def test_serve_listens_on_loopback_with_worker_processes(small_snapshot: Path) -> None:
    served = Served(small_snapshot, workers=3)
    try:
        status, page = get(served.base)
        assert status == 200 and b"shockflow" in page
        assert len(served.wait_workers(3)) == 3
        # bound to loopback only: the same port on another local address refuses
        listening = [
            line.split()
            for table in ("tcp", "tcp6")
            for line in (PROC / "net" / table).read_text().splitlines()[1:]
        ]
        local = {f[1] for f in listening if f[3] == "0A" and int(f[1].rsplit(":", 1)[1], 16) == served.port}
        assert local == {"0100007F:" + f"{served.port:04X}"}, local  # 127.0.0.1, little-endian hex
    finally:
        code = served.stop()
    assert code == 0, served.stderr
    assert "shockflow dashboard: http://127.0.0.1:" in served.stderr and "3 worker processes" in served.stderr
    assert "not financial advice" in served.stderr


@needs_proc
def test_ctrl_c_stops_the_server_and_every_worker_cleanly(small_snapshot: Path) -> None:
    served = Served(small_snapshot, workers=2)
    status, _ = get(served.base)
    assert status == 200
    assert len(served.wait_workers(2)) == 2
    os.killpg(served.proc.pid, signal.SIGINT)  # what a terminal sends the foreground group
    code = served.stop(timeout=30)
    assert code == 0, served.stderr
    assert "Traceback" not in served.stderr, served.stderr
    deadline = time.monotonic() + 10
    while served.group_alive() and time.monotonic() < deadline:
        time.sleep(0.1)
    assert not served.group_alive()
    # `serve` returned once, in the server process: a worker never returns into the caller's code
    assert served.stdout.count("serve returned") == 1, served.stdout


@needs_proc
def test_workers_leave_ctrl_c_to_the_server_process(small_snapshot: Path) -> None:
    """A worker ignores SIGINT (the master stops it with one SIGQUIT): a Ctrl+C reaching a worker
    alone neither ends it nor stops it answering."""
    served = Served(small_snapshot, workers=2)
    try:
        get(served.base)
        workers = served.wait_workers(2)
        assert len(workers) == 2
        os.kill(workers[0], signal.SIGINT)
        time.sleep(1.0)
        assert served.workers() == workers  # none ended (the master would have replaced it)
        for _ in range(6):
            assert get(served.base)[0] == 200
    finally:
        os.killpg(served.proc.pid, signal.SIGINT)
        code = served.stop(timeout=30)
    assert code == 0 and "Traceback" not in served.stderr, served.stderr


# -- per-worker pinning and reopening --------------------------------------------------------------


def _expected(path: Path) -> dict[str, Any]:
    """What a wholly-from-`path` answer holds: the index history and the newest responses."""
    import numpy as np

    history = [(d.isoformat(), t) for d, t in read(path, "SELECT window_end, total FROM connectedness WHERE universe = ? ORDER BY window_end", [UNIVERSE])]
    ((end,),) = read(path, "SELECT max(window_end) FROM window_fits WHERE universe = ? AND skip_reason IS NULL", [UNIVERSE])
    ((horizon, resp),) = read(
        path, "SELECT horizon, response FROM responses WHERE universe = ? AND window_end = ? AND identification = 'generalized'",
        [UNIVERSE, end],
    )  # fmt: skip
    n = len(SERIES)
    return {"history": history, "end": end.isoformat(), "response": np.asarray(resp).reshape(horizon + 1, n, n)}


def _source(kind: str, answer: dict[str, Any], snaps: dict[str, dict[str, Any]]) -> str | None:
    """Which snapshot an answer wholly comes from (None: neither — a mix)."""
    response = answer["response"]
    for name, snap in snaps.items():
        if kind == "index":
            rows = response['{"chart":"index","type":"chart-data"}']["data"]
            if [(r["window_end"], r["total_percent"]) for r in rows] == snap["history"]:
                return name
        else:
            rows = response['{"chart":"paths","type":"chart-data"}']["data"]
            want = snap["response"][: HORIZON + 1]
            pos = {s: i for i, s in enumerate(SERIES)}
            if (
                response["paths-note"]["children"].startswith(f"Window ending {snap['end']};")
                and len(rows) == want.size
                and all(r["window_end"] == snap["end"] for r in rows)
                and all(r["value"] == want[r["horizon"], pos[r["response"]], pos[r["shock"]]] for r in rows)
            ):
                return name
    return None


def _bodies(settings: DashboardSettings) -> dict[str, dict[str, Any]]:
    """Callback payloads built from the app's own callback map (as the browser would send them)."""
    app = create_app(settings)
    state = {"universe": UNIVERSE, "start": None, "end": None}

    def body(prefix: str, values: dict[str, Any]) -> dict[str, Any]:
        key = next(k for k in app.callback_map if k.startswith(prefix))
        spec = app.callback_map[key]
        values = {**values, **asks(values)}  # a tab's view is sent its inputs as one list

        def fill(specs: list[dict[str, Any]]) -> list[dict[str, Any]]:
            return [{"id": s["id"], "property": s["property"], "value": values.get(f"{s['id']}.{s['property']}")} for s in specs]

        outputs = []
        for part in key.strip(".").split("..."):
            cid, prop = part.rsplit(".", 1)
            outputs.append({"id": json.loads(cid) if cid.startswith("{") else cid, "property": prop})
        return {"output": key, "outputs": outputs, "inputs": fill(spec["inputs"]), "state": fill(spec["state"]),
                "changedPropIds": [next(iter(values))]}  # fmt: skip

    return {
        "index": body("..index-graph.figure", {"window-state.data": state, "stress-quantile.value": 0.9}),
        "paths": body("..paths-graph.figure", {
            "window-state.data": state, "identification.value": "generalized",
            "cholesky-ordering.value": list(SERIES), "cumulative.value": [], "horizon.value": HORIZON,
            "bands.value": "none", "views.value": "paths",
        }),
    }  # fmt: skip


def _open_files(pid: int) -> set[str]:
    out = set()
    for fd in (PROC / str(pid) / "fd").iterdir():
        try:
            out.add(os.readlink(fd))
        except OSError:
            continue
    return out


def _holds_only_current(files: set[str], serving: Path) -> bool:
    """The current serving file is open, and no replaced one (shown by Linux as "… (deleted)")."""
    return str(serving) in files and f"{serving} (deleted)" not in files


@needs_proc
def test_each_worker_pins_requests_and_reopens_a_replaced_snapshot(tmp_path: Path, small_snapshot: Path) -> None:
    # two snapshots that differ in every number and in their newest window; served last: a
    files = {
        "a": small_snapshot,
        "b": write_snapshot(tmp_path / "b.duckdb", T=300, window=120, step=20, run_id="run-B", scale=3.0),
    }
    snaps = {name: _expected(path) for name, path in files.items()}
    assert snaps["a"]["end"] != snaps["b"]["end"]
    serving = tmp_path / "serving.duckdb"
    shutil.copyfile(files["a"], serving)
    bodies = _bodies(DashboardSettings(snapshot=serving))

    def publish(name: str) -> None:  # as the pipeline publishes: a whole new file, then os.replace
        tmp = serving.with_name(f".{serving.name}.{name}.tmp")
        shutil.copyfile(files[name], tmp)
        os.replace(tmp, serving)

    served = Served(serving, workers=2)
    answers: list[tuple[str, float, dict[str, Any]]] = []
    failures: list[str] = []
    stop = threading.Event()

    def client(kind: str) -> None:
        while not stop.is_set():
            sent = time.monotonic()
            try:
                answers.append((kind, sent, post(served.base, bodies[kind])))
            except Exception as exc:  # any transport or HTTP error counts
                failures.append(f"{kind}: {exc!r}")

    threads = [threading.Thread(target=client, args=(k,), daemon=True) for k in ("index", "paths") * 3]
    try:
        for t in threads:
            t.start()
        for k in range(30):  # a → b → a … ending on a
            time.sleep(0.08)
            publish("b" if k % 2 == 0 else "a")
        last_swap = time.monotonic()
        # keep the load on until both workers have answered from the last file
        deadline = last_swap + 90
        workers = served.wait_workers(2)
        assert len(workers) == 2
        while time.monotonic() < deadline:
            time.sleep(0.2)
            held = [_open_files(pid) for pid in workers]
            if all(_holds_only_current(files_, serving) for files_ in held):
                break
        time.sleep(1.0)
    finally:
        stop.set()
        for t in threads:
            t.join(60)
        held = [_open_files(pid) for pid in served.workers()]
        code = served.stop()
    assert code == 0, served.stderr
    assert not failures, failures[:5]
    assert len(answers) >= 40, len(answers)
    sources = [(kind, sent, _source(kind, answer, snaps)) for kind, sent, answer in answers]
    mixed = [kind for kind, _, src in sources if src is None]
    assert not mixed, f"{len(mixed)} of {len(answers)} answers mix two snapshots or match neither"
    assert {src for _, _, src in sources} == {"a", "b"}
    after = [src for _, sent, src in sources if sent > last_swap + 0.05]
    assert after and set(after) == {"a"}
    # each worker process reopened the replaced file on its own: both hold the current file only
    for files_ in held:
        assert _holds_only_current(files_, serving), files_


# -- the command line ---------------------------------------------------------------------------------

CLI_CONFIG = """
[warehouse]
path = "wh.duckdb"
snapshot = "SNAPSHOT"
[dashboard]
token_env = "SHOCKFLOW_TEST_DASH_TOKEN"
[[sources]]
name = "prices"
kind = "csv"
path = "MARKETS"
layout = "wide"
[[universes]]
name = "u"
series = ["VLX_BROAD", "VLX_BANKS"]
window = 250
lags = 1
"""


def _cli_config(tmp_path: Path, snapshot: Path) -> Path:
    path = tmp_path / "dash.toml"
    path.write_text(
        CLI_CONFIG.replace("SNAPSHOT", str(snapshot)).replace("MARKETS", str(ROOT / "data_samples" / "markets_wide.csv"))
    )
    return path


def test_cli_prints_dashboard_errors_as_one_plain_line(tmp_path: Path, small_snapshot: Path) -> None:
    from typer.testing import CliRunner

    from shockflow.cli import app

    config = _cli_config(tmp_path, small_snapshot)
    # no token in the environment: listening on all interfaces is refused before anything starts
    result = CliRunner().invoke(app, ["dashboard", "--config", str(config), "--host", "0.0.0.0"], env={"SHOCKFLOW_TEST_DASH_TOKEN": ""})
    assert result.exit_code == 1, result.output
    lines = [line for line in result.output.splitlines() if line.strip()]
    assert len(lines) == 1 and lines[0].startswith("error: refusing to serve the dashboard on '0.0.0.0'"), lines
    assert "InsecureBindError" not in result.output and "Traceback" not in result.output
    bad = CliRunner().invoke(app, ["dashboard", "--config", str(config), "--workers", "0"])
    assert bad.exit_code == 1 and bad.output.startswith("error: `workers` must be a whole number"), bad.output


def test_cli_reads_the_token_from_the_environment(tmp_path: Path, small_snapshot: Path) -> None:
    """The entry point hands os.environ to the settings: with the token variable set, the open
    address passes the access check and the next check (a port already taken) is what stops it."""
    import socket

    from typer.testing import CliRunner

    from shockflow.cli import app

    config = _cli_config(tmp_path, small_snapshot)
    with socket.socket() as taken:
        taken.bind(("0.0.0.0", 0))
        taken.listen(1)
        port = taken.getsockname()[1]
        result = CliRunner().invoke(
            app, ["dashboard", "--config", str(config), "--host", "0.0.0.0", "--port", str(port)],
            env={"SHOCKFLOW_TEST_DASH_TOKEN": "s3cret-token-of-24-chars"},
        )  # fmt: skip
    assert result.exit_code == 1, result.output
    lines = [line for line in result.output.splitlines() if line.strip()]
    assert len(lines) == 1 and lines[0].startswith(f"error: cannot listen on 0.0.0.0:{port}"), lines
    assert "s3cret-token" not in result.output
