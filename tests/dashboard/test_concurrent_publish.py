"""The dashboard keeps answering, consistently, while a pipeline run in ANOTHER PROCESS writes the
working warehouse and publishes a new serving snapshot; afterwards it shows the new data.

Setup: the pipeline's job steps build a warehouse and a first snapshot ("old") from the demo data
(data_samples/, the invented Veloria market) cut at the end of 2018, with lag order 1. The app is
served by werkzeug on 127.0.0.1 (threads). Then a subprocess runs the nightly job's steps — the
same plain functions the Prefect flow orders: ingest every source, fit every universe, publish —
on the full data (six more years) with lag order 2, so every stored number changes and new windows
appear ("new"). Client threads post real callback payloads (built from Dash's callback map) without
pause before, during and after the run.

Every answer must be HTTP 200 and wholly one snapshot's: the connectedness history equal to the old
or the new snapshot's (and its note computed from those same rows, every row inside the chosen
window); the shock-path grid equal to that snapshot's stored responses at its newest window; the
date-window bounds one snapshot's. Once the run has ended, answers show the new snapshot.

A second test swaps two snapshots back and forth (the pipeline's publish, 12 times) under load
with different newest windows, so a view whose queries straddled a swap would be caught mixing
them (before the app pinned each request to one file it did, a few times in every thousand).
"""

from __future__ import annotations

import json
import logging
import os
import shutil
import subprocess
import sys
import textwrap
import threading
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np
import polars as pl

from dashboard import DashboardSettings, create_app
from dashboard.callbacks import asks

from .conftest import read

ROOT = Path(__file__).resolve().parents[2]
DATA = ROOT / "data_samples"
UNIVERSE = "cross_market"
SERIES = ["VLX_BROAD", "VLX_BANKS", "FX_VLR", "VGB_10Y"]
OLD_CUTOFF = "2018-12-31"

CONFIG = """
[warehouse]
path = "warehouse.duckdb"
snapshot = "serving.duckdb"

[[sources]]
name = "veloria_exchange"
kind = "csv"
path = "data/markets_wide.csv"
layout = "wide"

[[sources]]
name = "veloria_rates"
kind = "csv"
path = "data/rates_long.csv"
layout = "long"

[[universes]]
name = "{universe}"
series = ["VLX_BROAD", "VLX_BANKS", "FX_VLR", {{ name = "VGB_10Y", transform = "diff" }}]
transform = "log_return"
window = 250
step = 10
lags = {lags}
horizon = 8
identification = "generalized"
"""

#: The nightly job's steps, in another process (what the flow's tasks call, without Prefect).
RUN_STEPS = textwrap.dedent(
    """
    import sys
    from pipeline import jobs
    from pipeline.config import load_config

    config = load_config(sys.argv[1])
    for source in config.sources:
        r = jobs.ingest_source(config.warehouse.path, source)
        assert r.status == "succeeded", r.message
    for universe in config.universes:
        r = jobs.run_universe(config.warehouse.path, universe)
        assert r.status == "succeeded", r.message
    jobs.publish_step(config)
    """
)


def write_data(folder: Path, cutoff: str | None) -> None:
    """The demo CSVs, cut after `cutoff` (ISO date) or whole."""
    folder.mkdir(parents=True, exist_ok=True)
    for name in ("markets_wide.csv", "rates_long.csv"):
        if cutoff is None:
            shutil.copyfile(DATA / name, folder / name)
            continue
        frame = pl.read_csv(DATA / name, infer_schema_length=0)
        frame.filter(pl.col("date") <= cutoff).write_csv(folder / name)


def write_config(folder: Path, lags: int) -> Path:
    path = folder / "shockflow.toml"
    path.write_text(CONFIG.format(universe=UNIVERSE, lags=lags), encoding="utf-8")
    return path


# -- what each snapshot should answer ----------------------------------------------------------


