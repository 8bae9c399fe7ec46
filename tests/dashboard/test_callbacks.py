"""Callbacks as plain functions: each view's rows equal the snapshot (or arlib on the stored model)."""

from __future__ import annotations

import csv
import datetime as dt
import io
from pathlib import Path
from typing import Any

import numpy as np
import plotly.graph_objects as go
import pytest

import arlib
from dashboard import callbacks as cb
from dashboard import views as vw
from dashboard.data import DateWindow, Snapshot
from tests.charts.grids import cell_values, response_panels

from .conftest import read


def _valid(fig: dict[str, Any]) -> go.Figure:
    """plotly's own validation accepts the dict figure (raises on any unknown property)."""
    return go.Figure(fig)


def _end(snap: Snapshot, state: dict[str, str]) -> dt.date:
    return snap.fitted_end(snap.window(state))


def _stored_model(snap: Snapshot, universe: str, end: dt.date) -> arlib.VARProcess:
    u = snap.universe(universe)
    fit = snap.fit(u, end)
    return arlib.var_process(fit.coefs, fit.sigma_u, fit.intercept, names=u.series)


def test_sync_window_universe_change_resets_to_history(snap: Snapshot, universe_name: str, bounds: tuple[dt.date, dt.date]) -> None:
    start, end, state, note = cb.sync_window(snap, universe_name, "2020-01-01", "2020-02-01", None, "universe")
    assert (start, end) == (bounds[0].isoformat(), bounds[1].isoformat())
    assert state == {"universe": universe_name, "start": start, "end": end}
    assert "Date window" in note


def test_sync_window_from_range_slider_and_typed_dates(snap: Snapshot, universe_name: str, bounds: tuple[dt.date, dt.date]) -> None:
    lo, hi = bounds
    mid = lo + (hi - lo) / 2
    relayout = {"xaxis.range": [f"{mid.isoformat()} 10:11:12.5", f"{hi.isoformat()} 00:00"]}
    start, end, _, _ = cb.sync_window(snap, universe_name, None, None, relayout, "relayout")
    assert (start, end) == (mid.isoformat(), hi.isoformat())
    relayout = {"xaxis.range[0]": lo.isoformat(), "xaxis.range[1]": mid.isoformat()}
    assert cb.sync_window(snap, universe_name, None, None, relayout, "relayout")[:2] == (lo.isoformat(), mid.isoformat())
    assert cb.sync_window(snap, universe_name, None, None, {"xaxis.autorange": True}, "relayout")[:2] == (lo.isoformat(), hi.isoformat())
    typed = cb.sync_window(snap, universe_name, mid.isoformat(), "2999-01-01", None, "dates")
    assert typed[:2] == (mid.isoformat(), hi.isoformat())


def test_index_view_rows_are_the_stored_history(snap: Snapshot, snapshot_path: Path, state: dict[str, str], universe_name: str) -> None:
    fig, rows, note = vw.index_view(snap, state, 0.9)
    _valid(fig)
    stored = read(snapshot_path, "SELECT window_end, total FROM connectedness WHERE universe = ? ORDER BY 1", [universe_name])
    assert [(r["window_end"], r["total_percent"]) for r in rows] == [(d.isoformat(), t) for d, t in stored]
    threshold = float(np.quantile([t for _, t in stored], 0.9))
    assert sum(r["stress"] for r in rows) == sum(t >= threshold for _, t in stored) > 0
    # stress periods are drawn as shaded rectangles, the x-range is the chosen window
    assert any(s["type"] == "rect" for s in fig["layout"]["shapes"])
    assert fig["layout"]["xaxis"]["range"] == [state["start"], state["end"]]
    assert "percentile" in note


def test_paths_view_generalized_equals_stored_and_arlib(snap: Snapshot, snapshot_path: Path, state: dict[str, str], universe_name: str) -> None:
    u = snap.universe(universe_name)
    end = _end(snap, state)
    fig, rows, note = vw.paths_view(snap, state, "generalized", list(u.series), [], u.horizon, "stored")
    _valid(fig)
    n = len(u.series)
    assert len(rows) == (u.horizon + 1) * n * n
    ((flat,),) = read(snapshot_path, "SELECT response FROM responses WHERE universe = ? AND window_end = ? AND identification = 'generalized'", [universe_name, end])
    stored = np.asarray(flat).reshape(u.horizon + 1, n, n)
    got = np.array([r["value"] for r in rows]).reshape(u.horizon + 1, n, n)
    np.testing.assert_array_equal(got, stored)
    # and the stored responses are arlib's generalized responses of the stored model (Pesaran–Shin)
    np.testing.assert_allclose(got, arlib.impulse_responses(_stored_model(snap, universe_name, end), u.horizon, shocks="generalized"), rtol=1e-10, atol=1e-12)
    assert "stored band" in note and rows[0]["lower"] is not None
    # on screen one trace draws every panel (one pair of axes); its points carry the true values
    # and each panel's [response, shock] names, row after row, and the band's values
    (line,) = [t for t in fig["data"] if t.get("name") == "response"]
    cells = cell_values(line)
    assert list(cells)[:2] == [(u.series[0], u.series[0]), (u.series[0], u.series[1])]
    panels = response_panels(fig["data"], list(u.series))
    assert len(panels) == n * n
    for (i, j), p in panels.items():
        np.testing.assert_array_equal(p["response"], stored[:, i, j])
        assert (p["lower"] <= p["upper"]).all()


