"""The one reader (serving.Snapshot): what the report's histories and the dashboard's caches give
equals the rows in the file; nobody else holds SQL against the result tables."""

from __future__ import annotations

import datetime as dt
import re
import shutil
from pathlib import Path

import duckdb
import numpy as np
import pytest

from serving import (
    SNAPSHOT_TABLES,
    DateWindow,
    Snapshot,
    SnapshotMissingError,
    StoredArrayError,
    columns,
)

ROOT = Path(__file__).resolve().parents[2]


def _rows(path: Path, sql: str, params: list | None = None) -> list[tuple]:
    con = duckdb.connect(str(path), read_only=True)
    try:
        return con.execute(sql, params or []).fetchall()
    finally:
        con.close()


def test_history_is_every_declared_column_in_order(snap: Snapshot, snapshot_path: Path) -> None:
    ends = [r[0] for r in _rows(snapshot_path, "SELECT window_end FROM window_fits WHERE universe = 'stored' ORDER BY 1")]
    as_of = ends[1]
    got = snap.history("pairwise", "stored", as_of)
    assert tuple(got.column_names) == columns("pairwise")
    want = _rows(snapshot_path, "SELECT * FROM pairwise WHERE universe = 'stored' AND window_end <= ? "
                 "ORDER BY window_end, target, source", [as_of])
    assert [tuple(r.values()) for r in got.to_pylist()] == want
    assert snap.latest_window("stored", as_of) == as_of
    assert snap.latest_window("stored", dt.date(1990, 1, 1)) is None
    assert snap.latest_fitted_window("stored") == ends[-1]
    assert snap.variants("decompositions", "stored", ends[-1]) == ["cholesky", "generalized"]
    assert snap.variants("responses", "params", ends[-1]) == []


def test_spillover_sums_are_the_stored_ones(snap: Snapshot, snapshot_path: Path) -> None:
    u = snap.universe("stored")
    rows = _rows(snapshot_path, "SELECT window_end, series, to_others, from_others, net FROM directional "
                 "WHERE universe = 'stored'")
    end = rows[0][0]
    to, frm, net = snap.spillover_sums(u, end)
    for e, s, t, f, n in rows:
        if e == end:
            i = u.series.index(s)
            assert (to[i], frm[i], net[i]) == (t, f, n)
    lo, hi = snap.date_bounds("stored")
    to_m, from_m, net_m, count = snap.spillover_sums_mean(DateWindow("stored", lo, hi), u)
    table, k = snap.pairwise_mean(DateWindow("stored", lo, hi), u)
    assert count == k == len({r[0] for r in rows})
    off = np.where(np.eye(u.n, dtype=bool), 0.0, table)
    # the mean of the stored sums is the sum of the mean table (the sums are linear in the table)
    np.testing.assert_allclose(to_m, off.sum(axis=0), rtol=1e-10)
    np.testing.assert_allclose(from_m, off.sum(axis=1), rtol=1e-10)
    np.testing.assert_allclose(net_m, to_m - from_m, rtol=1e-10, atol=1e-10)


def test_universe_carries_every_stored_setting(snap: Snapshot) -> None:
    u = snap.universe("params")
    assert u.transforms == ("log_return",) * 3 and u.config_hash == "cfg-params"
    assert u.config["bands"]["draws"] == 30 and u.trend == "c" and u.run_id == "run-test-2"
    assert u.n == 3 and hash(u)  # still hashable (the config dict is left out of the hash)


def test_missing_tables_and_malformed_arrays_are_named(snapshot_path: Path, tmp_path: Path) -> None:
    path = tmp_path / "bad.duckdb"
    shutil.copyfile(snapshot_path, path)
    con = duckdb.connect(str(path))
    con.execute("UPDATE window_params SET sigma_u = [1.0, 2.0] WHERE universe = 'params'")
    con.execute("DROP VIEW coef_long")
    con.execute("DROP TABLE granger")
    con.close()
    with Snapshot(path) as snap:
        with pytest.raises(SnapshotMissingError, match=r"lacks table\(s\) granger; it was not written"):
            snap.require(SNAPSHOT_TABLES)
        u = snap.universe("params")
        with pytest.raises(StoredArrayError, match=r"has 2 values, expected 9 for shape \(3, 3\)"):
            snap.fit(u, snap.latest_fitted_window("params"))


def test_no_sql_against_result_tables_outside_serving() -> None:
    """The dashboard and the exports read through serving: no SELECT of their own."""
    offenders = []
    for folder in ("dashboard", "pipeline/export"):
        for file in sorted((ROOT / folder).glob("*.py")):
            text = file.read_text(encoding="utf-8")
            if re.search(r"\bSELECT\b|^\s*(import|from) duckdb\b", text, re.MULTILINE):
                offenders.append(file.relative_to(ROOT).as_posix())
    assert offenders == []