def expected(snapshot: Path) -> dict[str, Any]:
    """The index history, bounds and newest window's responses of one snapshot file."""
    history = read(snapshot, "SELECT window_end, total FROM connectedness WHERE universe = ? ORDER BY window_end", [UNIVERSE])
    ((lo, hi),) = read(snapshot, "SELECT min(window_end), max(window_end) FROM window_fits WHERE universe = ?", [UNIVERSE])
    ((end,),) = read(
        snapshot, "SELECT max(window_end) FROM window_fits WHERE universe = ? AND skip_reason IS NULL", [UNIVERSE]
    )
    ((horizon, response),) = read(
        snapshot, "SELECT horizon, response FROM responses WHERE universe = ? AND window_end = ?", [UNIVERSE, end]
    )
    n = len(SERIES)
    return {
        "history": [(d.isoformat(), float(t)) for d, t in history],
        "bounds": (lo.isoformat(), hi.isoformat()),
        "end": end.isoformat(),
        "response": np.asarray(response).reshape(int(horizon) + 1, n, n),
    }


# -- callback requests built from Dash's own callback map --------------------------------------


def _pid(spec: dict[str, Any]) -> str:
    cid = spec["id"]
    return (cid if isinstance(cid, str) else json.dumps(cid, sort_keys=True, separators=(",", ":"))) + "." + spec["property"]


def callback_body(app: Any, output_prefix: str, values: dict[str, Any]) -> dict[str, Any]:
    """The JSON the browser posts to /_dash-update-component for the callback whose output key
    starts with `output_prefix`; `values` maps "id.property" to the value sent."""
    key = next(k for k in app.callback_map if k.startswith(output_prefix))
    spec = app.callback_map[key]
    values = {**values, **asks(values)}  # a tab's view is sent its inputs as one list
    outputs = []
    for part in key.strip(".").split("..."):
        cid, prop = part.rsplit(".", 1)
        outputs.append({"id": json.loads(cid) if cid.startswith("{") else cid, "property": prop})

    def fill(specs: list[dict[str, Any]]) -> list[dict[str, Any]]:
        return [{"id": s["id"], "property": s["property"], "value": values.get(_pid(s))} for s in specs]

    return {
        "output": key, "outputs": outputs, "inputs": fill(spec["inputs"]), "state": fill(spec["state"]),
        "changedPropIds": [next(iter(values))],
    }  # fmt: skip


def post(base: str, body: dict[str, Any]) -> tuple[int, dict[str, Any]]:
    import urllib.request

    req = urllib.request.Request(
        base + "_dash-update-component", data=json.dumps(body).encode(), method="POST",
        headers={"Content-Type": "application/json"},
    )  # fmt: skip
    with urllib.request.urlopen(req, timeout=60) as r:
        return r.status, json.loads(r.read())


# -- consistency checks: which snapshot an answer comes from (None: neither, i.e. mixed) ---------


def index_source(answer: dict[str, Any], snaps: dict[str, dict[str, Any]]) -> str | None:
    rows = answer["response"]['{"chart":"index","type":"chart-data"}']["data"]
    note = answer["response"]["snapshot-status"]["children"]
    got = [(r["window_end"], r["total_percent"]) for r in rows]
    totals = [t for _, t in got]
    inside = [r["total_percent"] for r in rows if r["in_date_window"]]
    # the note is computed from the same rows (same window, same history) — callbacks.index_view
    consistent = (
        len(inside) == len(rows)
        and f"({float(np.quantile(totals, 0.9)):.1f}%)" in note
        and f"mean {np.mean(inside):.1f}%, max {np.max(inside):.1f}%" in note
    )
    for name, snap in snaps.items():
        if got == snap["history"] and consistent:
            return name
    return None


def paths_source(answer: dict[str, Any], snaps: dict[str, dict[str, Any]]) -> str | None:
    rows = answer["response"]['{"chart":"paths","type":"chart-data"}']["data"]
    note = answer["response"]["paths-note"]["children"]
    pos = {s: i for i, s in enumerate(SERIES)}
    for name, snap in snaps.items():
        want = snap["response"]
        if (
            note.startswith(f"Window ending {snap['end']};")
            and len(rows) == want.size
            and all(r["window_end"] == snap["end"] for r in rows)
            and all(r["value"] == want[r["horizon"], pos[r["response"]], pos[r["shock"]]] for r in rows)
        ):
            return name
    return None


def window_source(answer: dict[str, Any], snaps: dict[str, dict[str, Any]]) -> str | None:
    resp = answer["response"]
    got = (resp["window-start"]["value"], resp["window-end"]["value"])
    state = resp["window-state"]["data"]
    for name, snap in snaps.items():
        if got == snap["bounds"] and (state["start"], state["end"]) == got:
            return name
    return None