def test_paths_view_longer_horizon_and_ordering_come_from_arlib(snap: Snapshot, state: dict[str, str], universe_name: str) -> None:
    u = snap.universe(universe_name)
    end = _end(snap, state)
    order = list(reversed(u.series))
    H = u.horizon + 7
    _, rows, note = vw.paths_view(snap, state, "cholesky", order, ["cumulative"], H, "stored")
    n = len(u.series)
    got = np.array([r["value"] for r in rows]).reshape(H + 1, n, n)
    want = np.cumsum(arlib.impulse_responses(_stored_model(snap, universe_name, end), H, shocks="cholesky", order=order), axis=0)
    np.testing.assert_allclose(got, want, rtol=1e-12)
    # the impact of the last-ordered series' shock on the first-ordered series is zero (recursive)
    first, last = u.series.index(order[0]), u.series.index(order[-1])
    assert got[0, first, last] == 0.0
    assert "derived by arlib" in note and "no stored band" in note
    assert rows[0]["lower"] is None


def test_paths_view_bootstrap_band_brackets_the_response(snap: Snapshot, state: dict[str, str], universe_name: str) -> None:
    u = snap.universe(universe_name)
    _, rows, note = vw.paths_view(snap, state, "generalized", None, [], 6, "bootstrap")
    assert "bootstrap" in note
    inside = [r["lower"] <= r["value"] + 1e-9 and r["value"] <= r["upper"] + 1e-9 for r in rows]
    assert np.mean(inside) > 0.9
    assert len(rows) == 7 * len(u.series) ** 2


def test_shares_view_rows_sum_to_100_and_match_arlib(snap: Snapshot, state: dict[str, str], universe_name: str) -> None:
    u = snap.universe(universe_name)
    end = _end(snap, state)
    order = [u.series[-1]]  # the rest follow in stored order
    fig, rows, _ = vw.shares_view(snap, state, order, 4)
    _valid(fig)
    n = len(u.series)
    for method in ("generalized", "cholesky"):
        table = np.array([r["share_percent"] for r in rows if r["method"] == method]).reshape(n, n)
        np.testing.assert_allclose(table.sum(axis=1), 100.0, rtol=1e-10)
    full_order = [u.series[-1], *u.series[:-1]]
    want = 100 * arlib.variance_decomposition(_stored_model(snap, universe_name, end), 4, method="cholesky", order=full_order)[-1]
    got = np.array([r["share_percent"] for r in rows if r["method"] == "cholesky"]).reshape(n, n)
    np.testing.assert_allclose(got, want, rtol=1e-10)


def test_leadlag_view_matches_stored_pvalues(snap: Snapshot, snapshot_path: Path, state: dict[str, str], universe_name: str) -> None:
    end = _end(snap, state)
    fig, rows, _ = vw.leadlag_view(snap, state, 0.1)
    _valid(fig)
    stored = dict(((c, s), p) for c, s, p in read(snapshot_path, "SELECT caused, causing, p_value FROM granger WHERE universe = ? AND window_end = ?", [universe_name, end]))
    assert {(r["caused"], r["causing"]): r["p_value"] for r in rows} == stored
    r = rows[0]
    every = [p for (p,) in read(snapshot_path, "SELECT p_value FROM granger WHERE universe = ? AND caused = ? AND causing = ?", [universe_name, r["caused"], r["causing"]])]
    assert r["share_significant"] == pytest.approx(np.mean([p < 0.1 for p in every]))
    assert r["windows"] == len(every)


def test_network_view_net_direction_and_average(snap: Snapshot, snapshot_path: Path, state: dict[str, str], universe_name: str) -> None:
    _, rows, _ = vw.network_view(snap, state, "end", "to")
    end = _end(snap, state)
    stored = {(s, t): v for s, t, v in read(snapshot_path, "SELECT source, target, share FROM pairwise WHERE universe = ? AND window_end = ?", [universe_name, end])}
    for r in rows:
        assert r["share_percent"] == pytest.approx(stored[(r["source"], r["target"])])
        assert r["net_source_to_target_pp"] == pytest.approx(stored[(r["source"], r["target"])] - stored[(r["target"], r["source"])])
    fig, rows, _ = vw.network_view(snap, state, "mean", "from")
    _valid(fig)
    r = rows[0]
    mean = read(snapshot_path, "SELECT avg(share) FROM pairwise WHERE universe = ? AND source = ? AND target = ?", [universe_name, r["source"], r["target"]])[0][0]
    assert r["share_percent"] == pytest.approx(mean)
    # arrows point from the net transmitter: an arrow's tail (ax, ay) sits on the transmitter node
    assert any(a.get("showarrow") for a in fig["layout"]["annotations"])


