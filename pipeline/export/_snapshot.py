"""Read-only access to the serving snapshot for one universe (schema: docs/warehouse.md).

The snapshot is opened with `read_only=True` and every query is parameterised: universe names and
dates travel as bound parameters, never formatted into SQL text. Table names are the only
identifiers in the SQL and come from the fixed set below, never from input.

Every reader returns a polars DataFrame; array columns (`DOUBLE[]`) come back as list columns and
are reshaped by the caller with the shape documented in docs/warehouse.md.
"""

from __future__ import annotations

import datetime as dt
import json
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import duckdb
import numpy as np
import polars as pl

from pipeline.errors import ExportError, from_duckdb

__all__ = ["Snapshot", "UniverseInfo", "open_snapshot"]

#: Tables a report needs; the others are used when present and said to be missing when not.
REQUIRED_TABLES = ("universes", "universe_series", "window_fits", "connectedness", "directional",
                   "pairwise", "granger", "runs")
OPTIONAL_TABLES = ("window_params", "responses", "decompositions", "prepared", "dropped_dates",
                   "ingest_batches", "observations")


@dataclass(frozen=True)
class UniverseInfo:
    """What the snapshot says about one universe: its series order and the settings of its fits."""

    name: str
    series: tuple[str, ...]
    transforms: tuple[str, ...]
    horizon: int
    granger_level: float
    identification: str
    config_hash: str
    config: dict[str, Any]
    run_id: str | None

    @property
    def n(self) -> int:
        return len(self.series)


