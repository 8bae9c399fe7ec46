"""publish: a new snapshot file swapped in atomically; readers see the new data after a publish."""

from __future__ import annotations

from datetime import date
from pathlib import Path

import duckdb
import polars as pl
import pytest

from pipeline import warehouse as wh
from pipeline.errors import PublishError
from pipeline.publish import PublishResult, open_snapshot, publish_snapshot
from serving import VIEWS
from tests.pipeline.helpers import minimal_config


def _write_total(con: duckdb.DuckDBPyConnection, cfg_universe, total: float) -> str:
    run = wh.begin_run(con, universe="pair", config_hash="h", data_fingerprint=None, code_version="t")
    key = {"run_id": [run], "universe": ["pair"], "window_end": [date(2024, 1, 2)]}
    conn = pl.DataFrame({**key, "total": [total]})
    fits = pl.DataFrame({**key, "window_start": [date(2023, 1, 2)], "nobs": [40], "lags": [1]})
    wh.store_universe_results(
        con, run_id=run, universe=cfg_universe, tables={"window_fits": fits, "connectedness": conn}, replace_ends=None,
        prepared=pl.DataFrame({"date": [date(2024, 1, 2)], "series": ["A"], "value": [0.5]}),
        dropped=None, counts={"fitted": 1},
    )
    return run


def test_publish_swaps_atomically_and_readers_see_new_data(tmp_path: Path) -> None:
    cfg = minimal_config(tmp_path)
    u = cfg.universes[0]
    con = wh.connect(cfg.warehouse.path)
    _write_total(con, u, 10.0)
    first = publish_snapshot(con, cfg.warehouse.snapshot)
    assert first.path == cfg.warehouse.snapshot and first.rows > 0
    assert set(p.name for p in tmp_path.iterdir()) >= {"wh.duckdb", "serving.duckdb"}

    old_reader = duckdb.connect(str(cfg.warehouse.snapshot), read_only=True)
    assert old_reader.execute("SELECT total FROM connectedness").fetchall() == [(10.0,)]
    tables = {r[0] for r in old_reader.execute("SELECT table_name FROM information_schema.tables WHERE table_type = 'BASE TABLE'").fetchall()}
    assert tables == set(wh.SNAPSHOT_TABLES)  # observations and revisions stay in the warehouse
    views = {r[0] for r in old_reader.execute("SELECT table_name FROM information_schema.tables WHERE table_type = 'VIEW'").fetchall()}
    assert views == set(VIEWS)  # the long views travel with the snapshot, bound inside the file

    _write_total(con, u, 20.0)
    second = publish_snapshot(con, cfg.warehouse.snapshot)
    assert second.incremental and second.windows_synced == 1  # started from the served file
    # the reader that held the old file keeps a consistent view of it
    assert old_reader.execute("SELECT total FROM connectedness").fetchall() == [(10.0,)]
    # open_snapshot never gets DuckDB's cached instance of the old file, even while it is open
    fresh = open_snapshot(cfg.warehouse.snapshot)
    assert fresh.execute("SELECT total FROM connectedness").fetchall() == [(20.0,)]
    fresh.close()
    # while a connection to the path is open, a plain connect() would return that cached old
    # database; once it is closed, a new plain read-only connect sees the new file
    old_reader.close()
    reader = duckdb.connect(str(cfg.warehouse.snapshot), read_only=True)
    assert reader.execute("SELECT total FROM connectedness").fetchall() == [(20.0,)]
    assert reader.execute("SELECT count(*) FROM runs WHERE status = 'succeeded'").fetchall() == [(2,)]
    reader.close()
    con.close()
    leftovers = [p.name for p in tmp_path.iterdir() if p.name.endswith((".tmp", ".wal"))]
    assert leftovers == []


def test_failed_publish_leaves_served_snapshot_unchanged(tmp_path: Path) -> None:
    cfg = minimal_config(tmp_path)
    con = wh.connect(cfg.warehouse.path)
    _write_total(con, cfg.universes[0], 10.0)
    target = tmp_path / "served_dir"
    target.mkdir()
    (target / "keep.txt").write_text("x")
    with pytest.raises(PublishError, match=r"publishing the snapshot .*served_dir.* failed .*the served snapshot is unchanged"):
        publish_snapshot(con, target)  # a directory cannot be replaced by a file
    assert (target / "keep.txt").read_text() == "x"
    assert [p.name for p in tmp_path.iterdir() if p.name.endswith(".tmp")] == []
    con.close()


def test_open_snapshot_missing(tmp_path: Path) -> None:
    with pytest.raises(PublishError, match="does not exist yet; run `shockflow run"):
        open_snapshot(tmp_path / "none.duckdb")


def test_snapshot_path_with_quote(tmp_path: Path) -> None:
    cfg = minimal_config(tmp_path)
    con = wh.connect(cfg.warehouse.path)
    _write_total(con, cfg.universes[0], 1.5)
    odd = tmp_path / "it's here" / "serving.duckdb"
    publish_snapshot(con, odd)
    reader = open_snapshot(odd)
    assert reader.execute("SELECT total FROM connectedness").fetchall() == [(1.5,)]
    reader.close()
    con.close()