def test_network_sums_are_the_stored_directional_rows(snap: Snapshot, state: dict[str, str], universe_name: str) -> None:
    """The network's node sizes are arlib's stored sums, and they are the off-diagonal sums of the
    stored pairwise table (Diebold–Yilmaz 2012 directional measures)."""
    u = snap.universe(universe_name)
    end = _end(snap, state)
    table = snap.pairwise_at(u, end)
    off = np.where(np.eye(len(u.series), dtype=bool), 0.0, table)
    to_others, from_others, _ = snap.spillover_sums(u, end)
    np.testing.assert_allclose(to_others, off.sum(axis=0), rtol=1e-9)
    np.testing.assert_allclose(from_others, off.sum(axis=1), rtol=1e-9)
    fig, _, _ = vw.network_view(snap, state, "end", "to")
    sizes = [m for tr in fig["data"] for m in np.atleast_1d((tr.get("marker") or {}).get("size", []))]
    assert sizes, "the network draws sized nodes"
    stored = snap.directional_at(u, end)
    np.testing.assert_allclose(to_others, [stored[s][0] for s in u.series], rtol=1e-9)
    np.testing.assert_allclose(from_others, [stored[s][1] for s in u.series], rtol=1e-9)


def test_compare_view_change_is_b_minus_a(snap: Snapshot, snapshot_path: Path, state: dict[str, str], universe_name: str, bounds: tuple[dt.date, dt.date]) -> None:
    lo, hi = bounds
    mid = lo + (hi - lo) / 2
    (f1, r1, n1), (f2, r2, n2) = vw.compare_view(
        snap, state, lo.isoformat(), mid.isoformat(), (mid + dt.timedelta(days=1)).isoformat(), hi.isoformat(),
        "generalized", None, 5,
    )
    _valid(f1)
    _valid(f2)
    assert "total connectedness" in n1 and "window ending" in n2
    r = next(x for x in r1 if x["source"] != x["target"])
    a = read(snapshot_path, "SELECT avg(share) FROM pairwise WHERE universe = ? AND source = ? AND target = ? AND window_end BETWEEN ? AND ?", [universe_name, r["source"], r["target"], lo, mid])[0][0]
    assert r["a_share_percent"] == pytest.approx(a)
    assert r["change_pp"] == pytest.approx(r["b_share_percent"] - r["a_share_percent"])
    assert r2[0]["a_window_end"] <= mid.isoformat() < r2[0]["b_window_end"]
    # blank inputs: the halves of the window
    (_, r1b, _), _ = vw.compare_view(snap, state, "", None, None, "", "generalized", None, 5)
    assert r1b[0]["a_window"].startswith(lo.isoformat())


def test_health_view_flags_and_skips(built_snapshot_path: Path) -> None:
    snap, snapshot_path, universe_name = Snapshot(built_snapshot_path), built_snapshot_path, "demo_four"
    state = {"universe": universe_name, "start": None, "end": None}
    fig, rows, note = vw.health_view(snap, state, 0.2)
    _valid(fig)
    stored = read(snapshot_path, "SELECT count(*), count(skip_reason) FROM window_fits WHERE universe = ?", [universe_name])[0]
    assert len(rows) == stored[0]
    skipped = vw.skipped_rows(rows)
    assert len(skipped) == stored[1] >= 1
    assert "skipped" in note
    radii = [r for (r,) in read(snapshot_path, "SELECT spectral_radius FROM window_fits WHERE universe = ? AND skip_reason IS NULL", [universe_name])]
    flagged = [r for r in rows if r["radius_flag"]]
    assert len(flagged) == sum(r >= 0.2 for r in radii) > 0
    assert all(r["spectral_radius"] >= 0.2 for r in flagged)
    names = [t.get("name", "") for t in fig["data"]]
    assert any(name.startswith("skipped window") for name in names)


def test_cycles_view_matches_arlib_on_prepared_data(snap: Snapshot, state: dict[str, str], universe_name: str) -> None:
    u = snap.universe(universe_name)
    end = _end(snap, state)
    fig, rows, note = vw.cycles_view(snap, state)
    _valid(fig)
    fit = snap.fit(u, end)
    y = snap.prepared(u, fit.window_start, fit.window_end)
    name = u.series[0]
    mine = [r for r in rows if r["series"] == name]
    p = mine[0]["ar_lags"]
    own = arlib.fit_var(y[:, 0], p, names=[name])
    want = arlib.spectral_density(own, 2 * np.pi * np.array([r["frequency_cycles_per_obs"] for r in mine]))[:, 0, 0].real
    np.testing.assert_allclose([r["density"] for r in mine], want, rtol=1e-10)
    assert "Dominant cycle" in note


