"""Snapshot queries: each answer equals what the file holds, read-only, reopened after a replace."""

from __future__ import annotations

import datetime as dt
import os
import threading
from pathlib import Path

import duckdb
import numpy as np
import pytest

from dashboard import SnapshotMissingError, WindowError
from dashboard.data import DateWindow, Snapshot, SnapshotReader, parse_date

from ._snapshot import write_snapshot
from .conftest import read


def test_universes_follow_stored_series_order(snap: Snapshot, snapshot_path: Path, universe_name: str) -> None:
    u = snap.universe(universe_name)
    stored = read(
        snapshot_path,
        "SELECT series FROM universe_series WHERE universe = ? ORDER BY position",
        [universe_name],
    )
    assert u.series == tuple(r[0] for r in stored)
    ((horizon, level),) = read(
        snapshot_path, "SELECT horizon, granger_level FROM universes WHERE universe = ?", [universe_name]
    )
    assert (u.horizon, u.granger_level) == (horizon, level)


def test_window_is_inclusive_and_clamped(snap: Snapshot, universe_name: str, bounds: tuple[dt.date, dt.date]) -> None:
    lo, hi = bounds
    w = snap.window({"universe": universe_name, "start": "1900-01-01", "end": "2999-12-31"})
    assert (w.start, w.end) == (lo, hi)
    # reversed dates are put in order
    w = snap.window({"universe": universe_name, "start": hi.isoformat(), "end": lo.isoformat()})
    assert (w.start, w.end) == (lo, hi)
    rows = snap.index_in(DateWindow(universe_name, lo, lo))
    assert [r[0] for r in rows] == [lo]


def test_index_in_window_matches_file(snap: Snapshot, snapshot_path: Path, universe_name: str, bounds: tuple[dt.date, dt.date]) -> None:
    lo, hi = bounds
    mid = lo + (hi - lo) / 2
    got = snap.index_in(DateWindow(universe_name, lo, mid))
    want = read(
        snapshot_path,
        "SELECT window_end, total FROM connectedness WHERE universe = ? AND window_end <= ? "
        "ORDER BY window_end",
        [universe_name, mid],
    )
    assert got == want and len(got) > 3


def test_fitted_end_skips_skipped_windows(built_snapshot_path: Path) -> None:
    snap = Snapshot(built_snapshot_path)
    universe_name = "demo_four"
    skipped = read(
        built_snapshot_path,
        "SELECT window_end FROM window_fits WHERE universe = ? AND skip_reason IS NOT NULL",
        [universe_name],
    )
    assert skipped, "the test snapshot holds a skipped window"
    end = skipped[0][0]
    w = DateWindow(universe_name, end - dt.timedelta(days=400), end)
    got = snap.fitted_end(w)
    assert got < end
    with pytest.raises(WindowError, match="no fitted window"):
        snap.fitted_end(DateWindow(universe_name, end, end))


def test_arrays_restored_in_c_order(snap: Snapshot, snapshot_path: Path, universe_name: str, bounds: tuple[dt.date, dt.date]) -> None:
    u = snap.universe(universe_name)
    n = len(u.series)
    end = snap.fitted_end(DateWindow(universe_name, *bounds))
    fit = snap.fit(u, end)
    ((lags, coefs, sigma),) = read(
        snapshot_path,
        "SELECT lags, coefs, sigma_u FROM window_params WHERE universe = ? AND window_end = ?",
        [universe_name, end],
    )
    assert fit.coefs.shape == (lags, n, n)
    # C order: coefs[l, i, j] is element l*n*n + i*n + j of the flat list
    assert fit.coefs[0, 1, 0] == coefs[1 * n + 0]
    assert fit.coefs[0, 0, 1] == coefs[0 * n + 1]
    np.testing.assert_array_equal(fit.sigma_u, np.asarray(sigma).reshape(n, n))
    stored = snap.responses(u, end, "generalized")
    assert stored is not None
    resp, lower, upper, _ = stored
    assert lower is not None and upper is not None and lower.shape == upper.shape == resp.shape
    assert resp.shape[1:] == (n, n)
    assert not resp.flags.writeable


