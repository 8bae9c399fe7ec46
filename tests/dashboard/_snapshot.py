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
from typing import Any

import duckdb
import numpy as np
import polars as pl

import arlib

SERIES = ("EQ_HOME", "EQ_ABROAD", "RATE_10Y", "FX_HOME")

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


def _insert(con: duckdb.DuckDBPyConnection, table: str, rows: list[dict[str, Any]]) -> None:
    """Insert rows (dicts keyed by column name) in one statement through a polars frame."""
    if not rows:
        return
    frame = pl.DataFrame(rows, infer_schema_length=None)
    con.register("_rows", frame.to_arrow())
    con.execute(f"INSERT INTO {table} BY NAME SELECT * FROM _rows")
    con.unregister("_rows")


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
    """Write a complete snapshot to `path` (via a temporary file and os.replace, as publish does).

    The schema is the pipeline's own (`pipeline.warehouse.ensure_schema`).
    """
    from pipeline.warehouse import ensure_schema

    path = Path(path)
    tmp = path.with_name(path.name + ".writing")
    if tmp.exists():
        tmp.unlink()
    days, y = simulate(T, seed=seed)
    y = y * scale
    n = y.shape[1]
    con = duckdb.connect(str(tmp))
    ensure_schema(con, path=tmp)
    now = dt.datetime(2024, 1, 2, 3, 4, 5)
    tables: dict[str, list[dict[str, Any]]] = {name: [] for name in (
        "universes", "universe_series", "prepared", "window_fits", "window_params", "connectedness",
        "directional", "pairwise", "granger", "responses", "decompositions", "runs",
    )}  # fmt: skip
    key = {"run_id": run_id, "universe": universe}
    tables["universes"].append({
        "universe": universe, "config_hash": "hash", "config_json": "{}", "horizon": horizon,
        "granger_level": 0.05, "identification": "generalized", "run_id": run_id,
    })  # fmt: skip
    tables["universe_series"] = [
        {"universe": universe, "position": i, "series": name, "transform": "diff"}
        for i, name in enumerate(SERIES)
    ]
    tables["prepared"] = [
        {"universe": universe, "date": days[t], "series": SERIES[i], "value": float(y[t, i])}
        for t in range(T) for i in range(n)
    ]  # fmt: skip
    ends = list(range(window - 1, T, step))
    skipped_at = ends[len(ends) // 3]
    fitted = skipped = 0
    for e in ends:
        start, end = days[e - window + 1], days[e]
        at = {**key, "window_end": end}
        if e == skipped_at:
            tables["window_fits"].append({
                **at, "window_start": start, "nobs": window, "lags": lags,
                "skip_reason": "collinear series in this window (simulated for the test snapshot)",
            })  # fmt: skip
            skipped += 1
            continue
        data = y[e - window + 1 : e + 1]
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", arlib.UnstableProcessWarning)
            fit = arlib.fit_var(data, lags, names=SERIES)
        tables["window_fits"].append({
            **at, "window_start": start, "nobs": fit.nobs, "lags": lags,
            "spectral_radius": fit.spectral_radius, "stable": bool(fit.is_stable), "aic": fit.aic,
            "bic": fit.bic, "hq": fit.hq, "fpe": fit.fpe,
            "condition_number": float(np.linalg.cond(fit.sigma_u)),
            "portmanteau_p": float(0.5 + 0.45 * np.sin(e)),
        })  # fmt: skip
        tables["window_params"].append({
            **at, "lags": lags, "coefs": fit.coefs.ravel().tolist(),
            "intercept": fit.intercept.ravel().tolist(), "sigma_u": fit.sigma_u.ravel().tolist(),
        })  # fmt: skip
        conn = arlib.connectedness(fit, horizon)
        tables["connectedness"].append({**at, "total": conn.total})
        tables["directional"] += [
            {**at, "series": SERIES[i], "to_others": float(conn.to_others[i]),
             "from_others": float(conn.from_others[i]), "net": float(conn.net[i])}
            for i in range(n)
        ]  # fmt: skip
        tables["pairwise"] += [
            {**at, "source": SERIES[j], "target": SERIES[i], "share": float(conn.table[i, j])}
            for i in range(n) for j in range(n)
        ]  # fmt: skip
        for i in range(n):
            for j in range(n):
                if i != j:
                    g = arlib.granger_test(fit, i, j)
                    tables["granger"].append({**at, "caused": SERIES[i], "causing": SERIES[j],
                                              "f_stat": g.f_stat, "p_value": g.p_value})  # fmt: skip
        for ident in ("generalized", "cholesky"):
            resp = arlib.impulse_responses(fit, horizon, shocks=ident)
            row: dict[str, Any] = {**at, "identification": ident, "horizon": horizon,
                                   "response": resp.ravel().tolist()}  # fmt: skip
            if ident == "generalized":
                band = arlib.irf_bands(fit, horizon, shocks=ident, draws=50, rng=e)
                row.update(lower=np.asarray(band.lower).ravel().tolist(),
                           upper=np.asarray(band.upper).ravel().tolist(), coverage=band.coverage)
            tables["responses"].append(row)
            dec = arlib.variance_decomposition(fit, horizon, method=ident)
            tables["decompositions"].append({**at, "method": ident, "horizon": horizon,
                                             "share": dec.ravel().tolist()})  # fmt: skip
        fitted += 1
    tables["runs"].append({
        **key, "status": "succeeded", "started": now, "finished": now, "config_hash": "hash",
        "data_fingerprint": "fp", "code_version": "test", "windows_fitted": fitted,
        "windows_skipped": skipped, "windows_failed": 0,
    })  # fmt: skip
    for name, rows in tables.items():
        _insert(con, name, rows)
    con.close()
    os.replace(tmp, path)
    return path
