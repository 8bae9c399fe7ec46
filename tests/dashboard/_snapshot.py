"""A small serving snapshot written from arlib results, following docs/warehouse.md.

Used while (and where) the real pipeline cannot run: a simulated 4-series VAR(1) whose cross-series
coefficients and shock correlation rise during an invented stress spell, refitted over rolling
windows with arlib, stored in the snapshot's tables with the documented column names and array
layouts. One window is stored as skipped (with its reason) so the health view has one to show.
The data are simulated, not market data.
"""

from __future__ import annotations

import datetime as dt
import os
import warnings
from pathlib import Path

import duckdb
import numpy as np

import arlib

SERIES = ("EQ_HOME", "EQ_ABROAD", "RATE_10Y", "FX_HOME")

DDL = """
CREATE TABLE runs (run_id VARCHAR, universe VARCHAR, status VARCHAR, started TIMESTAMP,
    finished TIMESTAMP, config_hash VARCHAR, data_fingerprint VARCHAR, code_version VARCHAR,
    windows_fitted INTEGER, windows_skipped INTEGER, windows_failed INTEGER, message VARCHAR);
CREATE TABLE universes (universe VARCHAR, config_hash VARCHAR, config_json VARCHAR,
    horizon INTEGER, granger_level DOUBLE, identification VARCHAR, run_id VARCHAR);
CREATE TABLE universe_series (universe VARCHAR, position INTEGER, series VARCHAR,
    transform VARCHAR);
CREATE TABLE prepared (universe VARCHAR, date DATE, series VARCHAR, value DOUBLE);
CREATE TABLE window_fits (run_id VARCHAR, universe VARCHAR, window_end DATE, window_start DATE,
    nobs INTEGER, lags INTEGER, spectral_radius DOUBLE, stable BOOLEAN, aic DOUBLE, bic DOUBLE,
    hq DOUBLE, fpe DOUBLE, condition_number DOUBLE, portmanteau_p DOUBLE, skip_reason VARCHAR);
CREATE TABLE connectedness (run_id VARCHAR, universe VARCHAR, window_end DATE, total DOUBLE);
CREATE TABLE directional (run_id VARCHAR, universe VARCHAR, window_end DATE, series VARCHAR,
    to_others DOUBLE, from_others DOUBLE, net DOUBLE);
CREATE TABLE pairwise (run_id VARCHAR, universe VARCHAR, window_end DATE, source VARCHAR,
    target VARCHAR, share DOUBLE);
CREATE TABLE granger (run_id VARCHAR, universe VARCHAR, window_end DATE, caused VARCHAR,
    causing VARCHAR, f_stat DOUBLE, p_value DOUBLE);
CREATE TABLE window_params (run_id VARCHAR, universe VARCHAR, window_end DATE, lags INTEGER,
    coefs DOUBLE[], intercept DOUBLE[], sigma_u DOUBLE[]);
CREATE TABLE responses (run_id VARCHAR, universe VARCHAR, window_end DATE,
    identification VARCHAR, horizon INTEGER, response DOUBLE[], lower DOUBLE[], upper DOUBLE[],
    coverage DOUBLE);
CREATE TABLE decompositions (run_id VARCHAR, universe VARCHAR, window_end DATE, method VARCHAR,
    horizon INTEGER, share DOUBLE[]);
"""


def simulate(T: int = 560, *, seed: int = 7) -> tuple[list[dt.date], np.ndarray]:
    """(dates, y (T, 4)): a VAR(1) whose spillovers rise during the middle fifth of the sample."""
    rng = np.random.default_rng(seed)
    calm = np.diag([0.15, 0.10, 0.20, 0.05])
    stress = calm + np.array(
        [[0.0, 0.25, 0.0, 0.0], [0.30, 0.0, 0.0, 0.0], [0.15, 0.10, 0.0, 0.0], [0.1, 0.0, 0.2, 0.0]]
    )
    y = np.zeros((T, 4))
    days = []
    day = dt.date(2020, 1, 1)
    for t in range(T):
        while day.weekday() >= 5:
            day += dt.timedelta(days=1)
        days.append(day)
        day += dt.timedelta(days=1)
        s = 1.0 if 0.4 * T <= t < 0.6 * T else 0.0
        A = calm + s * (stress - calm)
        rho = 0.2 + 0.5 * s
        corr = np.full((4, 4), rho) + (1 - rho) * np.eye(4)
        shock = rng.multivariate_normal(np.zeros(4), corr)
        y[t] = (A @ y[t - 1] if t else 0.0) + shock
    return days, y


