"""Warehouse: schema creation, observation upserts with revisions, run bookkeeping, result writes."""

from __future__ import annotations

from datetime import date
from pathlib import Path

import polars as pl
import pytest

from pipeline import warehouse as wh
from pipeline.errors import WarehouseError
from tests.pipeline.helpers import minimal_config


def rows(*items: tuple[str, date, float]) -> pl.DataFrame:
    return pl.DataFrame(items, schema={"series": pl.String, "date": pl.Date, "value": pl.Float64}, orient="row")


def test_schema_is_idempotent_and_versioned(tmp_path: Path) -> None:
    path = tmp_path / "w.duckdb"
    con = wh.connect(path)
    wh.ensure_schema(con)
    con.close()
    con = wh.connect(path)
    tables = {r[0] for r in con.execute("SELECT table_name FROM information_schema.tables").fetchall()}
    assert set(wh.TABLES) <= tables
    assert con.execute("SELECT count(*), max(version) FROM schema_version").fetchone() == (1, wh.SCHEMA_VERSION)
    con.close()


def test_a_current_schema_is_left_alone_and_any_difference_repaired(tmp_path: Path) -> None:
    """ensure_schema's shortcut (`_schema_current`) skips the DDL only when the DDL would change
    nothing: a missing table, a view of other code (other definition or no tag) and a missing
    view are each put back as a fresh connect makes them."""
    from serving._views import VIEWS

    path = tmp_path / "w.duckdb"
    con = wh.connect(path)

    def catalog() -> tuple[set[str], dict[str, str]]:
        tables = {r[0] for r in con.execute("SELECT table_name FROM duckdb_tables()").fetchall()}
        views = dict(con.execute("SELECT view_name, sql FROM duckdb_views() WHERE NOT internal").fetchall())
        return tables, views

    fresh = catalog()
    assert wh._schema_current(con)
    name = next(iter(VIEWS))
    for damage in (
        "DROP TABLE prepared_writes",
        f"CREATE OR REPLACE VIEW {name} AS SELECT 1 AS x",  # another definition, no tag
        f"COMMENT ON VIEW {name} IS 'other code [definition 0000000000000000]'",
        f"DROP VIEW {name}",
    ):
        con.execute(damage)
        assert not wh._schema_current(con), damage
        wh.ensure_schema(con)
        assert wh._schema_current(con) and catalog() == fresh, damage
    con.close()


def test_newer_schema_is_refused(tmp_path: Path) -> None:
    path = tmp_path / "w.duckdb"
    con = wh.connect(path)
    con.execute("INSERT INTO schema_version VALUES (99, now())")
    con.close()
    with pytest.raises(WarehouseError, match="has schema version 99, newer than this shockflow's 1"):
        wh.connect(path)


def test_not_a_duckdb_file(tmp_path: Path) -> None:
    path = tmp_path / "w.duckdb"
    path.write_text("hello, I am a text file\n" * 100)
    with pytest.raises(WarehouseError, match=r"warehouse '.*w.duckdb': opening failed"):
        wh.connect(path)


def test_read_only_missing_file(tmp_path: Path) -> None:
    with pytest.raises(WarehouseError, match="does not exist; run `shockflow run"):
        wh.connect(tmp_path / "nope.duckdb", read_only=True)


def test_upsert_inserts_then_detects_revisions(tmp_path: Path) -> None:
    con = wh.connect(tmp_path / "w.duckdb")
    b1 = wh.start_batch(con, "src")
    first = rows(("A", date(2024, 1, 2), 1.0), ("A", date(2024, 1, 3), 2.0), ("B", date(2024, 1, 2), 5.0))
    c1 = wh.upsert_observations(con, first, source="src", batch_id=b1)
    wh.finish_batch(con, b1, status="succeeded", counts=c1)
    assert (c1.rows_read, c1.rows_new, c1.rows_revised) == (3, 3, 0)

    # same rows again: nothing changes
    b2 = wh.start_batch(con, "src")
    c2 = wh.upsert_observations(con, first, source="src", batch_id=b2)
    assert (c2.rows_new, c2.rows_revised, c2.rows_unchanged) == (0, 0, 3)

    # one revised value, one new day; a row absent from the new file is kept
    b3 = wh.start_batch(con, "src")
    third = rows(("A", date(2024, 1, 3), 2.5), ("A", date(2024, 1, 4), 3.0))
    c3 = wh.upsert_observations(con, third, source="src", batch_id=b3)
    assert (c3.rows_new, c3.rows_revised) == (1, 1)
    obs = wh.query(con, "SELECT series, date, value, batch_id FROM observations ORDER BY series, date")
    assert obs["value"].to_list() == [1.0, 2.5, 3.0, 5.0]
    assert obs["batch_id"].to_list() == [b1, b3, b3, b1]
    rev = wh.query(con, "SELECT * FROM revisions")
    assert rev.rows() == [(b3, "A", date(2024, 1, 3), 2.0, 2.5)]
    # still one row per series × date
    assert con.execute("SELECT count(*) FROM (SELECT series, date FROM observations GROUP BY ALL HAVING count(*) > 1)").fetchone() == (0,)
    got = wh.read_observations(con, ["A"])
    assert got.columns == ["series", "date", "value"] and got.height == 3
    con.close()