def test_cycles_view_finds_a_known_cycle(tmp_path: Path) -> None:
    """An AR(2) with complex roots has an interior spectral peak; the view reports its period.

    Closed form (Hamilton 1994, Sec. 6.1): cos ω* = −φ1(1 − φ2)/(4 φ2).
    """
    import duckdb

    from pipeline.warehouse import ensure_schema

    from ._snapshot import _insert

    rng = np.random.default_rng(3)
    phi1, phi2, T = 1.0, -0.5, 3000
    y = np.zeros(T)
    for t in range(2, T):
        y[t] = phi1 * y[t - 1] + phi2 * y[t - 2] + rng.standard_normal()
    days = [dt.date(2000, 1, 1) + dt.timedelta(days=k) for k in range(T)]
    other = rng.standard_normal(T)
    path = tmp_path / "cyc.duckdb"
    con = duckdb.connect(str(path))
    ensure_schema(con)
    key = {"run_id": "r", "universe": "u"}
    _insert(con, "universes", [{"universe": "u", "config_hash": "h", "config_json": "{}", "horizon": 5, "granger_level": 0.05, "identification": "generalized", "run_id": "r"}])
    _insert(con, "universe_series", [{"universe": "u", "position": i, "series": s, "transform": "none"} for i, s in enumerate(("CYC", "NOISE"))])
    _insert(con, "prepared", [{"universe": "u", "date": d, "series": s, "value": float(v)} for d, a, b in zip(days, y, other, strict=True) for s, v in (("CYC", a), ("NOISE", b))])
    fit = arlib.fit_var(np.column_stack([y, other]), 2, names=["CYC", "NOISE"])
    _insert(con, "window_fits", [{**key, "window_end": days[-1], "window_start": days[0], "nobs": fit.nobs, "lags": 2}])
    _insert(con, "window_params", [{**key, "window_end": days[-1], "lags": 2, "coefs": fit.coefs.ravel().tolist(), "intercept": fit.intercept.tolist(), "sigma_u": fit.sigma_u.ravel().tolist()}])
    _insert(con, "connectedness", [{**key, "window_end": days[-1], "total": 1.0}])
    con.close()
    snap = Snapshot(path)
    _, rows, note = vw.cycles_view(snap, {"universe": "u", "start": None, "end": None})
    period = next(r["dominant_period_obs"] for r in rows if r["series"] == "CYC")
    true_period = 2 * np.pi / np.arccos(-phi1 * (1 - phi2) / (4 * phi2))
    # estimated AR on 3000 rows: the peak period is within 10% of the true one
    assert period == pytest.approx(true_period, rel=0.1)
    assert "CYC" in note
    snap.reader.close()


HOSTILE = [
    "x'); DROP TABLE runs; --",
    "../../etc/passwd",
    "\" OR 1=1 --",
    {"$ne": 1},
    ["a", "b"],
    1e308,
    -1,
    None,
]


@pytest.mark.parametrize("bad", HOSTILE, ids=[str(i) for i in range(len(HOSTILE))])
def test_hostile_inputs_give_a_message_not_an_error(snap: Snapshot, snapshot_path: Path, state: dict[str, str], bad: Any) -> None:
    before = read(snapshot_path, "SELECT count(*) FROM runs")
    views = [
        lambda: vw.index_view(snap, {**state, "universe": bad}, 0.9),
        lambda: vw.index_view(snap, {**state, "start": bad}, bad),
        lambda: vw.paths_view(snap, state, bad, bad, bad, bad, bad),
        lambda: vw.paths_view(snap, {**state, "end": bad}, "generalized", None, [], 10, "none"),
        lambda: vw.shares_view(snap, state, bad, bad),
        lambda: vw.leadlag_view(snap, state, bad),
        lambda: vw.network_view(snap, state, bad, bad),
        lambda: vw.compare_pairs_view(snap, state, bad, bad, bad, bad),
        lambda: vw.compare_paths_view(snap, state, None, None, None, None, bad, bad, bad),
        lambda: vw.health_view(snap, state, bad),
        lambda: vw.cycles_view(snap, bad),
    ]
    for view in views:
        fig, rows, note = view()
        _valid(fig)
        assert isinstance(note, str)
        if rows:  # some inputs are legitimately fine (e.g. an unknown ordering is ignored)
            continue
        assert "Traceback" not in note and "server log" not in note, note
    assert read(snapshot_path, "SELECT count(*) FROM runs") == before


def test_csv_file_round_trips_rows_and_defuses_formulas() -> None:
    rows = [
        {"series": "=HYPERLINK(\"http://x\")", "value": 1.5, "flag": True, "empty": None},
        {"series": "-2+3", "value": -0.25, "flag": False, "extra": "b"},
    ]
    out = cb.csv_file(rows, "paths", {"universe": "../../etc", "start": "2020-01-01", "end": "2020-02-01"})
    assert out is not None
    assert out["filename"] == "shockflow_etc_paths_2020-01-01_2020-02-01.csv"
    parsed = list(csv.DictReader(io.StringIO(out["content"])))
    assert parsed[0]["series"].startswith("'=")
    assert parsed[1]["series"] == "'-2+3"
    assert float(parsed[1]["value"]) == -0.25
    assert parsed[0]["flag"] == "true" and parsed[0]["empty"] == "" and parsed[1]["extra"] == "b"
    assert cb.csv_file("not rows", "x", None) is None
    assert cb.csv_file([1, 2], "x", None) is None


@pytest.mark.parametrize(
    ("parts", "expected"),
    [
        (("shockflow", "../..", "x"), "shockflow_x.csv"),
        (("a/b\\c", "..evil"), "a-b-c_evil.csv"),
        (("..",), "shockflow.csv"),
        (("名前", "ok"), "ok.csv"),
    ],
)
def test_safe_filename_has_no_path_parts(parts: tuple[str, ...], expected: str) -> None:
    name = cb.safe_filename(*parts)
    assert name == expected
    assert "/" not in name and "\\" not in name and not name.startswith(".")


def test_views_over_a_narrow_window_use_that_window(snap: Snapshot, universe_name: str, bounds: tuple[dt.date, dt.date]) -> None:
    """Pick a window ending early: every 'at the window end' view reports that window's end."""
    lo, hi = bounds
    early = snap.index_in(DateWindow(universe_name, lo, hi))[3][0]
    state = {"universe": universe_name, "start": lo.isoformat(), "end": early.isoformat()}
    end = snap.fitted_end(snap.window(state))
    assert end <= early
    for view in (
        lambda: vw.paths_view(snap, state, "generalized", None, [], 5, "none"),
        lambda: vw.shares_view(snap, state, None, 5),
        lambda: vw.leadlag_view(snap, state, 0.05),
        lambda: vw.network_view(snap, state, "end", "to"),
        lambda: vw.cycles_view(snap, state),
    ):
        _, rows, note = view()
        assert rows and rows[0]["window_end"] == end.isoformat()
        assert end.isoformat() in note


