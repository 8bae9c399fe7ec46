"""Latency of every dashboard callback, as the browser sees it from the server side.

Each case POSTs to Dash's ``/_dash-update-component`` through the Flask test client — the callback,
its snapshot queries, arlib work, figure building and Dash's JSON encoding — for a rotation of date
windows over the snapshot's first universe, and reports the median and 95th percentile per callback
against the 300 ms target. The on-demand bootstrap band is listed apart: it is a deliberate
"compute now" action with a progress indicator, not a view update.

    python -m bench.dashboard_callbacks [--config FILE | --snapshot FILE] [--repeats N]

Default snapshot: the demo's (data_samples/demo.toml → demo_output/shockflow-serving.duckdb, made by
``make demo`` or ``shockflow demo --no-serve``); if it is missing, the small simulated snapshot the
dashboard tests use is built in a temporary folder (said in the output).
"""

from __future__ import annotations

import argparse
import json
import logging
import statistics
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

ROOT = Path(__file__).resolve().parents[1]
TARGET_MS = 300.0

__all__ = ["case", "main", "run"]


def _call(client: Any, app: Any, prefix: str, values: dict[str, Any]) -> float:
    """One callback request; returns milliseconds. Raises if the server answers an error."""
    key = next(k for k in app.callback_map if k.startswith(prefix))
    spec = app.callback_map[key]
    from dashboard.callbacks import asks

    values = {**values, **asks(values)}  # a tab's view is sent its inputs as one list

    def pid(s: dict[str, Any]) -> str:
        cid = s["id"]
        return (
            (
                cid
                if isinstance(cid, str)
                else json.dumps(cid, sort_keys=True, separators=(",", ":"))
            )
            + "."
            + s["property"]
        )

    def fill(specs: list[dict[str, Any]]) -> list[dict[str, Any]]:
        return [
            {"id": s["id"], "property": s["property"], "value": values.get(pid(s))} for s in specs
        ]

    outputs = []
    for part in key.strip(".").split("..."):
        cid, prop = part.rsplit(".", 1)
        outputs.append({"id": json.loads(cid) if cid.startswith("{") else cid, "property": prop})
    body = {
        "output": key, "outputs": outputs, "inputs": fill(spec["inputs"]), "state": fill(spec["state"]),
        "changedPropIds": [next(iter(values))],
    }  # fmt: skip
    t0 = time.perf_counter()
    response = client.post("/_dash-update-component", json=body)
    ms = (time.perf_counter() - t0) * 1000.0
    if response.status_code not in (200, 204):
        msg = f"{prefix}: HTTP {response.status_code}: {response.get_data(as_text=True)[:200]}"
        raise RuntimeError(msg)
    text = response.get_data(as_text=True)
    if "could not be computed" in text:
        msg = f"{prefix}: the view failed; see the server log"
        raise RuntimeError(msg)
    return ms