def test_interrupted_runs_and_batches_are_marked_failed(tmp_path: Path) -> None:
    con = wh.connect(tmp_path / "w.duckdb")
    run = wh.begin_run(con, universe="u", config_hash="h", data_fingerprint=None, code_version="t")
    batch = wh.start_batch(con, "src")
    assert wh.mark_interrupted(con) == 1
    assert con.execute("SELECT status, message FROM runs WHERE run_id = ?", [run]).fetchone()[0] == "failed"
    assert con.execute("SELECT status FROM ingest_batches WHERE batch_id = ?", [batch]).fetchone() == ("failed",)
    assert wh.mark_interrupted(con) == 0
    con.close()


def _tables(run_id: str, ends: list[date], total: float) -> dict[str, pl.DataFrame]:
    n = len(ends)
    return {
        "connectedness": pl.DataFrame(
            {"run_id": [run_id] * n, "universe": ["pair"] * n, "window_end": ends, "total": [total] * n}
        ),
        "window_params": pl.DataFrame(
            {
                "run_id": [run_id] * n,
                "universe": ["pair"] * n,
                "window_end": ends,
                "lags": [1] * n,
                "coefs": [[0.1, 0.2, 0.3, 0.4]] * n,
                "intercept": [[0.0, 0.0]] * n,
                "trend_coef": pl.Series([None] * n, dtype=pl.List(pl.Float64)),
                "sigma_u": [[1.0, 0.5, 0.5, 1.0]] * n,
            }
        ),
    }


def test_store_results_replaces_windows_in_one_transaction(tmp_path: Path) -> None:
    cfg = minimal_config(tmp_path)
    u = cfg.universes[0]
    con = wh.connect(tmp_path / "w.duckdb")
    ends = [date(2024, 1, 2), date(2024, 1, 3)]
    prepared = pl.DataFrame({"date": ends, "series": ["A", "A"], "value": [0.1, None]})
    dropped = pl.DataFrame({"date": [date(2024, 1, 1)], "reason": ["holiday"]})
    r1 = wh.begin_run(con, universe="pair", config_hash=u.config_hash, data_fingerprint="f", code_version="t")
    wh.store_universe_results(
        con, run_id=r1, universe=u, tables=_tables(r1, ends, 10.0), replace_ends=None,
        prepared=prepared, dropped=dropped, counts={"fitted": 2},
    )
    # refit the second window only
    r2 = wh.begin_run(con, universe="pair", config_hash=u.config_hash, data_fingerprint="g", code_version="t")
    wh.store_universe_results(
        con, run_id=r2, universe=u, tables=_tables(r2, ends[1:], 20.0), replace_ends=ends[1:],
        prepared=prepared, dropped=dropped, counts={"fitted": 1},
    )
    got = wh.query(con, "SELECT run_id, window_end, total FROM connectedness ORDER BY window_end")
    assert got.rows() == [(r1, ends[0], 10.0), (r2, ends[1], 20.0)]
    params = wh.query(con, "SELECT coefs, trend_coef FROM window_params ORDER BY window_end")
    assert params["coefs"].to_list()[0] == [0.1, 0.2, 0.3, 0.4] and params["trend_coef"].to_list() == [None, None]
    assert con.execute("SELECT status, windows_fitted FROM runs WHERE run_id = ?", [r2]).fetchone() == ("succeeded", 1)
    assert con.execute("SELECT count(*) FROM universes").fetchone() == (1,)
    assert con.execute("SELECT series, position FROM universe_series ORDER BY position").fetchall() == [("A", 0), ("B", 1)]

    # a failure inside the transaction leaves everything as it was (and the run not succeeded)
    r3 = wh.begin_run(con, universe="pair", config_hash=u.config_hash, data_fingerprint="h", code_version="t")
    broken = _tables(r3, ends, 30.0)
    broken["connectedness"] = broken["connectedness"].with_columns(pl.lit(None, pl.Float64).alias("total"))
    with pytest.raises(WarehouseError, match=r"storing results of universe 'pair' failed"):
        wh.store_universe_results(
            con, run_id=r3, universe=u, tables=broken, replace_ends=None,
            prepared=prepared, dropped=dropped, counts={"fitted": 2},
        )
    assert wh.query(con, "SELECT run_id, window_end, total FROM connectedness ORDER BY window_end").rows() == got.rows()
    assert con.execute("SELECT status FROM runs WHERE run_id = ?", [r3]).fetchone() == ("running",)
    wh.fail_run(con, r3, "boom")
    assert con.execute("SELECT status, message FROM runs WHERE run_id = ?", [r3]).fetchone() == ("failed", "boom")
    con.close()


def test_connections_to_a_held_warehouse_skip_the_schema_check(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """The nightly job connects three times per universe while `hold` keeps the warehouse open;
    the schema was ensured by the hold, so those connections do not read the catalog again
    (common practice: the check cost ~2 ms each, 8 ms of a ~120 ms universe). Outside a hold, and
    after it ends, every connection checks (and repairs) the schema as before."""
    path = tmp_path / "wh.duckdb"
    calls: list[int] = []
    real = wh._schema_current
    monkeypatch.setattr(wh, "_schema_current", lambda con: calls.append(1) or real(con))
    with wh.hold(path):
        with wh.hold(path):  # nested holds of one file count, not toggle
            pass
        for _ in range(3):
            wh.connect(path).close()
    assert len(calls) == 1  # the outer hold's own connection only
    wh.connect(path).close()
    assert len(calls) == 2 and not wh._HELD