# -- empty universes, the horizon control, figure layout (issue 10, items 2–4) --------------------


def add_universe(source: Path, target: Path, name: str, series: tuple[str, ...], *, skipped: bool) -> Path:
    """A copy of the snapshot `source` with one more universe `name` that has no fitted window:
    none at all, or (with `skipped`) only skipped ones."""
    import shutil

    import duckdb

    shutil.copy(source, target)
    con = duckdb.connect(str(target))
    try:
        con.execute(
            "INSERT INTO universes (universe, config_hash, config_json, horizon, granger_level, identification, run_id) "
            "VALUES (?, 'h', '{}', 7, 0.05, 'generalized', 'r-empty')", [name])
        for i, s in enumerate(series):
            con.execute("INSERT INTO universe_series (universe, position, series, transform) VALUES (?, ?, ?, 'none')", [name, i, s])
        if skipped:
            con.execute(
                "INSERT INTO window_fits (run_id, universe, window_end, window_start, nobs, lags, skip_reason) "
                "VALUES ('r-empty', ?, DATE '2021-01-29', DATE '2020-01-01', 40, 1, 'too few rows (test)')", [name])
    finally:
        con.close()
    return target


ALL_VIEWS = (
    lambda snap, st: vw.index_view(snap, st, 0.9),
    lambda snap, st: vw.paths_view(snap, st, "generalized", None, [], 10, "stored"),
    lambda snap, st: vw.shares_view(snap, st, None, 10),
    lambda snap, st: vw.leadlag_view(snap, st, 0.05),
    lambda snap, st: vw.network_view(snap, st, "end", "to"),
    lambda snap, st: vw.compare_pairs_view(snap, st, None, None, None, None),
    lambda snap, st: vw.compare_paths_view(snap, st, None, None, None, None, "generalized", None, 5),
    lambda snap, st: vw.cycles_view(snap, st),
    lambda snap, st: vw.tails_index_view(snap, st),
    lambda snap, st: vw.tails_tables_view(snap, st),
)


@pytest.mark.parametrize("skipped", [False, True], ids=["no-windows", "only-skipped"])
def test_empty_universe_gets_its_own_empty_state(snapshot_path: Path, universe_name: str, state: dict[str, str], tmp_path: Path, skipped: bool) -> None:
    """Picking a universe without fitted windows gives a new window state for it (not the previous
    universe's), and every view says that universe has nothing yet — nothing from another."""
    path = add_universe(snapshot_path, tmp_path / "s.duckdb", "zz_empty", ("E_ONE", "E_TWO"), skipped=skipped)
    snap = Snapshot(path)
    try:
        _, _, new_state, note = cb.sync_window(snap, "zz_empty", state["start"], state["end"], None, "universe")
        assert new_state["universe"] == "zz_empty"
        assert "zz_empty" in note and "no fitted windows" in note
        for view in ALL_VIEWS:
            fig, rows, text = view(snap, new_state)
            assert rows == [] and fig["data"] == []
            assert "zz_empty" in text and "no fitted windows" in text, text
            assert universe_name not in str(fig)
        fig, rows, text = vw.health_view(snap, new_state, 0.98)
        if skipped:  # the skipped windows and their reasons are the useful empty state
            assert [r["skip_reason"] for r in rows] == ["too few rows (test)"]
        else:
            assert "zz_empty" in text and rows == []
    finally:
        snap.reader.close()


def test_report_links_only_name_the_chosen_universe(export_dir: Path) -> None:
    from dashboard.layout import report_links

    def hrefs(universe: str | None) -> list[str]:
        return [c.href for c in report_links(export_dir, universe) if getattr(c, "href", None)]

    assert hrefs("demo_four") and all("demo_four" in h for h in hrefs("demo_four"))
    assert hrefs("zz_empty") == []
    assert "No exported report for zz_empty yet." in str(report_links(export_dir, "zz_empty"))


@pytest.mark.parametrize("typed", ["500", "0", "2.5", "ten", ""])
def test_horizon_message_quotes_what_was_typed(snap: Snapshot, state: dict[str, str], typed: str) -> None:
    for view in (
        lambda: vw.paths_view(snap, state, "generalized", None, [], typed, "none"),
        lambda: vw.shares_view(snap, state, None, typed),
    ):
        _, rows, note = view()
        assert rows == []
        assert "`" not in note and "None" not in note, note
        assert (repr(typed) if typed else "nothing") in note, note
        assert "1 to 60" in note


def test_index_and_network_titles_name_the_stored_horizon(snap: Snapshot, state: dict[str, str], universe_name: str) -> None:
    h = snap.universe(universe_name).horizon
    for fig in (vw.index_view(snap, state, 0.9)[0], vw.network_view(snap, state, "end", "to")[0]):
        title = fig["layout"]["title"]["text"]
        assert f"{h}-step horizon" in title, title
        assert "does not change it" in title, title


