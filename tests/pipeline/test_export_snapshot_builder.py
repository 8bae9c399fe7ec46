"""A small serving snapshot written by hand from docs/warehouse.md, filled with arlib's single-fit
results on simulated data (a VAR(1) with invented parameters, seeded).

Used by the export tests for cases the real pipeline would never write (a universe named
`../escape`, a run that stored no responses, a skipped latest window); the main export test
runs on a snapshot the real pipeline produced.

The tests in this module check the builder itself, so a broken fixture cannot hide a broken export.
"""

from __future__ import annotations

import datetime as dt
import json
from pathlib import Path

import duckdb
import numpy as np

import arlib
from serving import SNAPSHOT_TABLES, ddl

# The served tables as the schema declares them (serving._schema, the one declaration), plus
# `observations`, which a hand-built snapshot may carry (the export then names the exact batches).
DDL = "\n".join(
    f"CREATE TABLE {t} ({ddl(t)});" for t in (*SNAPSHOT_TABLES, "observations")
)

# An invented VAR(1) for three invented series (not market data).
A = np.array([[0.45, 0.20, 0.00], [0.10, 0.30, 0.15], [0.00, 0.25, 0.40]])
SIGMA = np.array([[1.0, 0.35, 0.10], [0.35, 1.5, -0.30], [0.10, -0.30, 0.8]])


def simulate(T: int, seed: int, n: int = 3) -> np.ndarray:
    rng = np.random.default_rng(seed)
    a = A if n == 3 else 0.35 * np.eye(n) + 0.05
    s = SIGMA if n == 3 else np.eye(n) + 0.3
    chol = np.linalg.cholesky(s)
    y = np.zeros((T + 100, n))
    for t in range(1, T + 100):
        y[t] = a @ y[t - 1] + chol @ rng.standard_normal(n)
    return y[100:]


def business_days(start: dt.date, count: int) -> list[dt.date]:
    out, d = [], start
    while len(out) < count:
        if d.weekday() < 5:
            out.append(d)
        d += dt.timedelta(days=1)
    return out