class Snapshot:
    """A read-only connection to the serving snapshot. Use as a context manager."""

    def __init__(self, path: str | Path) -> None:
        self.path = Path(path)
        if not self.path.is_file():
            msg = (
                f"serving snapshot {self.path} does not exist; run `shockflow run --config FILE` "
                "first (it publishes the snapshot), or pass the snapshot path from `[warehouse] snapshot`"
            )
            raise ExportError(msg)
        try:
            self._con = duckdb.connect(str(self.path), read_only=True)
        except duckdb.Error as exc:
            raise from_duckdb(exc, path=self.path, action="opening the serving snapshot read-only") from exc
        rows = self._con.sql(
            "SELECT table_name FROM information_schema.tables WHERE table_schema = 'main'"
        ).fetchall()
        self.tables = frozenset(r[0] for r in rows)
        missing = [t for t in REQUIRED_TABLES if t not in self.tables]
        if missing:
            self._con.close()
            msg = (
                f"serving snapshot {self.path} lacks table(s) {', '.join(missing)}; it was not "
                "written by `shockflow run` of this version (see docs/warehouse.md)"
            )
            raise ExportError(msg)

    # -- plumbing ---------------------------------------------------------------------------------
    def close(self) -> None:
        self._con.close()

    def __enter__(self) -> Snapshot:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def has(self, table: str) -> bool:
        return table in self.tables

    def query(self, sql: str, params: list[Any] | None = None) -> pl.DataFrame:
        """Run one parameterised SELECT; `params` are bound, never formatted into `sql`."""
        try:
            return self._con.sql(sql, params=params or []).pl()
        except duckdb.Error as exc:
            raise from_duckdb(exc, path=self.path, action="reading the serving snapshot") from exc

    # -- universes --------------------------------------------------------------------------------
    def universe_names(self) -> list[str]:
        return self.query("SELECT universe FROM universes ORDER BY universe")["universe"].to_list()

    def universe(self, name: str) -> UniverseInfo:
        row = self.query(
            "SELECT universe, config_hash, config_json, horizon, granger_level, identification, "
            "run_id FROM universes WHERE universe = ?",
            [name],
        )
        if row.height == 0:
            known = self.universe_names()
            msg = (
                f"universe {name!r} is not in serving snapshot {self.path}; "
                f"known universes: {', '.join(map(repr, known)) or 'none'}"
            )
            raise ExportError(msg)
        series = self.query(
            "SELECT series, transform FROM universe_series WHERE universe = ? ORDER BY position",
            [name],
        )
        if series.height == 0:
            msg = f"universe {name!r} has no rows in `universe_series` of snapshot {self.path}"
            raise ExportError(msg)
        r = row.row(0, named=True)
        try:
            config = json.loads(r["config_json"]) if r["config_json"] else {}
        except json.JSONDecodeError:
            config = {}
        return UniverseInfo(
            name=name,
            series=tuple(series["series"].to_list()),
            transforms=tuple(str(t) for t in series["transform"].to_list()),
            horizon=int(r["horizon"]),
            granger_level=float(r["granger_level"]),
            identification=str(r["identification"]),
            config_hash=str(r["config_hash"]),
            config=config if isinstance(config, dict) else {},
            run_id=r["run_id"],
        )

    # -- windows ----------------------------------------------------------------------------------
    def latest_window(self, universe: str, as_of: dt.date | None) -> dt.date | None:
        """Last window end (fitted or skipped) on or before `as_of` (any date when None)."""
        df = self.query(
            "SELECT max(window_end) AS w FROM window_fits WHERE universe = ? "
            "AND (CAST(? AS DATE) IS NULL OR window_end <= CAST(? AS DATE))",
            [universe, as_of, as_of],
        )
        return df["w"][0]

    def latest_fitted_window(self, universe: str, as_of: dt.date) -> dt.date | None:
        """Last window end on or before `as_of` that has a connectedness row (was fitted)."""
        df = self.query(
            "SELECT max(window_end) AS w FROM connectedness WHERE universe = ? AND window_end <= ?",
            [universe, as_of],
        )
        return df["w"][0]

    def _history(self, table: str, columns: str, universe: str, as_of: dt.date,
                 order: str = "window_end") -> pl.DataFrame:
        # `table`, `columns` and `order` are literals from this module, never input.
        return self.query(
            f"SELECT {columns} FROM {table} WHERE universe = ? AND window_end <= ? ORDER BY {order}",
            [universe, as_of],
        )

    def connectedness(self, universe: str, as_of: dt.date) -> pl.DataFrame:
        return self._history("connectedness", "run_id, universe, window_end, total", universe, as_of)

    def directional(self, universe: str, as_of: dt.date) -> pl.DataFrame:
        return self._history(
            "directional", "run_id, universe, window_end, series, to_others, from_others, net",
            universe, as_of, order="window_end, series",
        )

    def pairwise(self, universe: str, as_of: dt.date) -> pl.DataFrame:
        return self._history(
            "pairwise", "run_id, universe, window_end, source, target, share",
            universe, as_of, order="window_end, target, source",
        )

    def granger(self, universe: str, as_of: dt.date) -> pl.DataFrame:
        return self._history(
            "granger", "run_id, universe, window_end, caused, causing, f_stat, p_value",
            universe, as_of, order="window_end, caused, causing",
        )

    def window_fits(self, universe: str, as_of: dt.date) -> pl.DataFrame:
        return self._history(
            "window_fits",
            "run_id, universe, window_end, window_start, nobs, lags, spectral_radius, stable, "
            "aic, bic, hq, fpe, condition_number, portmanteau_p, skip_reason",
            universe, as_of,
        )

    def window_params(self, universe: str, window_end: dt.date) -> pl.DataFrame:
        if not self.has("window_params"):
            return pl.DataFrame()
        return self.query(
            "SELECT run_id, universe, window_end, lags, coefs, intercept, sigma_u "
            "FROM window_params WHERE universe = ? AND window_end = ?",
            [universe, window_end],
        )

    def responses(self, universe: str, window_end: dt.date) -> pl.DataFrame:
        if not self.has("responses"):
            return pl.DataFrame()
        return self.query(
            "SELECT run_id, universe, window_end, identification, horizon, response, lower, upper, "
            "coverage FROM responses WHERE universe = ? AND window_end = ? ORDER BY identification",
            [universe, window_end],
        )

    def decompositions(self, universe: str, window_end: dt.date) -> pl.DataFrame:
        if not self.has("decompositions"):
            return pl.DataFrame()
        return self.query(
            "SELECT run_id, universe, window_end, method, horizon, share FROM decompositions "
            "WHERE universe = ? AND window_end = ? ORDER BY method",
            [universe, window_end],
        )

    def prepared_matrix(self, universe: str, info: UniverseInfo, start: dt.date,
                        end: dt.date) -> tuple[list[dt.date], np.ndarray] | None:
        """The prepared rows a window was fitted on, as (dates, y of shape (T, n)), or None."""
        if not self.has("prepared"):
            return None
        df = self.query(
            "SELECT date, series, value FROM prepared WHERE universe = ? AND date BETWEEN ? AND ? "
            "ORDER BY date",
            [universe, start, end],
        )
        if df.height == 0:
            return None
        wide = df.pivot(on="series", index="date", values="value").sort("date")
        if any(s not in wide.columns for s in info.series):
            return None
        wide = wide.drop_nulls()
        y = wide.select(list(info.series)).to_numpy().astype(np.float64)
        return wide["date"].to_list(), y

    # -- lineage ----------------------------------------------------------------------------------
    def runs(self, universe: str) -> pl.DataFrame:
        return self.query(
            "SELECT run_id, universe, status, started, finished, config_hash, data_fingerprint, "
            "code_version, windows_fitted, windows_skipped, windows_failed, message "
            "FROM runs WHERE universe = ? ORDER BY started DESC",
            [universe],
        )

    def source_batches(self, universe: str, as_of: dt.date,
                       before: dt.datetime | None = None) -> pl.DataFrame:
        """Ingest batches behind the universe's results, newest first.

        With `observations` in the snapshot: exactly the batches that supplied the universe's
        series up to `as_of`. Without it (the published snapshot leaves observations in the
        working warehouse): the batches that started before `before` (the run's finish), i.e.
        the data the run could have read. Empty when the snapshot has no `ingest_batches`.
        """
        if not self.has("ingest_batches"):
            return pl.DataFrame()
        cols = ("b.batch_id, b.source, b.started, b.finished, b.status, b.rows_read, b.rows_new, "
                "b.rows_revised, b.message")
        if self.has("observations"):
            return self.query(
                f"SELECT {cols} FROM ingest_batches b WHERE b.batch_id IN ("
                "SELECT DISTINCT o.batch_id FROM observations o JOIN universe_series s "
                "ON o.series = s.series WHERE s.universe = ? AND o.date <= ?) "
                "ORDER BY b.started DESC",
                [universe, as_of],
            )
        return self.query(
            f"SELECT {cols} FROM ingest_batches b "
            "WHERE CAST(? AS TIMESTAMP) IS NULL OR b.started <= CAST(? AS TIMESTAMP) "
            "ORDER BY b.started DESC",
            [before, before],
        )


def open_snapshot(path: str | Path) -> Snapshot:
    """Open the serving snapshot read-only; raises `ExportError` (or `WarehouseError` from DuckDB) naming the file and the fix."""
    return Snapshot(path)