def _legend_above_figure(layout: dict[str, Any]) -> bool:
    """True when a legend is anchored at or above the top edge of the figure (over the page's
    controls): container coordinates near 1 growing upwards."""
    legend = layout.get("legend", {})
    return legend.get("yref") == "container" and legend.get("yanchor") == "bottom" and legend.get("y", 0) > 0.5


def _title_lines(layout: dict[str, Any]) -> list[str]:
    import re

    text = layout.get("title", {}).get("text", "")
    return [re.sub(r"<[^>]+>", "", line) for line in text.split("<br>")]


def _cells_apart(fig: dict[str, Any]) -> None:
    """A one-axis grid (the screen's shock paths): one pair of axes; neighbouring cells' boxes do
    not touch (room for the scale printed above each cell) and each cell's curves stay inside its
    own box."""
    assert not [k for k in fig["layout"] if k.startswith(("xaxis", "yaxis")) and k[5:]], "one pair of axes"

    def per_cell(values: list[Any], cells: int) -> np.ndarray:
        return np.array([np.nan if v is None else v for v in values], dtype=float).reshape(cells, -1)

    boxes = next(t for t in fig["data"] if t.get("name") == "panels")
    cells = len(boxes["x"]) // 6  # a box: five corners, then the gap
    bx, by = per_cell(boxes["x"], cells), per_cell(boxes["y"], cells)
    left, right = np.nanmin(bx, axis=1), np.nanmax(bx, axis=1)
    bottom, top = np.nanmin(by, axis=1), np.nanmax(by, axis=1)
    assert np.diff(np.unique(left)).min() > (right - left).max()
    assert np.diff(np.unique(bottom)).min() > (top - bottom).max()
    for t in fig["data"]:
        if t.get("customdata") is None:
            continue
        x, y = per_cell(t["x"], cells), per_cell(t["y"], cells)
        assert (np.nanmin(x, axis=1) >= left).all() and (np.nanmax(x, axis=1) <= right).all()
        assert (np.nanmin(y, axis=1) >= bottom - 1e-4).all() and (np.nanmax(y, axis=1) <= top + 1e-4).all()


def test_response_grids_keep_legend_title_and_ticks_inside(snap: Snapshot, state: dict[str, str], universe_name: str) -> None:
    """Layout of the shock-path and compare grids: the legend never above the figure, title lines
    short enough to fit, cells apart and each panel inside its own cell."""
    u = snap.universe(universe_name)
    order = list(reversed(u.series))
    figs = [
        vw.paths_view(snap, state, "cholesky", order, [], 10, "stored")[0],
        vw.compare_paths_view(snap, state, None, None, None, None, "cholesky", order, 5)[0],
        vw.health_view(snap, state, 0.98)[0],
    ]
    for fig in figs:
        layout = fig["layout"]
        assert not _legend_above_figure(layout), layout.get("legend")
        assert max(len(line) for line in _title_lines(layout)) <= 120, _title_lines(layout)
    for fig in figs[:2]:
        _cells_apart(fig)
    # the whole Cholesky order is still said, on its own line
    assert " → ".join(order) in fig["layout"]["title"]["text"] or " → ".join(order) in figs[0]["layout"]["title"]["text"]


def test_column_headers_are_the_same_words_in_every_universe(snap: Snapshot, state: dict[str, str], universe_name: str) -> None:
    """Headers of the shock-path grid are the shocked series' names, whatever the universe's size."""
    for name in snap.universes():
        u = snap.universe(name)
        st = {"universe": name, "start": None, "end": None}
        fig = vw.paths_view(snap, st, "generalized", None, [], 5, "none")[0]
        top = max(a["y"] for a in fig["layout"]["annotations"])
        headers = [a["text"] for a in fig["layout"]["annotations"] if a["y"] == top]
        assert headers == list(u.series), (name, headers)


def test_network_nodes_fill_the_plot_and_labels_point_outwards(snap: Snapshot, state: dict[str, str]) -> None:
    fig = vw.network_view(snap, state, "end", "to")[0]
    nodes = next(t for t in fig["data"] if t["name"] == "series")
    xs, ys = np.array(nodes["x"]), np.array(nodes["y"])
    xr, yr = fig["layout"]["xaxis"]["range"], fig["layout"]["yaxis"]["range"]
    # the nodes span most of the plot both ways, no square-locked small circle in the middle
    assert (xs.max() - xs.min()) / (xr[1] - xr[0]) >= 0.6
    assert (ys.max() - ys.min()) / (yr[1] - yr[0]) >= 0.6
    assert "scaleanchor" not in fig["layout"]["yaxis"]
    # each label sits on the outer side of its node
    for x, y, where in zip(xs, ys, nodes["textposition"], strict=True):
        vertical, horizontal = where.split()
        out = {"top": 1, "bottom": -1, "middle": 0}[vertical] * y + {"left": -1, "right": 1, "center": 0}[horizontal] * x
        assert out > 0, (x, y, where)


# -- the views table (issue 11, item 4) -------------------------------------------------------------


def _imports(module_path: Path, package: str) -> set[str]:
    """Modules of `package` that `module_path` imports anywhere (top level or inside functions)."""
    import ast

    tree = ast.parse(module_path.read_text(encoding="utf-8"))
    found: set[str] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom):
            if node.level == 1:
                base = f"{package}.{node.module}" if node.module else package
                names = [base] if node.module else [f"{package}.{a.name}" for a in node.names]
                found.update(names)
            elif node.module and node.module.startswith(package + "."):
                found.add(node.module)
        elif isinstance(node, ast.Import):
            found.update(a.name for a in node.names if a.name.startswith(package + "."))
    return found