def build_old(folder: Path, *, lags: int, cutoff: str = OLD_CUTOFF) -> Any:
    """Warehouse + snapshot from the data cut at `cutoff`, made by the job's steps in-process."""
    from pipeline import jobs
    from pipeline.config import load_config

    write_data(folder / "data", cutoff)
    config = load_config(write_config(folder, lags=lags))
    for source in config.sources:
        assert jobs.ingest_source(config.warehouse.path, source).status == "succeeded"
    assert jobs.run_universe(config.warehouse.path, config.universes[0]).status == "succeeded"
    jobs.publish_step(config)
    return config


def wait_for_each_kind(answers: list[tuple[str, float, float, Any]], *, since: float, timeout: float = 120.0) -> None:
    """Block until every request kind has an answer to a request sent after `since` (monotonic)."""
    deadline = time.monotonic() + timeout
    while {a[0] for a in list(answers) if a[1] > since} != {"index", "paths", "window"}:
        assert time.monotonic() < deadline, "the dashboard stopped answering"
        time.sleep(0.05)


def test_dashboard_answers_consistently_while_another_process_runs_and_publishes(tmp_path: Path) -> None:
    from werkzeug.serving import make_server

    # the old snapshot: data to 2018, lag 1, built with the job's steps in this process
    config = build_old(tmp_path, lags=1)
    serving = config.warehouse.snapshot
    old_copy = tmp_path / "old-snapshot.duckdb"
    shutil.copyfile(serving, old_copy)
    snaps = {"old": expected(old_copy)}

    logging.getLogger("werkzeug").setLevel(logging.ERROR)
    app = create_app(DashboardSettings(snapshot=serving))
    server = make_server("127.0.0.1", 0, app.server, threaded=True)
    serving_thread = threading.Thread(target=server.serve_forever, daemon=True)
    serving_thread.start()
    base = f"http://127.0.0.1:{server.server_port}/"

    state = {"universe": UNIVERSE, "start": None, "end": None}
    requests: dict[str, tuple[dict[str, Any], Callable[..., str | None]]] = {
        "index": (
            callback_body(app, "..index-graph.figure", {"window-state.data": state, "stress-quantile.value": 0.9}),
            index_source,
        ),
        "paths": (
            callback_body(app, "..paths-graph.figure", {
                "window-state.data": state, "identification.value": "generalized",
                "cholesky-ordering.value": SERIES, "cumulative.value": [], "horizon.value": 8,
                "bands.value": "none", "views.value": "paths",
            }),
            paths_source,
        ),
        "window": (
            callback_body(app, "..window-start.value", {"universe.value": UNIVERSE, "window-start.value": None, "window-end.value": None}),
            window_source,
        ),
    }
    answers: list[tuple[str, float, float, dict[str, Any]]] = []  # (kind, sent, received, json)
    failures: list[str] = []
    stop = threading.Event()

    def client(kind: str) -> None:
        body = requests[kind][0]
        while not stop.is_set():
            sent = time.monotonic()
            try:
                status, answer = post(base, body)
            except Exception as exc:  # transport errors and HTTP errors both count
                failures.append(f"{kind}: {exc!r}")
                continue
            if status != 200:
                failures.append(f"{kind}: HTTP {status}")
            answers.append((kind, sent, time.monotonic(), answer))

    clients = [threading.Thread(target=client, args=(k,), daemon=True) for k in ("index", "paths", "window", "index")]
    try:
        for c in clients:
            c.start()
        wait_for_each_kind(answers, since=0.0)  # every kind answered before the run starts
        # the new run, in another process: full data, lag order 2 (every window refitted, new ones added)
        write_data(tmp_path / "data", None)
        write_config(tmp_path, lags=2)
        env = {**os.environ, "PYTHONPATH": str(ROOT)}
        run_started = time.monotonic()
        proc = subprocess.run(
            [sys.executable, "-c", RUN_STEPS, str(tmp_path / "shockflow.toml")],
            cwd=tmp_path, env=env, capture_output=True, text=True, timeout=300,
        )  # fmt: skip
        run_ended = time.monotonic()
        assert proc.returncode == 0, proc.stderr[-2000:]
        wait_for_each_kind(answers, since=run_ended)  # and again after it ended
    finally:
        stop.set()
        for c in clients:
            c.join(60)
        server.shutdown()
        serving_thread.join(10)
        app.server.extensions["shockflow_snapshot"].reader.close()

    snaps["new"] = expected(serving)
    assert snaps["new"]["history"] != snaps["old"]["history"]
    assert snaps["new"]["bounds"][1] > snaps["old"]["bounds"][1]
    assert not failures, failures[:5]

    during = [a for a in answers if a[1] >= run_started and a[2] <= run_ended]
    after = [a for a in answers if a[1] > run_ended]
    assert len(during) >= 10, f"only {len(during)} answers while the run wrote and published"
    assert {a[0] for a in after} == {"index", "paths", "window"}, "too few answers after the run"

    sources = [(kind, sent, requests[kind][1](answer, snaps)) for kind, sent, _, answer in answers]
    mixed = [(kind, sent) for kind, sent, src in sources if src is None]
    assert not mixed, f"{len(mixed)} answers are neither wholly old nor wholly new: {mixed[:5]}"
    before_run = {src for kind, sent, src in sources if sent < run_started}
    assert before_run == {"old"}
    assert {src for kind, sent, src in sources if sent > run_ended} == {"new"}
    # and the old snapshot kept being served while the working warehouse was written
    assert any(src == "old" for kind, sent, src in sources if run_started <= sent <= run_ended)


