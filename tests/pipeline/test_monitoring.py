"""What monitoring sees of a night: its version, a JSON summary, where the config comes from, the
schedule's "today", and every imported package declared.

Real parts: the `shockflow` command through typer's runner, the nightly flow under the session's
Prefect harness, CSV files on disk, pyproject.toml as written.
"""

from __future__ import annotations

import ast
import json
import re
import sys
import tomllib
from datetime import UTC, date, datetime, timedelta
from importlib.metadata import packages_distributions
from pathlib import Path

import duckdb
import pytest
from typer.testing import CliRunner

from pipeline.config import load_config
from pipeline.schedule import schedule_today, today_in
from shockflow.cli import CONFIG_ENV, app, config_path
from tests.pipeline.helpers import write_config

ROOT = Path(__file__).resolve().parents[2]
#: the packages shipped by this project (their imports are not third-party)
OWN = {"arlib", "serving", "charts", "pipeline", "dashboard", "shockflow", "data_samples", "tests", "bench"}


# -- --version -------------------------------------------------------------------------------------

def test_version_prints_the_package_version() -> None:
    from importlib.metadata import version

    result = CliRunner().invoke(app, ["--version"])
    assert result.exit_code == 0, result.output
    assert re.fullmatch(rf"shockflow {re.escape(version('shockflow'))}(\+g[0-9a-f]+)?\n", result.stdout), result.stdout


# -- the config's location -----------------------------------------------------------------------