def test_refit_on_prepared_rows_reproduces_stored_model(snap: Snapshot, universe_name: str, bounds: tuple[dt.date, dt.date]) -> None:
    """The prepared rows of a window are exactly what its fit used (the bootstrap relies on it)."""
    import arlib

    u = snap.universe(universe_name)
    end = snap.fitted_end(DateWindow(universe_name, *bounds))
    fit = snap.fit(u, end)
    y = snap.prepared(u, fit.window_start, fit.window_end)
    refit = arlib.fit_var(y, fit.lags, trend=u.trend, names=u.series)
    np.testing.assert_allclose(refit.coefs, fit.coefs, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(refit.sigma_u, fit.sigma_u, rtol=1e-9, atol=1e-12)


def test_granger_share_counts_significant_windows(snap: Snapshot, snapshot_path: Path, universe_name: str, bounds: tuple[dt.date, dt.date]) -> None:
    u = snap.universe(universe_name)
    w = DateWindow(universe_name, *bounds)
    share, count = snap.granger_share(w, u, 0.05)
    a, b = u.series[1], u.series[0]
    rows = read(
        snapshot_path,
        "SELECT p_value FROM granger WHERE universe = ? AND caused = ? AND causing = ?",
        [universe_name, a, b],
    )
    assert count == len(rows)
    assert share[1, 0] == pytest.approx(sum(p < 0.05 for (p,) in rows) / len(rows))
    assert np.isnan(share[0, 0])


@pytest.mark.parametrize(
    "value",
    ["2021-13-01", "yesterday", "", None, 20210101, "2021-01-01'; DROP TABLE runs; --", "x" * 500],
)
def test_parse_date_rejects_junk(value: object) -> None:
    with pytest.raises(WindowError, match="date like 2021-03-31"):
        parse_date(value, name="start")


def test_parse_date_takes_plotly_timestamps() -> None:
    assert parse_date("2021-03-04 12:30:00.123") == dt.date(2021, 3, 4)


@pytest.mark.parametrize("name", ["nope", "demo_four' OR '1'='1", None, 7, ["demo_four"]])
def test_unknown_universe_is_refused_not_queried(snap: Snapshot, name: object) -> None:
    with pytest.raises(WindowError, match="unknown universe"):
        snap.window({"universe": name, "start": "2020-01-01", "end": "2021-01-01"})


def test_reader_cannot_write_or_read_other_files(snapshot_path: Path, tmp_path: Path) -> None:
    reader = SnapshotReader(snapshot_path)
    with pytest.raises(duckdb.Error):
        reader.rows("DELETE FROM runs")
    with pytest.raises(duckdb.Error):
        reader.rows("CREATE TABLE evil AS SELECT 1")
    outside = tmp_path / "outside.csv"
    outside.write_text("a\n1\n")
    with pytest.raises(duckdb.Error):
        reader.rows("SELECT * FROM read_csv(?)", [str(outside)])
    with pytest.raises(duckdb.Error):
        reader.rows("SET enable_external_access = true")
    reader.close()


def test_missing_snapshot_says_how_to_make_one(tmp_path: Path) -> None:
    snap = Snapshot(tmp_path / "absent.duckdb")
    with pytest.raises(SnapshotMissingError, match="shockflow run"):
        snap.universes()
    (tmp_path / "junk.duckdb").write_text("not a database")
    with pytest.raises(SnapshotMissingError, match="cannot open the serving snapshot"):
        Snapshot(tmp_path / "junk.duckdb").universes()


def test_replaced_snapshot_is_seen_while_old_one_stays_consistent(tmp_path: Path) -> None:
    """After os.replace the next query reads the new file, even though a connection to the old file
    is still open in this process (DuckDB would otherwise hand back the old file's instance)."""
    path = write_snapshot(tmp_path / "s.duckdb", T=260, window=120, step=20, run_id="run-A")
    snap = Snapshot(path)
    (run_a,) = snap.reader.rows("SELECT DISTINCT run_id FROM connectedness")[0]
    assert run_a == "run-A"
    held = duckdb.connect(str(path), read_only=True)  # another reader of the old file, kept open
    with snap.reader.cursor() as old_cursor:  # a query in flight on the old file
        write_snapshot(path, T=260, window=120, step=20, run_id="run-B", scale=3.0)
        # the in-flight cursor still sees the old file, whole
        assert old_cursor.execute("SELECT DISTINCT run_id FROM connectedness").fetchall() == [("run-A",)]
    assert snap.reader.rows("SELECT DISTINCT run_id FROM connectedness") == [("run-B",)]
    assert held.execute("SELECT DISTINCT run_id FROM connectedness").fetchall() == [("run-A",)]
    held.close()
    # caches keyed by file: universes/bounds are re-read
    assert snap.universes()["demo_four"].series
    snap.reader.close()


def test_queries_keep_answering_while_snapshots_are_published(tmp_path: Path) -> None:
    """Readers in threads never fail while the file is replaced underneath them repeatedly."""
    path = write_snapshot(tmp_path / "s.duckdb", T=220, window=100, step=20, run_id="run-0")
    snap = Snapshot(path)
    errors: list[BaseException] = []
    seen: set[str] = set()
    stop = threading.Event()

    def reader() -> None:
        while not stop.is_set():
            try:
                u = snap.universe("demo_four")
                w = snap.window({"universe": "demo_four", "start": None, "end": None})
                snap.pairwise_mean(w, u)
                seen.add(snap.reader.rows("SELECT DISTINCT run_id FROM runs")[0][0])
            except BaseException as exc:
                errors.append(exc)

    threads = [threading.Thread(target=reader) for _ in range(4)]
    for t in threads:
        t.start()
    for k in range(1, 4):
        write_snapshot(path, T=220, window=100, step=20, run_id=f"run-{k}")
    stop.set()
    for t in threads:
        t.join()
    assert not errors, errors[:3]
    assert "run-3" in seen or snap.reader.rows("SELECT DISTINCT run_id FROM runs") == [("run-3",)]
    snap.reader.close()
    leftovers = [p for p in os.listdir(tmp_path) if p.endswith(".writing")]
    assert not leftovers


def test_view_helpers_delegate_to_the_one_adapter(snap: Snapshot, universe_name: str, bounds: tuple[dt.date, dt.date]) -> None:
    """`response_paths` / `shares_at` / `response_band` are serving's adapter: arlib on the stored
    model, bands with the universe's configured draws (not a fixed 199) after the refit check."""
    import arlib
    from dashboard import data

    u = snap.universe(universe_name)
    end = snap.fitted_end(DateWindow(universe_name, *bounds))
    f = snap.fit(u, end)
    proc = arlib.var_process(f.coefs, f.sigma_u, f.intercept, names=list(u.series))
    order = list(reversed(u.series))
    resp, lower, upper, source = data.response_paths(
        snap, u, end, identification="cholesky", order=order, horizon=u.horizon + 3, cumulative=False
    )
    np.testing.assert_allclose(resp, arlib.impulse_responses(proc, u.horizon + 3, shocks="cholesky", order=order), rtol=1e-12)
    assert lower is None and upper is None and source == data.DERIVED
    share, source = data.shares_at(snap, u, end, "generalized", u.series, 3)
    np.testing.assert_allclose(share, 100 * arlib.variance_decomposition(proc, 3, method="generalized")[2], rtol=1e-10)
    settings = data.band_settings(u)
    low, high, note = data.response_band(
        snap, u, end, identification="generalized", order=u.series, horizon=2, cumulative=False
    )
    assert f"{settings.draws} draws" in note and low.shape == high.shape == (3, u.n, u.n)
    assert np.all(low <= high)
