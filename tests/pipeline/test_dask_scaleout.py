"""Scale-out: the nightly flow on a dask.distributed cluster of 2 workers on 127.0.0.1 stores
exactly what the in-process run stores.

The config is a reduced copy of the demo's (data_samples/demo.toml, the invented Veloria market):
the same sources and universes — fixed lag with stored bootstrap bands, lag order chosen per
window by BIC, an expanding weekly window — with a coarser window step so it runs in seconds, and
small blocks of window ends so each universe is split across both workers.

Real parts throughout: Prefect's test harness (the session's), prefect-dask's DaskTaskRunner, a
real ``distributed.LocalCluster`` with worker processes, DuckDB files. Checked: every stored table
equals the local run's (run ids and timestamps aside); only fit blocks ran on the cluster (reads,
stores and publish stay in the flow's process: one writer), on both workers; every socket of the
cluster is on 127.0.0.1; the in-process cluster of ``address = "local"`` keeps its scratch folder
beside the warehouse.
"""

from __future__ import annotations

import re
import socket
from pathlib import Path
from typing import Any

import duckdb
import pytest

from pipeline import execution
from pipeline.config import load_config

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "data_samples"
#: Windows per fit task: small, so each universe becomes several blocks spread over the workers.
BLOCK_WINDOWS = 60

#: Columns that name a run or a time, not a result: excluded from the comparison.
RUN_COLUMNS = {"run_id", "batch_id", "started", "finished", "applied", "code_version"}
#: Tables compared (every table the flow writes, except the batch bookkeeping).
COMPARED = (
    "observations",
    "runs",
    "universes",
    "universe_series",
    "prepared",
    "dropped_dates",
    "window_fits",
    "connectedness",
    "directional",
    "pairwise",
    "granger",
    "window_params",
    "responses",
    "decompositions",
)


def reduced_demo_config(folder: Path, execution_toml: str) -> Path:
    """data_samples/demo.toml with outputs in `folder`, coarser steps, and `execution_toml` added."""
    text = (DEMO / "demo.toml").read_text(encoding="utf-8")
    replacements = [
        (r'"\.\./demo_output/', '"./out/', 3),  # warehouse, snapshot, exports
        (r'path = "(\w+)\.csv"', lambda m: f'path = "{(DEMO / m.group(1)).as_posix()}.csv"', 2),  # every demo file
        (r"\nstep = 5\n", "\nstep = 25\n", 2),  # the daily universes: every 25th window end
        (r"\nstep = 1\n", "\nstep = 4\n", 1),  # the weekly one: every 4th
    ]
    for pattern, repl, count in replacements:  # `count` or more: demo universes get added
        text, n = re.subn(pattern, repl, text)
        assert n >= count, f"demo.toml changed: {pattern!r} matched {n} times, expected {count}+"
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / "demo.toml"
    path.write_text(text + "\n[execution]\n" + execution_toml + f"block_windows = {BLOCK_WINDOWS}\n", encoding="utf-8")
    return path


def stored_tables(warehouse: Path) -> dict[str, list[tuple[Any, ...]]]:
    """Every compared table's rows without run ids/timestamps, sorted (a canonical form)."""
    con = duckdb.connect(str(warehouse), read_only=True)
    try:
        out = {}
        for table in COMPARED:
            cols = [r[0] for r in con.execute(f"DESCRIBE {table}").fetchall() if r[0] not in RUN_COLUMNS]
            rows = con.execute(f"SELECT {', '.join(cols)} FROM {table}").fetchall()
            out[table] = sorted(rows, key=repr)
        return out
    finally:
        con.close()


def run_nightly(config_path: Path) -> Any:
    from pipeline import flows

    config = load_config(config_path)
    summary = flows.nightly(config, export=False)
    assert [r.status for r in summary.universes] == ["succeeded"] * len(config.universes), summary.failures
    assert summary.published and summary.exit_code == 0, summary.failures
    return summary


@pytest.fixture(scope="module")
def local_run(prefect_harness: None, tmp_path_factory: pytest.TempPathFactory) -> dict[str, list[tuple[Any, ...]]]:
    """The reduced demo run in the flow's own process (thread runner): the reference."""
    folder = tmp_path_factory.mktemp("local")
    run_nightly(reduced_demo_config(folder, 'runner = "local"\n'))
    tables = stored_tables(folder / "out" / "shockflow.duckdb")
    assert len(tables["window_fits"]) > 300, "the reduced demo should still fit hundreds of windows"
    return tables


def _host(address: str) -> str:
    return re.sub(r"^[a-z]+://", "", address).rsplit(":", 1)[0]