def test_incremental_publish_equals_a_full_copy(tmp_path: Path) -> None:
    cfg = minimal_config(tmp_path)
    u = cfg.universes[0]
    con = wh.connect(cfg.warehouse.path)
    _write_total(con, u, 10.0)
    publish_snapshot(con, cfg.warehouse.snapshot)
    _write_total(con, u, 30.0)
    inc = publish_snapshot(con, cfg.warehouse.snapshot)
    full_path = tmp_path / "full.duckdb"
    full = publish_snapshot(con, full_path, incremental=False)
    assert inc.incremental and not full.incremental and inc.rows == full.rows
    a, b = open_snapshot(cfg.warehouse.snapshot), open_snapshot(full_path)
    for table in wh.SNAPSHOT_TABLES:
        q = f"SELECT * FROM {table} ORDER BY ALL"
        assert a.execute(q).fetchall() == b.execute(q).fetchall(), table
    a.close()
    b.close()
    con.close()


def test_snapshot_of_another_schema_is_rebuilt(tmp_path: Path) -> None:
    cfg = minimal_config(tmp_path)
    con = wh.connect(cfg.warehouse.path)
    _write_total(con, cfg.universes[0], 10.0)
    other = duckdb.connect(str(cfg.warehouse.snapshot))
    other.execute("CREATE TABLE connectedness (x INTEGER)")
    other.close()
    res = publish_snapshot(con, cfg.warehouse.snapshot)
    assert not res.incremental
    reader = open_snapshot(cfg.warehouse.snapshot)
    assert reader.execute("SELECT total FROM connectedness").fetchall() == [(10.0,)]
    reader.close()
    con.close()


NIGHTS = """
[warehouse]
path = "wh.duckdb"
snapshot = "serving.duckdb"

[[sources]]
name = "prices"
kind = "csv"
path = "prices.csv"

[[universes]]
name = "trio"
series = ["S0", "S1", "S2"]
window = 40
step = 1
lags = 1
horizon = 4

[[universes]]
name = "pair"
series = ["S3", "S4"]
window = 40
step = 1
lags = 1
horizon = 4
"""


def _same_snapshots(served: Path, full: Path) -> None:
    a, b = open_snapshot(served), open_snapshot(full)
    try:
        for table in wh.SNAPSHOT_TABLES:
            q = f"SELECT * FROM {table} ORDER BY ALL"
            assert a.execute(q).fetchall() == b.execute(q).fetchall(), table
    finally:
        a.close()
        b.close()


def test_incremental_publish_copies_only_the_prepared_rows_runs_rewrote(tmp_path: Path) -> None:
    """Nights of new days, revisions, a skipped publish, a full refit and a run without a
    `prepared_writes` log: after each publish the served snapshot equals a full publish table by
    table, and the prepared rows copied are only those the runs since the last publish rewrote."""
    from pipeline import jobs
    from pipeline.config import load_config
    from tests.pipeline.helpers import simulate_prices, write_config

    cfg = load_config(write_config(tmp_path, NIGHTS))
    prices = simulate_prices(80, n=5)

    def run(frame: pl.DataFrame, *, full: tuple[str, ...] = ()) -> None:
        frame.write_csv(tmp_path / "prices.csv")
        (ingested,) = [jobs.ingest_source(cfg.warehouse.path, s) for s in cfg.sources]
        assert ingested.status == "succeeded", ingested.message
        for u in cfg.universes:
            assert jobs.run_universe(cfg.warehouse.path, u, full=u.name in full).status == "succeeded"

    def night(frame: pl.DataFrame, *, full: tuple[str, ...] = ()) -> PublishResult:
        run(frame, full=full)
        con = wh.connect(cfg.warehouse.path)
        try:
            inc = publish_snapshot(con, cfg.warehouse.snapshot)
            whole = publish_snapshot(con, tmp_path / "full.duckdb", incremental=False)
        finally:
            con.close()
        assert inc.rows == whole.rows
        _same_snapshots(cfg.warehouse.snapshot, tmp_path / "full.duckdb")
        return inc

    first = night(prices.head(70))
    assert not first.incremental  # no snapshot yet
    # one new day: its prepared row in each universe (3 + 2 series), nothing else
    inc = night(prices.head(71))
    assert inc.incremental and inc.windows_synced == 2 and inc.prepared_synced == 5
    # a revision of S1 (trio's returns on two dates) and a new day, not published (a killed run);
    # then a revision of S4 (pair) and another day: the publish follows both runs back

    def revised(days: int, *, s4: bool = True) -> pl.DataFrame:
        frame = prices.head(days).with_columns(
            pl.when(pl.col("date") == prices["date"][60]).then(pl.col("S1") * 1.01).otherwise(pl.col("S1")).alias("S1")
        )
        if s4:
            frame = frame.with_columns(
                pl.when(pl.col("date") == prices["date"][50]).then(pl.col("S4") * 0.99).otherwise(pl.col("S4")).alias("S4")
            )
        return frame

    run(revised(72, s4=False))
    inc = night(revised(73))
    # trio: returns on rows 60 and 61 revised + 2 new days; pair: rows 50, 51 revised + 2 new days
    assert inc.prepared_synced == 3 * (2 + 2) + 2 * (2 + 2)
    # a full refit of trio rewrites every one of its prepared rows
    inc = night(revised(73), full=("trio",))
    assert inc.prepared_synced == 3 * 72  # 73 prices → 72 returns
    # a run whose log is missing (as one written before the log existed): that universe whole
    run(revised(74))
    con = wh.connect(cfg.warehouse.path)
    (pair_run,) = con.execute("SELECT run_id FROM universes WHERE universe = 'pair'").fetchone() or (None,)
    con.execute("DELETE FROM prepared_writes WHERE run_id = ?", [pair_run])
    con.close()
    inc = night(revised(75))
    assert inc.prepared_synced == 3 * 2 + 2 * 74  # trio: two new days; pair: every row
