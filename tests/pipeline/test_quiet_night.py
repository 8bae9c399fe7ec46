"""A night with nothing new ends before Prefect starts, says what it checked, and never hides work.

Real parts: the `shockflow` command (in process under the session's Prefect harness for the runs
that do work; as a subprocess with no Prefect API for the quiet one), DuckDB files, CSV files on
disk. The quiet run's process must not import Prefect at all (so it cannot start a server), nor
create the Prefect database a temporary server would write in its PREFECT_HOME.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from datetime import date
from pathlib import Path

import duckdb
import pytest
from typer.testing import CliRunner

from pipeline.config import load_config
from pipeline.quiet import fingerprints_file, quiet_night, source_fingerprint
from shockflow.cli import app
from tests.pipeline.helpers import write_config
from tests.pipeline.test_cli import CONFIG, macro_csv

TODAY = date(2026, 1, 5)


def _quiet_subprocess(config: Path, home: Path) -> tuple[dict[str, object], str]:
    """`shockflow run --json` in a fresh process with no Prefect API; (summary, stderr + modules)."""
    env = {k: v for k, v in os.environ.items() if not k.startswith("PREFECT_")}
    env.update({"PREFECT_HOME": str(home), "PYTHONPATH": str(Path(__file__).resolve().parents[2])})
    env.pop("SHOCKFLOW_CONFIG", None)
    code = (
        "import atexit, sys\n"
        "atexit.register(lambda: sys.stderr.write('prefect imported: %s\\n' % ('prefect' in sys.modules)))\n"
        "from shockflow.cli import main\n"
        "sys.argv = ['shockflow', 'run', '--config', sys.argv[1], '--json']\n"
        "main()\n"
    )
    done = subprocess.run([sys.executable, "-c", code, str(config)], env=env, capture_output=True, text=True, timeout=300, check=False)
    assert done.returncode == 0, done.stdout + done.stderr
    return json.loads(done.stdout), done.stderr


def _runs(config: Path) -> int:
    cfg = load_config(config)
    con = duckdb.connect(str(cfg.warehouse.path), read_only=True)
    try:
        row = con.execute("SELECT count(*) FROM runs").fetchone()
    finally:
        con.close()
    assert row is not None
    return int(row[0])


@pytest.mark.prefect
def test_a_quiet_night_skips_prefect_and_any_change_runs_the_flow(prefect_harness: None, tmp_path: Path) -> None:
    macro_csv(tmp_path / "macrodata.csv")
    config = write_config(tmp_path, CONFIG)
    runner = CliRunner()
    first = runner.invoke(app, ["run", "--config", str(config), "--json"])
    assert first.exit_code == 0, first.output
    doc = json.loads(first.stdout)
    assert doc["orchestrated"] is True and len(doc["flow_run_ids"]) == 2
    assert [u["status"] for u in doc["universes"]] == ["succeeded"]
    assert fingerprints_file(load_config(config)).is_file()
    runs = _runs(config)

    # nothing new: no Prefect (not even imported), no server's database, nothing written
    quiet, stderr = _quiet_subprocess(config, tmp_path / "prefect-home")
    assert "prefect imported: False" in stderr, stderr
    assert not (tmp_path / "prefect-home" / "prefect.db").exists()
    assert quiet["orchestrated"] is False and quiet["flow_run_ids"] == [] and quiet["exit_code"] == 0
    assert [(s["name"], s["status"]) for s in quiet["sources"]] == [("us_macro", "unchanged")]
    assert [(u["name"], u["status"], u["fitted"], u["reused"]) for u in quiet["universes"]] == [("us_real", "unchanged", 0, 31)]
    checked = "\n".join(quiet["checked"])
    for what in ("source us_macro", "universe us_real", "no run left running", "snapshot", "exports"):
        assert what in checked, checked
    assert _runs(config) == runs

    # a changed source file: the flow runs and records its run
    csv = tmp_path / "macrodata.csv"
    st = csv.stat()
    os.utime(csv, ns=(st.st_atime_ns, st.st_mtime_ns + 1_000_000))
    again = runner.invoke(app, ["run", "--config", str(config), "--json"])
    assert again.exit_code == 0, again.output
    doc = json.loads(again.stdout)
    assert doc["orchestrated"] is True and len(doc["flow_run_ids"]) == 2
    assert _runs(config) == runs + 1
    assert [(s["name"], s["status"]) for s in doc["sources"]] == [("us_macro", "succeeded")]  # read again
    # ... after which the night is quiet again (the new fingerprint was recorded)
    quiet, _ = _quiet_subprocess(config, tmp_path / "prefect-home")
    assert quiet["orchestrated"] is False

    # the flow forced on a quiet night: recorded in Prefect and the warehouse, the unchanged file not re-read
    forced = runner.invoke(app, ["run", "--config", str(config), "--json", "--always-flow"])
    assert forced.exit_code == 0, forced.output
    doc = json.loads(forced.stdout)
    assert doc["orchestrated"] is True and len(doc["flow_run_ids"]) == 2
    assert [(s["name"], s["status"], s["rows_read"]) for s in doc["sources"]] == [("us_macro", "unchanged", 0)]
    assert _runs(config) == runs + 2
    # --full reads every source again
    full = runner.invoke(app, ["run", "--config", str(config), "--json", "--full"])
    assert [s["status"] for s in json.loads(full.stdout)["sources"]] == ["succeeded"], full.output


def test_what_makes_a_night_busy(tmp_path: Path) -> None:
    """The check's refusals, without any run: each names its reason."""
    macro_csv(tmp_path / "macrodata.csv")
    cfg = load_config(write_config(tmp_path, CONFIG))
    summary, why = quiet_night(cfg, today=TODAY)
    assert summary is None and why == "no warehouse yet"
    summary, why = quiet_night(cfg, full=True, today=TODAY)
    assert summary is None and "--full" in why

    source = cfg.sources[0]
    before = source_fingerprint(source, today=TODAY)
    assert before is not None and before == source_fingerprint(source, today=TODAY)
    assert source_fingerprint(source, today=date(2026, 1, 6)) != before  # "today" bounds the dates read
    csv = tmp_path / "macrodata.csv"
    st = csv.stat()
    os.utime(csv, ns=(st.st_atime_ns, st.st_mtime_ns + 1))
    assert source_fingerprint(source, today=TODAY) != before  # 1 ns later is a change

    http = load_config(write_config(tmp_path, CONFIG.replace(
        'kind = "csv"\npath = "macrodata.csv"', 'kind = "http_csv"\nurl = "http://127.0.0.1:9/x.csv"'
    ), name="http.toml"))
    assert source_fingerprint(http.sources[0], today=TODAY) is None  # known only by fetching it
