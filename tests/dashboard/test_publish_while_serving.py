"""The served dashboard keeps answering while the pipeline publishes new snapshots, and shows them.

The app runs on 127.0.0.1 (werkzeug, threads); client threads request views over HTTP without pause
while the main thread publishes snapshots with the pipeline's own `publish_snapshot` (copy to a new
file, fsync, os.replace) from two working warehouses in turn. No request may fail, and after the
last publish the page's numbers are that warehouse's.
"""

from __future__ import annotations

import json
import logging
import threading
import time
import urllib.request
from pathlib import Path
from typing import Any

import duckdb

from dashboard import DashboardSettings, create_app

from ._snapshot import write_snapshot
from .conftest import read


def _post(base: str, body: dict[str, Any]) -> tuple[int, str]:
    req = urllib.request.Request(
        base + "_dash-update-component", data=json.dumps(body).encode(), method="POST",
        headers={"Content-Type": "application/json"},
    )  # fmt: skip
    with urllib.request.urlopen(req, timeout=30) as r:
        return r.status, r.read().decode()


def _index_body(state: dict[str, Any]) -> dict[str, Any]:
    return {
        "output": '..index-graph.figure...{"chart":"index","type":"chart-data"}.data...snapshot-status.children..',
        "outputs": [
            {"id": "index-graph", "property": "figure"},
            {"id": {"chart": "index", "type": "chart-data"}, "property": "data"},
            {"id": "snapshot-status", "property": "children"},
        ],
        "inputs": [
            {"id": "window-state", "property": "data", "value": state},
            {"id": "stress-quantile", "property": "value", "value": 0.9},
        ],
        "changedPropIds": ["window-state.data"],
    }


def _network_body(state: dict[str, Any]) -> dict[str, Any]:
    return {
        "output": '..network-graph.figure...{"chart":"network","type":"chart-data"}.data...network-note.children..',
        "outputs": [
            {"id": "network-graph", "property": "figure"},
            {"id": {"chart": "network", "type": "chart-data"}, "property": "data"},
            {"id": "network-note", "property": "children"},
        ],
        "inputs": [
            {"id": "window-state", "property": "data", "value": state},
            {"id": "network-mode", "property": "value", "value": "mean"},
            {"id": "network-size", "property": "value", "value": "to"},
            {"id": "views", "property": "value", "value": "network"},
        ],
        "changedPropIds": ["window-state.data"],
    }


def test_dashboard_answers_while_snapshots_are_published(tmp_path: Path) -> None:
    from werkzeug.serving import make_server

    from pipeline.publish import publish_snapshot

    small = {"T": 300, "window": 120, "step": 10}
    warehouses = [
        write_snapshot(tmp_path / "warehouse-a.duckdb", seed=1, run_id="run-A", **small),
        write_snapshot(tmp_path / "warehouse-b.duckdb", seed=2, run_id="run-B", **small),
    ]
    serving = tmp_path / "serving.duckdb"

    def publish(k: int) -> Path:
        con = duckdb.connect(str(warehouses[k % 2]))
        try:
            publish_snapshot(con, serving)
        finally:
            con.close()
        return warehouses[k % 2]

    publish(0)
    logging.getLogger("werkzeug").setLevel(logging.ERROR)
    app = create_app(DashboardSettings(snapshot=serving))
    server = make_server("127.0.0.1", 0, app.server, threaded=True)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    base = f"http://127.0.0.1:{server.server_port}/"
    state = {"universe": "demo_four", "start": None, "end": None}
    failures: list[str] = []
    answered = [0]
    stop = threading.Event()

    def client(make: Any) -> None:
        while not stop.is_set():
            try:
                status, text = _post(base, make(state))
                if status != 200 or "could not be computed" in text or "no serving snapshot" in text:
                    failures.append(f"{status}: {text[:200]}")
                answered[0] += 1
            except Exception as exc:  # any transport or server error counts as a failure
                failures.append(repr(exc))

    clients = [threading.Thread(target=client, args=(m,)) for m in (_index_body, _network_body, _index_body)]
    for c in clients:
        c.start()
    try:
        last = warehouses[0]
        for k in range(1, 7):
            time.sleep(0.2)
            last = publish(k)
        time.sleep(0.3)
    finally:
        stop.set()
        for c in clients:
            c.join(30)
    assert not failures, failures[:3]
    assert answered[0] > 10
    # after the last publish the dashboard shows the last-published warehouse's index
    _, text = _post(base, _index_body(state))
    rows = json.loads(text)["response"]['{"chart":"index","type":"chart-data"}']["data"]
    want = read(last, "SELECT window_end, total FROM connectedness ORDER BY window_end")
    assert [(r["window_end"], r["total_percent"]) for r in rows] == [(d.isoformat(), t) for d, t in want]
    server.shutdown()
    thread.join(10)
    app.server.extensions["shockflow_snapshot"].reader.close()
