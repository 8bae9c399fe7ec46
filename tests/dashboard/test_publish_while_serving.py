"""The served dashboard keeps answering while the pipeline publishes new snapshots, and shows them.

The app runs on 127.0.0.1 (werkzeug, threads); client threads request views over HTTP without pause
while the main thread (a) publishes snapshots with the pipeline's own `publish_snapshot` (copy to a
new file, fsync, os.replace) from two working warehouses in turn, or (b) refits a universe with the
pipeline's job steps and publishes. No request may fail, and afterwards the app shows what was
published last.
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
import pytest

from dashboard import DashboardSettings, create_app

from . import _pipeline
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
        # a tab's view is sent (window state, *its inputs) as one list, its ask (dashboard.callbacks.ASK_JS)
        "inputs": [{"id": "network-ask", "property": "data", "value": [state, "mean", "to"]}],
        "changedPropIds": ["network-ask.data"],
    }


class _Clients:
    """Threads that request views from the served app without pause, counting answers and failures."""

    def __init__(self, base: str, state: dict[str, Any]) -> None:
        self.base, self.state = base, state
        self.failures: list[str] = []
        self.answered = 0
        self.stop = threading.Event()
        self.threads = [threading.Thread(target=self._run, args=(m,)) for m in (_index_body, _network_body, _index_body)]

    def _run(self, make: Any) -> None:
        while not self.stop.is_set():
            try:
                status, text = _post(self.base, make(self.state))
                if status != 200 or "could not be computed" in text or "no serving snapshot" in text:
                    self.failures.append(f"{status}: {text[:200]}")
                self.answered += 1
            except Exception as exc:  # any transport or server error counts as a failure
                self.failures.append(repr(exc))

    def __enter__(self) -> _Clients:
        for t in self.threads:
            t.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self.stop.set()
        for t in self.threads:
            t.join(30)


def _serve(snapshot: Path) -> tuple[Any, Any, threading.Thread, str]:
    from werkzeug.serving import make_server

    logging.getLogger("werkzeug").setLevel(logging.ERROR)
    app = create_app(DashboardSettings(snapshot=snapshot))
    server = make_server("127.0.0.1", 0, app.server, threaded=True)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    return app, server, thread, f"http://127.0.0.1:{server.server_port}/"


@pytest.mark.skipif(not _pipeline.available(), reason="the pipeline's job steps cannot run here")
def test_dashboard_answers_while_the_pipeline_refits_and_publishes(tmp_path: Path) -> None:
    """A full refit of a universe (warehouse writes) and the publish run beside live requests."""
    from pipeline import jobs

    snapshot, _ = _pipeline.build(tmp_path, export=False)
    config: Any = _pipeline.config_in(tmp_path)
    app, server, thread, base = _serve(snapshot)
    reader = app.server.extensions["shockflow_snapshot"].reader
    universe = config.universes[0]
    before = reader.rows("SELECT DISTINCT run_id FROM connectedness WHERE universe = ?", [universe.name])
    try:
        with _Clients(base, {"universe": universe.name, "start": None, "end": None}) as clients:
            time.sleep(0.3)
            result = jobs.run_universe(config.warehouse.path, universe, full=True)
            jobs.publish_step(config)
            time.sleep(0.3)
        assert result.status == "succeeded", result.message
        assert not clients.failures, clients.failures[:3]
        assert clients.answered > 5
        after = reader.rows("SELECT DISTINCT run_id FROM connectedness WHERE universe = ?", [universe.name])
        assert after == [(result.run_id,)] and after != before
    finally:
        server.shutdown()
        thread.join(10)
        reader.close()


def test_dashboard_answers_while_snapshots_are_published(tmp_path: Path) -> None:
    """The pipeline's publish_snapshot swaps files six times under live requests."""
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
    app, server, thread, base = _serve(serving)
    state = {"universe": "demo_four", "start": None, "end": None}
    try:
        with _Clients(base, state) as clients:
            last = warehouses[0]
            for k in range(1, 7):
                time.sleep(0.2)
                last = publish(k)
            time.sleep(0.3)
        assert not clients.failures, clients.failures[:3]
        assert clients.answered > 10
        # after the last publish the dashboard shows the last-published warehouse's index
        _, text = _post(base, _index_body(state))
        rows = json.loads(text)["response"]['{"chart":"index","type":"chart-data"}']["data"]
        want = read(last, "SELECT window_end, total FROM connectedness ORDER BY window_end")
        assert [(r["window_end"], r["total_percent"]) for r in rows] == [(d.isoformat(), t) for d, t in want]
    finally:
        server.shutdown()
        thread.join(10)
        app.server.extensions["shockflow_snapshot"].reader.close()
