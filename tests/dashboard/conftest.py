"""Fixtures for the dashboard tests: one serving snapshot per session, and helpers to read it.

`snapshot_path` is made by the real pipeline (`tests.dashboard._pipeline`: ingest, rolling fits,
publish and export over the invented demo data, the job's own steps without Prefect) whenever the
pipeline and arlib's rolling engine import; otherwise — and always for `built_snapshot_path` — by
`tests.dashboard._snapshot`, which fits the documented tables with arlib on a small simulated data
set and includes a skipped window. The header line of the pytest run says which one is in use.
"""

from __future__ import annotations

import datetime as dt
import os
from collections.abc import Iterator, Sequence
from pathlib import Path
from typing import Any

import duckdb
import pytest

from dashboard.data import Snapshot

from . import _pipeline
from ._snapshot import write_snapshot

SNAPSHOT_SOURCE = (
    "real pipeline over the demo data (tests/dashboard/_pipeline.py)"
    if _pipeline.available()
    else "arlib-built test snapshot (tests/dashboard/_snapshot.py): the pipeline cannot run here"
)


def pytest_report_header() -> str:
    return f"dashboard snapshot: {SNAPSHOT_SOURCE}"


def read(path: Path, sql: str, params: Sequence[Any] = ()) -> list[tuple[Any, ...]]:
    """Rows straight from the snapshot file, independent of the dashboard's reader."""
    con = duckdb.connect(":memory:")
    try:
        literal = str(path).replace("'", "''")
        con.execute(f"ATTACH '{literal}' AS s (READ_ONLY)")
        con.execute("USE s")
        return con.execute(sql, list(params)).fetchall()
    finally:
        con.close()


@pytest.fixture(scope="session")
def pipeline_output(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Path | None]:
    """(serving snapshot, export folder or None), made once per session."""
    folder = tmp_path_factory.mktemp("pipeline")
    if _pipeline.available():
        return _pipeline.build(folder)
    return write_snapshot(folder / "serving.duckdb"), None


@pytest.fixture(scope="session")
def snapshot_path(pipeline_output: tuple[Path, Path | None]) -> Path:
    return pipeline_output[0]


@pytest.fixture(scope="session")
def built_snapshot_path(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The arlib-built snapshot (simulated data, one skipped window), whatever the pipeline can do."""
    return write_snapshot(tmp_path_factory.mktemp("built") / "serving.duckdb")


@pytest.fixture(scope="session")
def universe_name(snapshot_path: Path) -> str:
    return str(read(snapshot_path, "SELECT min(universe) FROM universes")[0][0])


@pytest.fixture(scope="session")
def bounds(snapshot_path: Path, universe_name: str) -> tuple[dt.date, dt.date]:
    ((lo, hi),) = read(
        snapshot_path,
        "SELECT min(window_end), max(window_end) FROM window_fits WHERE universe = ?",
        [universe_name],
    )
    return lo, hi


@pytest.fixture
def snap(snapshot_path: Path) -> Iterator[Snapshot]:
    s = Snapshot(snapshot_path)
    yield s
    s.reader.close()


@pytest.fixture
def state(universe_name: str, bounds: tuple[dt.date, dt.date]) -> dict[str, str]:
    """The whole stored history of the first universe as a browser window state."""
    return {"universe": universe_name, "start": bounds[0].isoformat(), "end": bounds[1].isoformat()}


@pytest.fixture
def export_dir(tmp_path: Path) -> Path:
    """An export folder with two reports, and a secret file next to it that must never be served."""
    out = tmp_path / "exports"
    (out / "demo_four").mkdir(parents=True)
    (out / "demo_four" / "report-2024-01-02.html").write_text("<html>report one</html>")
    older = out / "demo_four" / "report-2024-01-01.html"
    older.write_text("<html>report zero</html>")
    os.utime(older, (1_600_000_000, 1_600_000_000))
    (tmp_path / "secret.txt").write_text("do not serve me")
    (out / ".hidden.html").write_text("hidden")
    return out
