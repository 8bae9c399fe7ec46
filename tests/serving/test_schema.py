"""The schema declared once (serving._schema): the warehouse DDL, the snapshot copy and the
documentation all come from it, and an existing warehouse keeps working."""

from __future__ import annotations

import subprocess
import sys
from datetime import UTC, datetime
from pathlib import Path

import duckdb
import numpy as np
import pytest

import arlib
import serving
from pipeline import warehouse as wh
from pipeline.fit import stored_filter
from pipeline.publish import publish_snapshot
from serving import SCHEMA, SNAPSHOT_TABLES, VIEWS, update_doc
from serving._doc import views_markdown

ROOT = Path(__file__).resolve().parents[2]

# The CREATE TABLE text pipeline/warehouse.py shipped for schema version 1 before the declarations
# existed (commit fab1d34, `TABLES`), two tables shown: an existing warehouse was made with it.
OLD_DDL = {
    "connectedness": "run_id VARCHAR NOT NULL, universe VARCHAR NOT NULL, window_end DATE NOT NULL, "
    "total DOUBLE NOT NULL",
    "window_params": "run_id VARCHAR NOT NULL, universe VARCHAR NOT NULL, window_end DATE NOT NULL, "
    "lags INTEGER NOT NULL, coefs DOUBLE[] NOT NULL, intercept DOUBLE[], trend_coef DOUBLE[], "
    "sigma_u DOUBLE[] NOT NULL",
}


def _columns(con: duckdb.DuckDBPyConnection, table: str) -> list[tuple[str, str, bool]]:
    return [
        (name, dtype, nullable == "YES")
        for name, dtype, nullable in con.execute(
            "SELECT column_name, data_type, is_nullable FROM information_schema.columns "
            "WHERE table_name = ? AND table_schema = 'main' ORDER BY ordinal_position",
            [table],
        ).fetchall()
    ]


def test_a_stored_filter_from_before_the_centre_column_keeps_its_row_and_continues(tmp_path: Path) -> None:
    """`tvp_state.centre` was added after the table: an existing file gains it (NULL for the
    stored row, read back as a state in the regressors' own coordinates) without losing a value."""
    path = tmp_path / "old.duckdb"
    con = wh.connect(path)
    con.execute("ALTER TABLE tvp_state DROP COLUMN centre")  # the table as it was first shipped
    con.execute(
        "INSERT INTO tvp_state VALUES ('run-1', 'u', DATE '2024-03-01', DATE '2024-01-02', 60, 1, 'c', 0.99, "
        "0.98, 'kronecker', ['a', 'b'], [0.1, 0.2, 0.5, 0.1, 0.0, 0.3], [1, 0, 0, 0, 1, 0, 0, 0, 1], "
        "[1, 0.2, 0.2, 1], [0.5, -0.5])"
    )
    con.close()
    con = wh.connect(path)
    try:
        assert wh._schema_current(con)
        assert [c[0] for c in _columns(con, "tvp_state")][-1] == "centre"
        (row,) = wh.query(con, "SELECT * FROM tvp_state").iter_rows(named=True)
        assert row["row"] == 60 and row["centre"] is None and row["tail"] == [0.5, -0.5]
    finally:
        con.close()
    state = stored_filter(row).state
    assert state.centre is None and state.cov.shape == (3, 3)
    # an old state continues, in the coordinates it was stored in
    res = arlib.tvp_var(np.array([[0.1, 0.2], [0.0, -0.1]]), horizon=3, state=state)
    assert res.ends.tolist() == [60, 61] and res.state.centre is None


def test_warehouse_tables_are_the_declarations(tmp_path: Path) -> None:
    con = wh.connect(tmp_path / "w.duckdb")
    try:
        for t in SCHEMA:
            declared = [(c.name, c.type, not c.not_null) for c in t.columns]
            assert _columns(con, t.name) == declared, t.name
        views = {r[0] for r in con.execute(
            "SELECT table_name FROM information_schema.tables WHERE table_type = 'VIEW'").fetchall()}
        assert views == set(VIEWS)
    finally:
        con.close()