def assert_same_tables(got: dict[str, list[tuple[Any, ...]]], want: dict[str, list[tuple[Any, ...]]]) -> None:
    for table in COMPARED:
        assert len(got[table]) == len(want[table]), table
        # Exact: the same arlib code on the same rows and blocks, in another process.
        assert got[table] == want[table], f"{table} differs between the Dask run and the local run"


def test_demo_on_two_loopback_workers_equals_the_local_run(
    local_run: dict[str, list[tuple[Any, ...]]], tmp_path: Path
) -> None:
    from distributed import Client, LocalCluster

    # The loopback cluster the "local" address builds, with worker PROCESSES as on a real cluster
    # (inputs and results pickled across processes), started here so the test can look inside it.
    kwargs = execution.local_cluster_kwargs(tmp_path / "scratch", processes=True)
    with LocalCluster(**kwargs) as cluster, Client(cluster) as client:
        info = client.scheduler_info()
        addresses = [cluster.scheduler_address, cluster.dashboard_link]
        addresses += [a for addr, w in info["workers"].items() for a in (addr, w["nanny"])]
        assert len(info["workers"]) == 2
        for address in addresses:
            assert _host(address.removesuffix("/status")) == "127.0.0.1", address

        config_path = reduced_demo_config(tmp_path / "dask", f'runner = "dask"\naddress = "{cluster.scheduler_address}"\n')
        run_nightly(config_path)

        # What ran on the cluster: fit blocks only, on both workers.
        prefixes = client.run_on_scheduler(lambda dask_scheduler: sorted(dask_scheduler.task_prefixes))
        assert prefixes == ["fit_block_task"], prefixes
        executed = client.run(
            lambda dask_worker: sorted({e[0] for e in dask_worker.state.log if len(e) > 2 and e[2] == "executing"})
        )
    blocks_per_worker = [len(keys) for keys in executed.values()]
    universes = load_config(config_path).universes
    assert all(b > 0 for b in blocks_per_worker), executed
    assert sum(blocks_per_worker) >= len(universes) * 2  # every universe split into 2+ blocks

    assert_same_tables(stored_tables(tmp_path / "dask" / "out" / "shockflow.duckdb"), local_run)


@pytest.mark.slow
def test_address_local_starts_its_own_loopback_cluster_with_scratch_beside_the_warehouse(
    local_run: dict[str, list[tuple[Any, ...]]], tmp_path: Path
) -> None:
    config_path = reduced_demo_config(tmp_path, 'runner = "dask"\naddress = "local"\n')
    config = load_config(config_path)
    scratch = execution.scratch_folder(config)
    assert scratch.parent == config.warehouse.path.parent
    assert not scratch.exists()
    run_nightly(config_path)
    assert (scratch / "dask-scratch-space").is_dir(), "the cluster did not use the scratch folder beside the warehouse"
    assert_same_tables(stored_tables(config.warehouse.path), local_run)


def test_local_cluster_settings_bind_loopback_and_use_the_run_folder(tmp_path: Path) -> None:
    config = load_config(reduced_demo_config(tmp_path, 'runner = "dask"\naddress = "local"\n'))
    runner = execution.task_runner(config)
    kwargs = runner.cluster_kwargs
    assert kwargs["host"] == "127.0.0.1"
    assert kwargs["dashboard_address"] == "127.0.0.1:0"  # Dask's default page listens on all interfaces
    assert Path(kwargs["local_directory"]) == tmp_path / "out" / ".dask-scratch"
    assert (kwargs["n_workers"], kwargs["threads_per_worker"]) == (2, 1)


def test_unreachable_scheduler_fails_at_once_naming_the_address_and_the_fix(tmp_path: Path) -> None:
    with socket.socket() as s:  # a port nobody listens on: bind, note it, close
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    address = f"tcp://127.0.0.1:{port}"
    config = load_config(reduced_demo_config(tmp_path, f'runner = "dask"\naddress = "{address}"\n'))
    with pytest.raises(execution.ExecutionError, match=re.escape(address)) as err:
        execution.task_runner(config)
    assert "address = 'local'" in str(err.value)


def test_a_cluster_on_other_machines_needs_a_shared_prefect_server() -> None:
    remote = "tcp://192.0.2.10:8786"  # TEST-NET-1 (RFC 5737): never a real host
    with pytest.raises(execution.ExecutionError, match="PREFECT_API_URL"):
        execution.check_prefect_api(remote, None)
    execution.check_prefect_api(remote, "http://prefect.internal:4200/api")
    execution.check_prefect_api("tcp://127.0.0.1:8786", None)  # this machine: the temporary server will do
