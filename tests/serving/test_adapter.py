"""The one adapter: stored first, arlib otherwise; one identification rule; the universe's draws;
the refit check; the same on screen (dashboard/data.py) and in the report (export)."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import duckdb
import numpy as np
import pytest

import arlib
from dashboard import data as screen
from pipeline.export._data import gather
from pipeline.export._snapshot import open_snapshot
from serving import (
    DERIVED,
    STORED,
    RefitMismatchError,
    Snapshot,
    UnknownIdentificationError,
    band_settings,
    bands,
    decomposition,
    identification_of,
    refit,
    responses,
)


def _variant(snapshot_path: Path, tmp_path: Path, sql: str, params: list) -> Path:
    """A copy of the snapshot with one statement applied."""
    path = tmp_path / "variant.duckdb"
    shutil.copyfile(snapshot_path, path)
    con = duckdb.connect(str(path))
    try:
        con.execute(sql, params)
    finally:
        con.close()
    return path


def test_stored_responses_when_they_answer_else_arlib(snap: Snapshot) -> None:
    u = snap.universe("stored")
    end = snap.latest_fitted_window("stored")
    got = responses(snap, u, end)
    assert got.origin == STORED and got.identification == "generalized" and got.lower is not None
    H = u.horizon + 4
    longer = responses(snap, u, end, horizon=H)
    assert longer.origin == DERIVED and longer.lower is None
    f = snap.fit(u, end)
    proc = arlib.var_process(f.coefs, f.sigma_u, f.intercept, names=list(u.series))
    np.testing.assert_allclose(longer.response, arlib.impulse_responses(proc, H, shocks="generalized"), rtol=1e-12)
    # the stored array is arlib's too, so the derived one agrees on the stored horizons
    np.testing.assert_allclose(longer.response[: u.horizon + 1], got.response, rtol=1e-10, atol=1e-14)
    order = list(reversed(u.series))
    chol = decomposition(snap, u, end, method="cholesky", order=order)
    assert chol.origin == DERIVED and chol.order == tuple(order)
    np.testing.assert_allclose(chol.share, arlib.variance_decomposition(proc, u.horizon, method="cholesky", order=order), rtol=1e-12)


def test_unknown_identification_is_refused_on_both_paths(snapshot_path: Path, tmp_path: Path) -> None:
    """Before: the report derived Cholesky responses, the screen defaulted to generalized."""
    path = _variant(snapshot_path, tmp_path, "UPDATE universes SET identification = 'sign' WHERE universe = ?", ["params"])
    with Snapshot(path) as snap:
        u = snap.universe("params")
        with pytest.raises(UnknownIdentificationError, match=r"universe 'params': identification 'sign' is not one"):
            identification_of(u)
        with pytest.raises(UnknownIdentificationError, match="use one of generalized, cholesky"):
            responses(snap, u, snap.latest_fitted_window("params"))
    with open_snapshot(path) as snap:
        d = gather(snap, "params")
    assert d.responses == []
    assert [x.method for x in d.decompositions] == ["generalized"]
    assert any("identification 'sign' is not one" in note for note in d.notes)


def test_bands_use_the_universes_draws_and_check_the_refit(snap: Snapshot) -> None:
    u = snap.universe("params")
    settings = band_settings(u)
    assert (settings.method, settings.draws, settings.seed, settings.coverage) == ("bootstrap", 30, 3, 0.9)
    end = snap.latest_fitted_window("params")
    got = bands(snap, u, end, identification="cholesky")
    assert got.draws == 30 and "30 draws" in got.note
    f = snap.fit(u, end)
    y = snap.prepared(u, f.window_start, f.window_end)
    want = arlib.irf_bands(arlib.fit_var(y, 1), u.horizon, shocks="cholesky", draws=30, rng=3, coverage=0.9)
    np.testing.assert_allclose(got.lower, want.lower, rtol=0, atol=1e-12)
    np.testing.assert_allclose(got.upper, want.upper, rtol=0, atol=1e-12)
    np.testing.assert_allclose(refit(snap, u, end).coefs, f.coefs, rtol=1e-8)
    # the screen's module hands out the same adapter (no second copy with its own draws)
    assert screen.bands is bands and screen.responses is responses


def test_a_refit_that_does_not_reproduce_the_fit_gives_no_band(snapshot_path: Path, tmp_path: Path) -> None:
    with Snapshot(snapshot_path) as snap:
        end = snap.latest_fitted_window("params")
        start = snap.fit(snap.universe("params"), end).window_start
    # one value of the window revised (a uniform rescaling would leave the VAR's slopes unchanged)
    path = _variant(snapshot_path, tmp_path, "UPDATE prepared SET value = value + 0.5 WHERE universe = ? "
                    "AND date = ? AND series = 'beta'", ["params", start])
    with Snapshot(path) as snap:
        with pytest.raises(RefitMismatchError, match="does not reproduce the stored coefficients"):
            bands(snap, snap.universe("params"), end)
    with open_snapshot(path) as snap:
        d = gather(snap, "params")
    (rs,) = d.responses
    assert rs.lower is None and rs.origin == DERIVED
    assert any("no bands" in n and "does not reproduce the stored coefficients" in n for n in d.notes)


def test_band_settings_defaults_are_the_configs() -> None:
    """The adapter's defaults are pipeline/config's: no `bands` table means NO_BANDS, a table
    without keys the declared defaults."""
    from pipeline.config import Bands
    from pipeline.config._sections import NO_BANDS

    for raw, b in (("{}", NO_BANDS), ('{"bands": {}}', Bands())):
        d = band_settings(screen.Universe("u", ("a",), 5, 0.05, "cholesky", config=json.loads(raw)))
        assert (d.method, d.draws, d.seed, d.coverage) == (b.method, b.draws, b.seed, b.coverage)


def screen_numbers(snapshot_path: Path, universe: str, end) -> dict[str, np.ndarray]:
    """What the dashboard's data module gives for window `end` (the screen's path)."""
    snap = screen.Snapshot(snapshot_path)
    try:
        u = snap.universe(universe)
        to, frm, net = snap.spillover_sums(u, end)
        out = {"table": snap.pairwise_at(u, end), "to": to, "from": frm, "net": net,
               "granger_p": snap.granger_at(u, end),
               "total": np.array([t for e, t in snap.index_history(universe) if e == end])}
        ident = screen.identification_of(u)
        out["response"] = screen.responses(snap, u, end, identification=ident).response
        out["decomposition"] = screen.decomposition(snap, u, end, method="generalized").share
        return out
    finally:
        snap.close()


def report_numbers(snapshot_path: Path, universe: str) -> tuple[object, dict[str, np.ndarray]]:
    """What the report shows for its window (the export's path): (window end, numbers)."""
    with open_snapshot(snapshot_path) as snap:
        d = gather(snap, universe)
    gen = next(x for x in d.decompositions if x.method == "generalized")
    return d.fitted_date, {
        "table": d.table, "to": d.to_others, "from": d.from_others, "net": d.net, "granger_p": d.granger_p,
        "total": np.array([d.total]), "response": d.responses[0].response, "decomposition": gen.share,
    }


@pytest.mark.parametrize("universe", ["stored", "params"])
def test_screen_and_report_show_the_same_numbers(snapshot_path: Path, universe: str) -> None:
    end, report = report_numbers(snapshot_path, universe)
    on_screen = screen_numbers(snapshot_path, universe, end)
    assert report.keys() == on_screen.keys()
    for key, value in report.items():
        np.testing.assert_array_equal(on_screen[key], value, err_msg=key)
    # and the stored sums are arlib's sums of the stored table (not recomputed anywhere)
    off = np.where(np.eye(len(report["to"]), dtype=bool), 0.0, report["table"])
    np.testing.assert_allclose(report["to"], off.sum(axis=0), rtol=1e-10)
    np.testing.assert_allclose(report["from"], off.sum(axis=1), rtol=1e-10)


def test_report_without_array_tables_says_so(snapshot_path: Path, tmp_path: Path) -> None:
    """A hand-made snapshot without window_params/responses/decompositions still gives a report."""
    path = tmp_path / "thin.duckdb"
    shutil.copyfile(snapshot_path, path)
    con = duckdb.connect(str(path))
    for view in ("response_long", "decomposition_long", "coef_long"):
        con.execute(f"DROP VIEW {view}")
    for table in ("responses", "decompositions", "window_params"):
        con.execute(f"DROP TABLE {table}")
    con.close()
    with open_snapshot(path) as snap:
        d = gather(snap, "stored")
    assert d.responses == [] and d.decompositions == [] and d.total is not None
    assert any("its parameters are not in the snapshot" in n for n in d.notes)