def test_config_precedence_flag_then_environment_then_current_folder(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.chdir(tmp_path)
    flag, named = tmp_path / "flag.toml", tmp_path / "named.toml"
    assert config_path(flag, {CONFIG_ENV: str(named)}) == flag
    assert config_path(None, {CONFIG_ENV: str(named)}) == named
    with pytest.raises(Exception, match=r"no configuration file: pass --config FILE, set SHOCKFLOW_CONFIG=FILE, or put shockflow.toml"):
        config_path(None, {})
    (tmp_path / "shockflow.toml").write_text("", encoding="utf-8")
    assert config_path(None, {}) == tmp_path / "shockflow.toml"
    assert config_path(None, {CONFIG_ENV: " "}) == tmp_path / "shockflow.toml"  # empty counts as unset


def test_check_finds_the_config_through_the_environment_and_the_current_folder(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    from tests.pipeline.helpers import MINIMAL

    (tmp_path / "prices.csv").write_text("date,A,B\n2024-01-02,1,2\n", encoding="utf-8")
    write_config(tmp_path, MINIMAL, name="elsewhere.toml")
    monkeypatch.chdir(tmp_path)
    monkeypatch.delenv(CONFIG_ENV, raising=False)
    runner = CliRunner()
    missing = runner.invoke(app, ["check"])
    assert missing.exit_code == 64 and "no configuration file" in missing.output  # a usage error (EX_USAGE)
    by_env = runner.invoke(app, ["check"], env={CONFIG_ENV: str(tmp_path / "elsewhere.toml")})
    assert "sources of elsewhere.toml" in by_env.output, by_env.output
    write_config(tmp_path, MINIMAL)  # ./shockflow.toml
    local = runner.invoke(app, ["check"])
    assert "sources of shockflow.toml" in local.output, local.output


# -- "today" ------------------------------------------------------------------------------------------

def test_today_is_the_schedule_time_zones_date() -> None:
    late = datetime(2026, 3, 1, 23, 30, tzinfo=UTC)  # 23:30 UTC
    assert today_in("UTC", now=late) == date(2026, 3, 1)
    assert today_in("Pacific/Kiritimati", now=late) == date(2026, 3, 2)  # UTC+14 (IANA tzdata)
    assert today_in("America/Los_Angeles", now=datetime(2026, 3, 2, 5, 0, tzinfo=UTC)) == date(2026, 3, 1)  # UTC−8


def _zone_where_the_date_differs() -> str:
    # Kiritimati (UTC+14) and Etc/GMT+12 (UTC−12) are 26 h apart: at least one is not on the host's date
    host = date.today()
    for zone in ("Pacific/Kiritimati", "Etc/GMT+12"):
        if today_in(zone) != host:
            return zone
    raise AssertionError("unreachable: two zones 26 h apart share the host's date")


@pytest.mark.prefect
def test_the_nightly_flow_reads_sources_with_the_schedule_time_zones_today(prefect_harness: None, tmp_path: Path) -> None:
    from pipeline import flows

    zone = _zone_where_the_date_differs()
    host = date.today()
    body = (
        '[warehouse]\npath = "wh.duckdb"\nsnapshot = "serving.duckdb"\n'
        '[[sources]]\nname = "prices"\nkind = "csv"\npath = "prices.csv"\n'
        '[[universes]]\nname = "pair"\nseries = ["A", "B"]\nwindow = 40\nlags = 1\n'
        f'[schedule]\ntimezone = "{zone}"\n[export]\nformats = []\n'
    )
    config = load_config(write_config(tmp_path, body))
    zone_today = schedule_today(config)
    assert zone_today != host
    # 60 rows, the newest dated the later of the two "todays": a row after "today" is refused
    newest = max(zone_today, host)
    days = [newest - timedelta(days=59 - i) for i in range(60)]
    rows = "".join(f"{d},{100 + i + (i % 3)},{50 + 2 * i - (i % 5)}\n" for i, d in enumerate(days))
    (tmp_path / "prices.csv").write_text("date,A,B\n" + rows, encoding="utf-8")

    summary = flows.nightly(config)
    assert summary.today == zone_today
    [ingest] = summary.ingest
    if zone_today > host:  # the zone is a day ahead: its newest row is today there, not in the future
        assert ingest.status == "succeeded", ingest.message
        con = duckdb.connect(str(config.warehouse.path), read_only=True)
        try:
            assert con.execute("SELECT max(date) FROM observations").fetchone() == (zone_today,)
        finally:
            con.close()
    else:  # the zone is a day behind: the host's date is still tomorrow there
        assert ingest.status == "failed" and str(host) in (ingest.message or ""), ingest.message


# -- run --json ---------------------------------------------------------------------------------------

def test_json_summary_fields(tmp_path: Path) -> None:
    """The documented fields, from a summary built by hand (the flow fills the same object)."""
    from pipeline._summary import NightlySummary
    from pipeline.jobs import IngestResult, UniverseResult
    from shockflow.cli import summary_json

    cfg = load_config(write_config(tmp_path, '[warehouse]\npath = "wh.duckdb"\n[[sources]]\nname = "p"\nkind = "csv"\npath = "p.csv"\n'
                                   '[[universes]]\nname = "u"\nseries = ["A", "B"]\nwindow = 40\nlags = 1\n'))
    summary = NightlySummary(
        ingest=[IngestResult("p", "succeeded", 10, 2, 1, None, 0.5)],
        universes=[UniverseResult("u", "failed", "run-1", message="universe 'u': boom")],
        seconds={"ingest": 0.5, "fit": 1.0}, flow_run_ids=["a", "b"], today=date(2026, 1, 2),
    )
    doc = json.loads(json.dumps(summary_json(summary, 4.0, cfg)))
    assert set(doc) == {
        "shockflow", "config", "status", "exit_code", "today", "orchestrated", "flow_run_ids", "checked", "seconds",
        "sources", "universes", "publish", "export", "revisions", "interrupted_marked", "failures", "caution",
    }
    assert (doc["status"], doc["exit_code"], doc["today"]) == ("partial", 2, "2026-01-02")
    assert doc["seconds"] == {"total": 4.0, "stages": {"ingest": 0.5, "fit": 1.0}, "orchestration": 2.5}
    assert doc["sources"][0] == {"name": "p", "status": "succeeded", "rows_read": 10, "rows_new": 2, "rows_revised": 1,
                                 "seconds": 0.5, "message": None}
    assert doc["failures"] == ["universe 'u': boom"]
    assert "not financial advice" in doc["caution"]
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    for key in doc:
        assert f"`{key}`" in readme, f"README does not document the JSON field {key!r}"


# -- every imported package is declared -------------------------------------------------------------

def _normalise(name: str) -> str:
    return re.sub(r"[-_.]+", "-", name).lower()


def _declared() -> set[str]:
    project = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))["project"]
    specs = list(project["dependencies"])
    for extra in project.get("optional-dependencies", {}).values():
        specs += extra
    return {_normalise(re.split(r"[<>=!~\[; ]", s, maxsplit=1)[0]) for s in specs}


def _imports(folder: Path) -> dict[str, str]:
    """Top-level module → first file importing it, for every import in `folder`'s .py files."""
    found: dict[str, str] = {}
    for file in sorted(folder.rglob("*.py")):
        tree = ast.parse(file.read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            names = []
            if isinstance(node, ast.Import):
                names = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
                names = [node.module]
            for name in names:
                found.setdefault(name.split(".")[0], str(file.relative_to(ROOT)))
    return found


@pytest.mark.parametrize("package", ["arlib", "serving", "charts", "pipeline", "dashboard", "shockflow", "data_samples"])
def test_every_imported_package_is_declared_in_pyproject(package: str) -> None:
    declared = _declared()
    owners = packages_distributions()  # import name → distributions that provide it (installed)
    missing = []
    for module, where in sorted(_imports(ROOT / package).items()):
        if module in OWN or module in sys.stdlib_module_names or module == "__future__":
            continue
        dists = {_normalise(d) for d in owners.get(module, [module])}
        if not dists & declared:
            missing.append(f"{module} (imported in {where}; distribution {sorted(dists)})")
    assert not missing, "imported but not declared in pyproject.toml [project] dependencies: " + "; ".join(missing)