def test_dashboard_modules_import_no_cycle() -> None:
    """No import cycle among the dashboard's modules, counting imports inside functions (the
    callbacks ↔ layout cycle was hidden in `register`)."""
    import graphlib

    root = Path(__file__).resolve().parents[2]
    graph = {
        f"dashboard.{p.stem}": _imports(p, "dashboard") - {"dashboard"}
        for p in (root / "dashboard").glob("*.py") if p.stem != "__init__"
    }
    graphlib.TopologicalSorter(graph).prepare()  # raises CycleError on any cycle
    assert "dashboard.layout" not in graph["dashboard.callbacks"]
    assert "charts" not in {m.split(".")[0] for m in _imports(root / "charts" / "_figures.py", "dashboard")}


def echo_view(snap: Snapshot, state: Any, horizon: Any) -> Any:
    """A minimal view for the table test: the horizon it was given, as one bar."""
    import charts

    h = int(horizon)
    fig = charts.message_figure(f"echo {h}")
    return fig, [{"horizon": h}], f"echo of horizon {h}"


def test_a_new_view_is_one_row_of_the_table(monkeypatch: pytest.MonkeyPatch, snapshot_path: Path, state: dict[str, str]) -> None:
    """Adding a row to `views.VIEWS` (and nothing else) gives the view its tab, ids, controls in
    the shared-horizon label and its callback."""
    import json

    from dash import Dash

    from dashboard import DashboardSettings, create_app, ids, views
    from dashboard.layout import horizon_views

    row = views.View("echo", echo_view, tab="Echo", inputs=(ids.HORIZON,))
    monkeypatch.setattr(views, "VIEWS", (*views.VIEWS, row))
    app: Dash = create_app(DashboardSettings(snapshot=snapshot_path))
    client = app.server.test_client()
    page = client.get("/_dash-layout").get_data(as_text=True)
    for text in ('"Echo"', '"echo-graph"', '"echo-note"', '"value": "echo"'.replace(" ", "")):
        assert text in page.replace(" ", ""), text
    assert "Echo" in horizon_views()
    (key,) = [k for k in app.callback_map if k.startswith("..echo-graph.figure")]
    spec = app.callback_map[key]
    body = {
        "output": key,
        "outputs": [{"id": o.split(".")[0], "property": o.split(".")[1]} for o in key.strip(".").split("...")],
        # a tab's view is sent (window state, *its inputs) as one list, its ask (callbacks.ASK_JS)
        "inputs": [{"id": i["id"], "property": i["property"], "value": v}
                   for i, v in zip(spec["inputs"], [[state, "7"]], strict=True)],
        "changedPropIds": ["echo-ask.data"], "state": [],
    }  # fmt: skip
    outputs = body["outputs"]
    assert [o["id"] for o in outputs] == ["echo-graph", '{"chart":"echo","type":"chart-data"}', "echo-note"]
    body["outputs"][1] = {"id": {"chart": "echo", "type": "chart-data"}, "property": "data"}
    answer = client.post("/_dash-update-component", json=body)
    assert answer.status_code == 200, answer.get_data(as_text=True)
    response = json.loads(answer.get_data(as_text=True))["response"]
    assert response["echo-note"]["children"] == "echo of horizon 7"


def test_bands_view_splits_the_stored_index_by_cycle_length(snap: Snapshot, state: dict[str, str], universe_name: str) -> None:
    """The stacked bands add up to the stored index when the truncation equals the horizon, and
    otherwise to arlib's index at the truncation horizon (Baruník–Křehlík 2018, discrete Parseval);
    the net bars at the window end are the stored to − from per band."""
    u = snap.universe(universe_name)
    (fig, rows, note), (bars, net_rows, _), _ = vw.bands_view(snap, state)
    bh = snap.band_history(u)
    assert bh is not None and "cycles ≤ 5 rows" in {t["name"] for t in fig["data"]}
    stacked = [t for t in fig["data"] if t.get("stackgroup") == "bands"]
    assert len(stacked) == len(bh.periods) == 3
    np.testing.assert_allclose(np.sum([t["y"] for t in stacked], axis=0), bh.total.sum(axis=1), rtol=1e-12)
    end = _end(snap, state)
    fit = snap.fit(u, end)
    proc = arlib.var_process(fit.coefs, fit.sigma_u, names=u.series)
    index = arlib.connectedness(proc, bh.truncation).total
    assert bh.total[bh.at(end)].sum() == pytest.approx(index, rel=1e-9)
    k = bh.at(end)
    np.testing.assert_allclose([b["y"] for b in bars["data"]], bh.to_others[k] - bh.from_others[k], rtol=1e-12)
    assert len(rows) == 3 * len(bh.ends) and len(net_rows) == 3 * len(u.series)
    assert "add up to the index" in note