def test_old_warehouse_opens_and_publishes(tmp_path: Path) -> None:
    """A warehouse made with the shipped version-1 DDL opens, gains the views and publishes."""
    path = tmp_path / "old.duckdb"
    con = duckdb.connect(str(path))
    for name in wh.TABLES:
        con.execute(f"CREATE TABLE {name} ({OLD_DDL.get(name, wh.TABLES[name])})")
    con.execute("INSERT INTO schema_version VALUES (1, ?)", [datetime.now(UTC).replace(tzinfo=None)])
    con.execute("INSERT INTO connectedness VALUES ('run-1', 'u', DATE '2024-01-02', 12.5)")
    con.close()
    con = wh.connect(path)
    try:
        assert con.execute("SELECT total FROM connectedness").fetchall() == [(12.5,)]
        assert con.execute("SELECT count(*) FROM response_long").fetchall() == [(0,)]
        assert con.execute("SELECT count(*), max(version) FROM schema_version").fetchone() == (1, 1)
        result = publish_snapshot(con, tmp_path / "serving.duckdb")
        assert result.tables == len(SNAPSHOT_TABLES)
    finally:
        con.close()


def test_ddl_is_generated_from_the_declarations() -> None:
    for t in SCHEMA:
        for c in t.columns:
            assert c.sql() in wh.TABLES[t.name]
    assert wh.SNAPSHOT_TABLES == tuple(t.name for t in SCHEMA if t.served)
    assert set(wh.TABLES) - set(SNAPSHOT_TABLES) == {"observations", "revisions", "tvp_state", "prepared_writes"}
    assert wh.RESULT_TABLES == tuple(t.name for t in SCHEMA if t.kind == "window")


def test_docs_agree_with_the_declarations() -> None:
    """docs/warehouse.md's generated parts equal what `python -m serving` would write."""
    text = (ROOT / "docs" / "warehouse.md").read_text(encoding="utf-8")
    assert update_doc(text) == text, "docs/warehouse.md is stale: run `python -m serving`"
    for t in SCHEMA:
        row = next(line for line in text.splitlines() if line.startswith(f"| `{t.name}` |"))
        for c in t.columns:
            assert c.name in row, (t.name, c.name)
    assert views_markdown() in text


def test_the_doc_check_can_fail() -> None:
    """A doc whose generated table lost a column differs from its regenerated self."""
    text = (ROOT / "docs" / "warehouse.md").read_text(encoding="utf-8")
    stale = text.replace(", trend_coef `DOUBLE[]` (n) or NULL (only trend `ct`)", "", 1)
    assert stale != text and update_doc(stale) == text
    with pytest.raises(ValueError, match="lacks the markers of part 'views'"):
        update_doc(text.replace("<!-- generated:views end -->", ""))


def test_public_surface_is_pinned() -> None:
    assert serving.__all__ == sorted(serving.__all__, key=lambda s: (not s.isupper(), s[0].islower(), s))
    assert set(serving.__all__) == {
        "BandHistory", "BandSet", "BandSettings", "Column", "DERIVED", "DateWindow", "DecompositionSet", "Fit",
        "JointHistory", "QuantileHistory",
        "IDENTIFICATIONS", "RESULT_TABLES", "RefitMismatchError", "ResponseSet", "SCHEMA",
        "SCHEMA_VERSION", "SNAPSHOT_TABLES", "STORED", "ServingError", "Snapshot",
        "SnapshotMissingError", "SnapshotReader", "StoredArrayError", "StoredResult", "Table", "UNIVERSE_TABLES",
        "UnknownIdentificationError", "Universe", "VIEWS", "WindowError", "band_settings", "bands",
        "columns", "create_views", "ddl", "decomposition", "identification_of", "normalize_identification",
        "order_by", "parse_date", "process", "refit", "responses", "schema_markdown",
        "stored_decompositions", "stored_responses", "table", "update_doc", "write_doc",
    }


def test_serving_imports_no_orchestration_or_ui() -> None:
    """The read side stands alone: importing it pulls in no Prefect, Dash, plotly or polars."""
    code = (
        "import sys, serving; "
        "print(sorted({m.split('.')[0] for m in sys.modules} & {'prefect', 'dash', 'plotly', 'polars', 'pipeline', 'dashboard'}))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True, cwd=ROOT)
    assert out.stdout.strip() == "[]"


def test_python_m_serving_rewrites_a_stale_doc(tmp_path: Path) -> None:
    text = (ROOT / "docs" / "warehouse.md").read_text(encoding="utf-8")
    doc = tmp_path / "warehouse.md"
    doc.write_text(text.replace("| `runs` |", "| `old_runs` |"), encoding="utf-8")
    out = subprocess.run([sys.executable, "-m", "serving", str(doc)], capture_output=True, text=True, check=True, cwd=ROOT)
    assert "rewritten" in out.stdout and doc.read_text(encoding="utf-8") == text
    out = subprocess.run([sys.executable, "-m", "serving", str(doc)], capture_output=True, text=True, check=True, cwd=ROOT)
    assert "already up to date" in out.stdout