def test_every_answer_is_one_snapshot_while_snapshots_swap_back_and_forth(tmp_path: Path) -> None:
    """Many swaps under load: a view whose queries straddle a swap would mix two files."""
    from werkzeug.serving import make_server

    # a: data to 2018, lag 1; b: a year more, lag 2 — every shared window differs, and b has more
    configs = [build_old(tmp_path / "a", lags=1), build_old(tmp_path / "b", lags=2, cutoff="2019-12-31")]
    files = [c.warehouse.snapshot for c in configs]
    snaps = {"a": expected(files[0]), "b": expected(files[1])}
    assert snaps["a"]["end"] < snaps["b"]["end"]
    serving = tmp_path / "serving.duckdb"
    shutil.copyfile(files[0], serving)

    logging.getLogger("werkzeug").setLevel(logging.ERROR)
    app = create_app(DashboardSettings(snapshot=serving))
    server = make_server("127.0.0.1", 0, app.server, threaded=True)
    serving_thread = threading.Thread(target=server.serve_forever, daemon=True)
    serving_thread.start()
    base = f"http://127.0.0.1:{server.server_port}/"
    state = {"universe": UNIVERSE, "start": None, "end": None}
    bodies = {
        "index": callback_body(app, "..index-graph.figure", {"window-state.data": state, "stress-quantile.value": 0.9}),
        "paths": callback_body(app, "..paths-graph.figure", {
            "window-state.data": state, "identification.value": "generalized",
            "cholesky-ordering.value": SERIES, "cumulative.value": [], "horizon.value": 8,
            "bands.value": "none", "views.value": "paths",
        }),
    }  # fmt: skip
    checks = {"index": index_source, "paths": paths_source}
    answers: list[tuple[str, dict[str, Any]]] = []
    failures: list[str] = []
    stop = threading.Event()

    def client(kind: str) -> None:
        while not stop.is_set():
            try:
                status, answer = post(base, bodies[kind])
            except Exception as exc:
                failures.append(f"{kind}: {exc!r}")
                continue
            if status != 200:
                failures.append(f"{kind}: HTTP {status}")
            answers.append((kind, answer))

    clients = [threading.Thread(target=client, args=(k,), daemon=True) for k in ("index", "paths", "paths", "index")]
    swaps = 0
    try:
        for c in clients:
            c.start()
        for swaps in range(1, 13):  # the pipeline's publish (copy to a new file, os.replace), b ↔ a
            _publish(configs[swaps % 2], serving)
            time.sleep(0.05)
    finally:
        stop.set()
        for c in clients:
            c.join(60)
        server.shutdown()
        serving_thread.join(10)
        app.server.extensions["shockflow_snapshot"].reader.close()
    assert not failures, failures[:5]
    assert len(answers) >= 100, len(answers)
    mixed = [kind for kind, answer in answers if checks[kind](answer, snaps) is None]
    assert not mixed, f"{len(mixed)} of {len(answers)} answers mix two snapshots ({swaps} swaps)"


def _publish(config: Any, serving: Path) -> None:
    import duckdb

    from pipeline.publish import publish_snapshot

    con = duckdb.connect(str(config.warehouse.path))
    try:
        publish_snapshot(con, serving)
    finally:
        con.close()