def test_joint_view_shows_joint_and_generalized(snap: Snapshot, state: dict[str, str], universe_name: str) -> None:
    u = snap.universe(universe_name)
    fig, rows, _ = vw.joint_view(snap, state)
    jh = snap.joint_history(u)
    assert jh is not None
    np.testing.assert_allclose(fig["data"][0]["y"], jh.total, rtol=1e-12)
    np.testing.assert_allclose(fig["data"][1]["y"], [v for _, v in snap.index_history(u.name)], rtol=1e-12)
    end = _end(snap, state)
    fit = snap.fit(u, end)
    proc = arlib.var_process(fit.coefs, fit.sigma_u, names=u.series)
    k = jh.ends.index(end)
    np.testing.assert_allclose(jh.from_others[k], arlib.joint_connectedness(proc, u.horizon).from_others, rtol=1e-9)
    assert len(rows) == len(jh.ends)


def test_a_universe_without_bands_says_how_to_get_them(snap: Snapshot, bounds: tuple[dt.date, dt.date]) -> None:
    other = [name for name in snap.universe_names() if snap.band_history(snap.universe(name)) is None]
    assert other, "the test snapshot has a universe without bands"
    lo, hi = bounds
    result = vw.bands_view(snap, {"universe": other[0], "start": lo.isoformat(), "end": hi.isoformat()})
    assert "frequency_bands = [5, 20]" in str(result)


def test_answers_are_kept_per_snapshot_file_and_never_when_a_view_failed(snapshot_path: Path, tmp_path: Path) -> None:
    """Issue 15: the same question on the same snapshot file is computed once; a newly published
    file (replaced in place, as publish does) starts afresh; an unexpected failure is not kept."""
    import os
    import shutil

    from dashboard._inputs import FAILED

    served = tmp_path / "serving.duckdb"
    shutil.copyfile(snapshot_path, served)
    snap = Snapshot(served)
    answers = cb.Answers(kept=4)
    calls: list[str] = []

    def compute(text: str) -> Any:
        def run() -> list[Any]:
            calls.append(text)
            return [{"data": []}, [], text]
        return run

    try:
        assert answers.get(snap, "v", [1], compute("a")) == answers.get(snap, "v", [1], compute("a"))
        assert calls == ["a"]
        answers.get(snap, "v", [2], compute("b"))
        assert calls == ["a", "b"]
        for _ in range(2):  # a failed view is asked again, never answered from the kept ones
            answers.get(snap, "v", [3], compute(FAILED), keep=cb._succeeded)
        assert calls == ["a", "b", FAILED, FAILED]
        fresh = tmp_path / "next.duckdb"
        shutil.copyfile(snapshot_path, fresh)
        os.replace(fresh, served)  # a new file at the same path: publish's atomic replace
        answers.get(snap, "v", [1], compute("a"))
        assert calls[-1] == "a" and len(calls) == 5 and len(answers) == 1
        for k in range(10):  # at most `kept` answers
            answers.get(snap, "v", [100 + k], compute("c"))
        assert len(answers) == 4
    finally:
        snap.reader.close()


def test_bands_view_shows_the_pairwise_table_of_each_band_at_the_window_end(snap: Snapshot, state: dict[str, str], universe_name: str) -> None:
    """The third chart of the cycle-length tab: one heatmap per band of the band table θ̃_d at the
    window end [receiving, sending], in percent of the receiver's variance (Baruník–Křehlík 2018,
    eq. 12), on one colour scale for every band. Its off-diagonal cells equal arlib's
    `frequency_connectedness` of the window refitted from its stored prepared rows, and the
    stored band table, to 1e-9; summed over bands they are the Diebold–Yilmaz table."""
    u = snap.universe(universe_name)
    results = vw.bands_view(snap, state)
    assert len(results) == 3
    heat, rows, note = results[2]
    _valid(heat)
    bh = snap.band_history(u)
    assert bh is not None
    end = _end(snap, state)
    k = bh.at(end)
    stored = snap.fit(u, end)
    y = snap.prepared(u, stored.window_start, stored.window_end)
    refit = arlib.fit_var(y, stored.lags, trend=u.trend, names=list(u.series))
    fc = arlib.frequency_connectedness(refit, bands=bh.periods, truncation=bh.truncation)
    n, d = len(u.series), len(bh.periods)
    panels = [t for t in heat["data"] if t["type"] == "heatmap"]
    assert len(panels) == d
    off = ~np.eye(n, dtype=bool)
    for b, panel in enumerate(panels):
        z = np.asarray(panel["z"], dtype=float)
        assert np.isnan(z[~off]).all()  # own shares are written, not coloured
        np.testing.assert_allclose(z[off], fc.tables[b][off], rtol=1e-9, atol=1e-9)
        np.testing.assert_allclose(z[off], bh.table[k, b][off], rtol=1e-9, atol=1e-9)
        assert panel["x"] == panel["y"] == list(u.series)
    # one colour scale: the same limits in every panel, covering every off-diagonal cell
    assert len({(p["zmin"], p["zmax"]) for p in panels}) == 1
    assert panels[0]["zmin"] == 0 and panels[0]["zmax"] >= np.max(fc.tables[:, off]) - 1e-9
    assert sum(bool(p.get("showscale", True)) for p in panels) == 1
    # CSV rows: every cell of every band table, own shares included
    assert len(rows) == d * n * n
    got = np.array([r["share_percent"] for r in rows]).reshape(d, n, n)
    np.testing.assert_allclose(got, fc.tables, rtol=1e-9, atol=1e-9)
    dy = arlib.connectedness(refit, bh.truncation)
    np.testing.assert_allclose(got.sum(axis=0), dy.table, rtol=1e-9, atol=1e-9)
    assert "one colour scale for every band" in note
