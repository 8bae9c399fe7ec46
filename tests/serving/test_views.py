"""The long views equal the stored arrays, element by element, selected by series names."""

from __future__ import annotations

from pathlib import Path

import duckdb
import numpy as np
import pytest

from pipeline import warehouse as wh


def _rows(path: Path, sql: str, params: list | None = None) -> list[tuple]:
    con = duckdb.connect(str(path), read_only=True)
    try:
        return con.execute(sql, params or []).fetchall()
    finally:
        con.close()


def _names(path: Path, universe: str) -> list[str]:
    return [r[0] for r in _rows(path, "SELECT series FROM universe_series WHERE universe = ? ORDER BY position", [universe])]


def test_response_long_selects_one_response_by_names(snapshot_path: Path) -> None:
    names = _names(snapshot_path, "stored")
    n = len(names)
    stored = _rows(snapshot_path, "SELECT window_end, identification, horizon, response, lower, upper, coverage "
                   "FROM responses WHERE universe = 'stored' ORDER BY window_end")
    assert stored
    for end, ident, H, resp, lower, upper, coverage in stored:
        resp = np.reshape(resp, (H + 1, n, n))
        lower, upper = np.reshape(lower, (H + 1, n, n)), np.reshape(upper, (H + 1, n, n))
        for i, j in ((0, 1), (2, 0), (1, 1)):
            got = _rows(snapshot_path, "SELECT h, value, lower, upper, coverage FROM response_long "
                        "WHERE universe = 'stored' AND window_end = ? AND identification = ? "
                        "AND response = ? AND shock = ? ORDER BY h", [end, ident, names[i], names[j]])
            assert [g[0] for g in got] == list(range(H + 1))
            np.testing.assert_array_equal([g[1] for g in got], resp[:, i, j])
            np.testing.assert_array_equal([g[2] for g in got], lower[:, i, j])
            np.testing.assert_array_equal([g[3] for g in got], upper[:, i, j])
            assert {g[4] for g in got} == {coverage}
    total = _rows(snapshot_path, "SELECT count(*) FROM response_long WHERE universe = 'stored'")[0][0]
    assert total == len(stored) * (stored[0][2] + 1) * n * n


def test_decomposition_long_steps_and_names(snapshot_path: Path) -> None:
    names = _names(snapshot_path, "stored")
    n = len(names)
    for end, method, H, share in _rows(snapshot_path, "SELECT window_end, method, horizon, share FROM decompositions "
                                       "WHERE universe = 'stored'"):
        share = np.reshape(share, (H, n, n))
        got = _rows(snapshot_path, "SELECT step, variable, shock, share FROM decomposition_long "
                    "WHERE universe = 'stored' AND window_end = ? AND method = ?", [end, method])
        assert len(got) == H * n * n
        for step, var, shock, value in got:
            assert value == share[step - 1, names.index(var), names.index(shock)]
        # rows of the decomposition sum to one over shocks, also in the long form
        sums = _rows(snapshot_path, "SELECT sum(share) FROM decomposition_long WHERE universe = 'stored' "
                     "AND window_end = ? AND method = ? GROUP BY step, variable", [end, method])
        np.testing.assert_allclose([s[0] for s in sums], 1.0, rtol=1e-12)


def test_coef_long_and_pairwise_net(snapshot_path: Path) -> None:
    names = _names(snapshot_path, "params")
    n = len(names)
    for end, lags, coefs in _rows(snapshot_path, "SELECT window_end, lags, coefs FROM window_params WHERE universe = 'params'"):
        coefs = np.reshape(coefs, (lags, n, n))
        for lag, eq, reg, value in _rows(snapshot_path, "SELECT lag, equation, regressor, value FROM coef_long "
                                         "WHERE universe = 'params' AND window_end = ?", [end]):
            assert value == coefs[lag - 1, names.index(eq), names.index(reg)]
    table = {(s, t, e): v for e, s, t, v in _rows(snapshot_path, "SELECT window_end, source, target, share FROM pairwise "
                                                  "WHERE universe = 'params'")}
    net = _rows(snapshot_path, "SELECT window_end, source, target, share, reverse, net FROM pairwise_net "
                "WHERE universe = 'params'")
    assert len(net) == len({k[2] for k in table}) * n * (n - 1)
    for e, s, t, share, reverse, value in net:
        assert (share, reverse) == (table[(s, t, e)], table[(t, s, e)])
        assert value == pytest.approx(share - reverse, abs=0)


def test_views_live_in_the_warehouse_too(tmp_path: Path) -> None:
    con = wh.connect(tmp_path / "w.duckdb")
    try:
        con.execute("INSERT INTO universe_series VALUES ('u', 0, 'a', 'level'), ('u', 1, 'b', 'level')")
        con.execute("INSERT INTO responses VALUES ('r', 'u', DATE '2024-01-02', 'cholesky', 1, "
                    "[1, 0, 0.5, 2, 0.1, 0.2, 0.3, 0.4], NULL, NULL, NULL)")
        got = con.execute("SELECT h, value, lower FROM response_long WHERE response = 'b' AND shock = 'a' "
                          "ORDER BY h").fetchall()
        # (H+1, n, n) = (2, 2, 2) in C order: [h, response, shock]; b is position 1, a position 0
        assert got == [(0, 0.5, None), (1, 0.3, None)]
    finally:
        con.close()


def test_band_and_quantile_tables_have_long_views(tmp_path: Path) -> None:
    # A 2-series universe with one band row and one quantile row written by hand: the long views
    # must return shares[variable, shock] of the C-ordered (n, n) table by series name.
    con = wh.connect(tmp_path / "w.duckdb")
    try:
        con.execute("INSERT INTO universe_series VALUES ('u', 0, 'a', 'level'), ('u', 1, 'b', 'level')")
        con.execute("INSERT INTO band_connectedness (run_id, universe, window_end, band, period_lo, period_hi, "
                    "truncation, total, within_total, band_share, to_others, from_others, shares) VALUES "
                    "('r', 'u', DATE '2024-01-02', 0, 1, 5, 100, 20, 30, 0.6, [1, 2], [3, 4], [50, 10, 20, 40])")
        got = con.execute("SELECT band, period_lo, period_hi, variable, shock, share FROM band_long "
                          "ORDER BY variable, shock").fetchall()
        assert got == [(0, 1.0, 5.0, "a", "a", 50.0), (0, 1.0, 5.0, "a", "b", 10.0),
                       (0, 1.0, 5.0, "b", "a", 20.0), (0, 1.0, 5.0, "b", "b", 40.0)]
        cols = [r[0] for r in con.execute("DESCRIBE quantile_connectedness").fetchall()]
        values = {"run_id": "'r'", "universe": "'u'", "window_end": "DATE '2024-01-02'", "quantile": "0.05",
                  "total": "25", "to_others": "[1, 2]", "from_others": "[3, 4]", "net": "[-2, -2]",
                  "shares": "[70, 30, 5, 95]", "lags": "1", "coefs": "[0.1, 0, 0, 0.2]",
                  "sigma_u": "[1, 0, 0, 1]"}
        con.execute(f"INSERT INTO quantile_connectedness ({', '.join(values)}) VALUES ({', '.join(values.values())})")
        assert set(values) <= set(cols)
        got = con.execute("SELECT quantile, variable, shock, share FROM quantile_long WHERE variable = 'a' "
                          "ORDER BY shock").fetchall()
        assert got == [(0.05, "a", "a", 70.0), (0.05, "a", "b", 30.0)]
    finally:
        con.close()
