"""Fixtures for the serving tests: small hand-built snapshots (tests/pipeline's builder, which fills
every table from the schema declarations with arlib's single-window results on invented data)."""

from __future__ import annotations

from pathlib import Path

import duckdb
import pytest

from serving import Snapshot, create_views
from tests.pipeline.test_export_snapshot_builder import build_snapshot

#: Two universes: one that stored its arrays (with bootstrap bands), one that kept only parameters.
UNIVERSES = {
    "stored": {"T": 170, "window": 120, "step": 10, "draws": 5, "identification": "generalized"},
    "params": {"T": 150, "window": 120, "step": 15, "store_arrays": False, "draws": 30, "seed": 9,
               "run_id": "run-test-2"},
}


@pytest.fixture(scope="session")
def snapshot_path(tmp_path_factory: pytest.TempPathFactory) -> Path:
    path = build_snapshot(tmp_path_factory.mktemp("serving") / "serving.duckdb", UNIVERSES)
    con = duckdb.connect(str(path))
    try:
        create_views(con)  # as publish does in every snapshot
    finally:
        con.close()
    return path


@pytest.fixture
def snap(snapshot_path: Path) -> Snapshot:
    s = Snapshot(snapshot_path)
    yield s
    s.close()