def add_universe(con: duckdb.DuckDBPyConnection, name: str, *, n: int = 3, T: int = 220,
                 window: int = 120, step: int = 10, horizon: int = 8, seed: int = 7,
                 store_arrays: bool = True, skip_last: bool = False, run_id: str = "run-test-1",
                 identification: str = "cholesky", draws: int = 30,
                 bands: str = "bootstrap") -> dict:
    """Fit `name` window by window with arlib and insert every result table's rows."""
    names = [f"s{i}" for i in range(n)] if n != 3 else ["alpha", "beta", "gamma"]
    y = simulate(T, seed, n)
    dates = business_days(dt.date(2023, 1, 2), T)
    config = {"window": window, "step": step, "lags": 1, "trend": "c", "horizon": horizon,
              "bands": {"method": bands, "draws": draws, "seed": 3, "coverage": 0.9}}
    con.execute("INSERT INTO universes VALUES (?, ?, ?, ?, ?, ?, ?)",
                [name, f"cfg-{name}", json.dumps(config), horizon, 0.05, identification, run_id])
    for i, s in enumerate(names):
        con.execute("INSERT INTO universe_series VALUES (?, ?, ?, ?)", [name, i, s, "log_return"])
    con.executemany("INSERT INTO prepared VALUES (?, ?, ?, ?)",
                    [[name, dates[t], s, float(y[t, i])] for t in range(T) for i, s in enumerate(names)])
    con.executemany("INSERT INTO observations VALUES (?, ?, ?, ?, ?)",
                    [[s, dates[t], float(y[t, i]), "sim", "batch-1"] for t in range(0, T, 50)
                     for i, s in enumerate(names)])
    ends = list(range(window - 1, T, step))
    fitted = skipped = 0
    rng = np.random.default_rng(11)
    for k, e in enumerate(ends):
        we, ws = dates[e], dates[e - window + 1]
        if skip_last and k == len(ends) - 1:
            con.execute("INSERT INTO window_fits VALUES (?, ?, ?, ?, ?, NULL, NULL, NULL, NULL, "
                        "NULL, NULL, NULL, NULL, NULL, ?)",
                        [run_id, name, we, ws, window, "too few rows after gaps: 40 of 120"])
            skipped += 1
            continue
        rows = y[e - window + 1: e + 1]
        fit = arlib.fit_var(rows, 1, names=names)
        conn = arlib.connectedness(fit, horizon)
        con.execute("INSERT INTO window_fits VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, NULL)",
                    [run_id, name, we, ws, fit.nobs, 1, fit.spectral_radius, bool(fit.is_stable),
                     fit.aic, fit.bic, fit.hq, fit.fpe, float(np.linalg.cond(fit.sigma_u)), 0.4])
        con.execute("INSERT INTO connectedness VALUES (?, ?, ?, ?)", [run_id, name, we, conn.total])
        for i, s in enumerate(names):
            con.execute("INSERT INTO directional VALUES (?, ?, ?, ?, ?, ?, ?)",
                        [run_id, name, we, s, float(conn.to_others[i]),
                         float(conn.from_others[i]), float(conn.net[i])])
            for j, src in enumerate(names):
                con.execute("INSERT INTO pairwise VALUES (?, ?, ?, ?, ?, ?)",
                            [run_id, name, we, src, s, float(conn.table[i, j])])
                if i != j:
                    g = arlib.granger_test(fit, i, j)
                    con.execute("INSERT INTO granger VALUES (?, ?, ?, ?, ?, ?, ?)",
                                [run_id, name, we, s, src, float(g.f_stat), float(g.p_value)])
        con.execute("INSERT INTO window_params (run_id, universe, window_end, lags, coefs, intercept, "
                    "sigma_u) VALUES (?, ?, ?, ?, ?, ?, ?)",
                    [run_id, name, we, 1, fit.coefs.ravel().tolist(), fit.intercept.tolist(),
                     fit.sigma_u.ravel().tolist()])
        if store_arrays:
            resp = arlib.impulse_responses(fit, horizon, shocks=identification)
            # A small residual bootstrap for the bands (percentile, `draws` replications).
            sims = []
            for _ in range(draws):
                u = fit.resid[rng.integers(0, fit.nobs, fit.nobs)]
                yb = np.empty_like(rows)
                yb[0] = rows[0]
                for t in range(1, window):
                    yb[t] = fit.intercept + fit.coefs[0] @ yb[t - 1] + u[t - 1]
                sims.append(arlib.impulse_responses(arlib.fit_var(yb, 1), horizon,
                                                    shocks=identification))
            lo, hi = np.percentile(np.stack(sims), [5, 95], axis=0)
            con.execute("INSERT INTO responses VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
                        [run_id, name, we, identification, horizon, resp.ravel().tolist(),
                         lo.ravel().tolist(), hi.ravel().tolist(), 0.9])
            for m in ("cholesky", "generalized"):
                share = arlib.variance_decomposition(fit, horizon, method=m)
                con.execute("INSERT INTO decompositions VALUES (?, ?, ?, ?, ?, ?)",
                            [run_id, name, we, m, horizon, share.ravel().tolist()])
        fitted += 1
    con.execute("INSERT INTO runs VALUES (?, ?, 'succeeded', ?, ?, ?, ?, ?, ?, ?, 0, NULL)",
                [run_id, name, dt.datetime(2024, 1, 5, 22, 0, 1), dt.datetime(2024, 1, 5, 22, 0, 9),
                 f"cfg-{name}", "fp-0123abcd", "0.1.0+test", fitted, skipped])
    return {"names": names, "dates": dates, "ends": [dates[e] for e in ends]}


def build_snapshot(path: Path, universes: dict[str, dict]) -> Path:
    """Write a snapshot file at `path` with the given universes (name → add_universe kwargs)."""
    con = duckdb.connect(str(path))
    try:
        con.execute(DDL)
        con.execute("INSERT INTO ingest_batches VALUES ('batch-1', 'sim', ?, ?, 'succeeded', "
                    "100, 100, 0, NULL)",
                    [dt.datetime(2024, 1, 5, 21, 0), dt.datetime(2024, 1, 5, 21, 1)])
        for name, kw in universes.items():
            add_universe(con, name, **kw)
    finally:
        con.close()
    return path


def test_builder_writes_arlib_numbers(tmp_path: Path) -> None:
    """The builder's stored total equals arlib's on the same rows (so the fixture is honest)."""
    path = build_snapshot(tmp_path / "s.duckdb", {"u": {"T": 140, "window": 120, "step": 10,
                                                       "draws": 5}})
    con = duckdb.connect(str(path), read_only=True)
    try:
        ends, totals = zip(*con.execute(
            "SELECT window_end, total FROM connectedness ORDER BY window_end").fetchall(), strict=True)
    finally:
        con.close()
    y = simulate(140, 7)
    expected = [arlib.connectedness(arlib.fit_var(y[e - 119: e + 1], 1), 8).total
                for e in range(119, 140, 10)]
    np.testing.assert_allclose(totals, expected, rtol=0, atol=1e-12)
    assert len(ends) == 3