def _windows(snap: Any, universe: str, count: int) -> list[dict[str, str]]:
    """Date windows to rotate through: the whole history, then shorter ones ending across it."""
    ends = [d for d, _ in snap.index_history(universe)]
    out = [{"universe": universe, "start": ends[0].isoformat(), "end": ends[-1].isoformat()}]
    span = max(2, len(ends) // 5)
    for k in range(1, count):
        j = min(len(ends) - 1, span + (k * (len(ends) - span - 1)) // max(1, count - 1))
        out.append(
            {"universe": universe, "start": ends[j - span].isoformat(), "end": ends[j].isoformat()}
        )
    return out


def run(snapshot: Path, *, repeats: int = 15) -> list[dict[str, Any]]:
    """Median / p95 latency per callback (ms) over `repeats` requests each."""
    from dashboard import DashboardSettings, create_app

    logging.getLogger("dashboard").setLevel(logging.ERROR)
    app = create_app(DashboardSettings(snapshot=snapshot))
    client = app.server.test_client()
    snap = app.server.extensions["shockflow_snapshot"]
    universe = sorted(snap.universes())[0]
    u = snap.universe(universe)
    order = [*u.series[::-1]]
    states = _windows(snap, universe, repeats)
    cases: list[tuple[str, str, Any]] = [
        (
            "date window (sync)",
            "..window-start.value",
            lambda s: {
                "window-start.value": s["start"],
                "universe.value": universe,
                "window-end.value": s["end"],
            },
        ),
        (
            "connectedness index",
            "..index-graph.figure",
            lambda s: {"window-state.data": s, "stress-quantile.value": 0.9},
        ),
        (
            "shock paths, generalized",
            "..paths-graph.figure",
            lambda s: {
                "window-state.data": s,
                "identification.value": "generalized",
                "cholesky-ordering.value": list(u.series),
                "cumulative.value": [],
                "horizon.value": u.horizon,
                "bands.value": "stored",
                "views.value": "paths",
            },
        ),
        (
            "shock paths, Cholesky reordered, cumulative",
            "..paths-graph.figure",
            lambda s: {
                "window-state.data": s,
                "identification.value": "cholesky",
                "cholesky-ordering.value": order,
                "cumulative.value": ["cumulative"],
                "horizon.value": u.horizon + 10,
                "bands.value": "none",
                "views.value": "paths",
            },
        ),
        (
            "variance shares",
            "..shares-graph.figure",
            lambda s: {
                "window-state.data": s,
                "cholesky-ordering.value": order,
                "horizon.value": u.horizon,
                "views.value": "shares",
            },
        ),
        (
            "lead-lag",
            "..leadlag-graph.figure",
            lambda s: {
                "window-state.data": s,
                "granger-level.value": u.granger_level,
                "views.value": "leadlag",
            },
        ),
        (
            "network, window end",
            "..network-graph.figure",
            lambda s: {
                "window-state.data": s,
                "network-mode.value": "end",
                "network-size.value": "to",
                "views.value": "network",
            },
        ),
        (
            "network, averaged",
            "..network-graph.figure",
            lambda s: {
                "window-state.data": s,
                "network-mode.value": "mean",
                "network-size.value": "from",
                "views.value": "network",
            },
        ),
        (
            "compare windows",
            "..compare-pairs-graph.figure",
            lambda s: {
                "window-state.data": s,
                "identification.value": "generalized",
                "cholesky-ordering.value": list(u.series),
                "horizon.value": u.horizon,
                "views.value": "compare",
            },
        ),
        (
            "model health",
            "..health-graph.figure",
            lambda s: {"window-state.data": s, "near-one.value": 0.98, "views.value": "health"},
        ),
        (
            "own cycles",
            "..cycles-graph.figure",
            lambda s: {"window-state.data": s, "views.value": "cycles"},
        ),
    ]
    on_demand = (
        "shock paths + bootstrap band (on demand)",
        "..paths-graph.figure",
        lambda s: {
            "window-state.data": s,
            "identification.value": "generalized",
            "cholesky-ordering.value": list(u.series),
            "cumulative.value": [],
            "horizon.value": u.horizon,
            "bands.value": "bootstrap",
            "views.value": "paths",
        },
    )
    results = []
    for name, prefix, make in [*cases, on_demand]:
        _call(client, app, prefix, make(states[0]))  # warm (first import/compile paths)
        times = [_call(client, app, prefix, make(states[k % len(states)])) for k in range(repeats)]
        times.sort()
        results.append({
            "callback": name,
            "median_ms": statistics.median(times),
            "p95_ms": times[min(len(times) - 1, round(0.95 * (len(times) - 1)))],
            "max_ms": times[-1],
            "runs": len(times),
            "on_demand": name.endswith("(on demand)"),
        })  # fmt: skip
    snap.reader.close()
    return results


def _default_snapshot() -> tuple[Path, str]:
    demo = ROOT / "demo_output" / "shockflow-serving.duckdb"
    if demo.is_file():
        return demo, f"demo snapshot {demo}"
    sys.path.insert(0, str(ROOT))
    from tests.dashboard._snapshot import write_snapshot

    folder = Path(tempfile.mkdtemp(prefix="shockflow-bench-"))
    path = write_snapshot(folder / "serving.duckdb", T=1500, window=250, step=5)
    return (
        path,
        f"simulated 4-series test snapshot {path} (no demo snapshot found; run `make demo` first)",
    )


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument(
        "--config", type=Path, help="pipeline config; its [warehouse] snapshot is read"
    )
    parser.add_argument("--snapshot", type=Path, help="serving snapshot file")
    parser.add_argument("--repeats", type=int, default=15)
    args = parser.parse_args(argv)
    if args.snapshot:
        snapshot, label = args.snapshot, str(args.snapshot)
    elif args.config:
        from pipeline.config import load_config

        snapshot = load_config(args.config).warehouse.snapshot
        label = f"{snapshot} (from {args.config})"
    else:
        snapshot, label = _default_snapshot()
    rows = run(snapshot, repeats=args.repeats)
    print(
        f"dashboard callbacks — {label}; {args.repeats} requests each; target median < {TARGET_MS:.0f} ms"
    )
    print(f"{'callback':45s} {'median ms':>10s} {'p95 ms':>9s} {'max ms':>9s}  target")
    for r in rows:
        verdict = (
            "(on demand)" if r["on_demand"] else ("ok" if r["median_ms"] < TARGET_MS else "SLOW")
        )
        print(
            f"{r['callback']:45s} {r['median_ms']:10.1f} {r['p95_ms']:9.1f} {r['max_ms']:9.1f}  {verdict}"
        )
    slow = [r for r in rows if not r["on_demand"] and r["median_ms"] >= TARGET_MS]
    return 1 if slow else 0


def case() -> None:
    """Entry for ``python -m bench dashboard`` (the registry calls cases without arguments)."""
    main([])


if __name__ == "__main__":
    raise SystemExit(main())