def write_snapshot(
    path: str | os.PathLike[str],
    *,
    universe: str = "demo_four",
    seed: int = 7,
    T: int = 560,
    window: int = 160,
    step: int = 10,
    lags: int = 1,
    horizon: int = 10,
    run_id: str = "run-0001",
    scale: float = 1.0,
) -> Path:
    """Write a complete snapshot to `path` (via a temporary file and os.replace, as publish does)."""
    path = Path(path)
    tmp = path.with_name(path.name + ".writing")
    if tmp.exists():
        tmp.unlink()
    days, y = simulate(T, seed=seed)
    y = y * scale
    n = y.shape[1]
    con = duckdb.connect(str(tmp))
    con.execute(DDL)
    now = dt.datetime(2024, 1, 2, 3, 4, 5)
    con.execute(
        "INSERT INTO universes VALUES (?, 'hash', '{}', ?, 0.05, 'generalized', ?)",
        [universe, horizon, run_id],
    )
    con.executemany(
        "INSERT INTO universe_series VALUES (?, ?, ?, 'diff')",
        [[universe, i, s] for i, s in enumerate(SERIES)],
    )
    con.executemany(
        "INSERT INTO prepared VALUES (?, ?, ?, ?)",
        [[universe, days[t], SERIES[i], float(y[t, i])] for t in range(T) for i in range(n)],
    )
    ends = list(range(window - 1, T, step))
    skipped_at = ends[len(ends) // 3]
    fitted = skipped = 0
    for e in ends:
        start, end = days[e - window + 1], days[e]
        if e == skipped_at:
            con.execute(
                "INSERT INTO window_fits VALUES (?, ?, ?, ?, ?, ?, NULL, NULL, NULL, NULL, NULL, "
                "NULL, NULL, NULL, ?)",
                [run_id, universe, end, start, window, lags,
                 "collinear series in this window (simulated for the test snapshot)"],
            )  # fmt: skip
            skipped += 1
            continue
        data = y[e - window + 1 : e + 1]
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", arlib.UnstableProcessWarning)
            fit = arlib.fit_var(data, lags, names=SERIES)
        con.execute(
            "INSERT INTO window_fits VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, NULL)",
            [run_id, universe, end, start, fit.nobs, lags, fit.spectral_radius, fit.is_stable,
             fit.aic, fit.bic, fit.hq, fit.fpe, float(np.linalg.cond(fit.sigma_u)),
             float(0.5 + 0.45 * np.sin(e))],
        )  # fmt: skip
        con.execute(
            "INSERT INTO window_params VALUES (?, ?, ?, ?, ?, ?, ?)",
            [run_id, universe, end, lags, fit.coefs.ravel().tolist(), fit.intercept.ravel().tolist(),
             fit.sigma_u.ravel().tolist()],
        )  # fmt: skip
        conn = arlib.connectedness(fit, horizon)
        con.execute("INSERT INTO connectedness VALUES (?, ?, ?, ?)", [run_id, universe, end, conn.total])
        con.executemany(
            "INSERT INTO directional VALUES (?, ?, ?, ?, ?, ?, ?)",
            [[run_id, universe, end, SERIES[i], float(conn.to_others[i]),
              float(conn.from_others[i]), float(conn.net[i])] for i in range(n)],
        )  # fmt: skip
        con.executemany(
            "INSERT INTO pairwise VALUES (?, ?, ?, ?, ?, ?)",
            [[run_id, universe, end, SERIES[j], SERIES[i], float(conn.table[i, j])]
             for i in range(n) for j in range(n)],
        )  # fmt: skip
        rows = []
        for i in range(n):
            for j in range(n):
                if i != j:
                    g = arlib.granger_test(fit, i, j)
                    rows.append([run_id, universe, end, SERIES[i], SERIES[j], g.f_stat, g.p_value])
        con.executemany("INSERT INTO granger VALUES (?, ?, ?, ?, ?, ?, ?)", rows)
        for ident in ("generalized", "cholesky"):
            resp = arlib.impulse_responses(fit, horizon, shocks=ident)
            con.execute(
                "INSERT INTO responses VALUES (?, ?, ?, ?, ?, ?, NULL, NULL, NULL)",
                [run_id, universe, end, ident, horizon, resp.ravel().tolist()],
            )
            dec = arlib.variance_decomposition(fit, horizon, method=ident)
            con.execute(
                "INSERT INTO decompositions VALUES (?, ?, ?, ?, ?, ?)",
                [run_id, universe, end, ident, horizon, dec.ravel().tolist()],
            )
        fitted += 1
    con.execute(
        "INSERT INTO runs VALUES (?, ?, 'succeeded', ?, ?, 'hash', 'fp', 'test', ?, ?, 0, NULL)",
        [run_id, universe, now, now, fitted, skipped],
    )
    con.close()
    os.replace(tmp, path)
    return path
