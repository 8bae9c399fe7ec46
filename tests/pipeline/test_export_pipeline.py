"""Export on a serving snapshot produced by the real pipeline (ingest → fit → store → publish, the
plain functions the nightly flow's tasks wrap), on the invented Veloria demo market in
data_samples/ (simulated, not market data).

Checks: the report's numbers are the snapshot's (spillover table, Granger, stored responses and
bands, decompositions, connectedness history), the extracts equal the tables, the lineage names the
run, and the PDF prints.
"""

from __future__ import annotations

import textwrap
from pathlib import Path

import numpy as np
import polars as pl
import pytest
from polars.testing import assert_frame_equal

from pipeline import jobs
from pipeline.config import Config, load_config
from pipeline.export import CAUTION, export_universe, pdf_page_count
from tests.pipeline.test_export import (
    plotly_traces,
    response_panels,
    snapshot_frame,
    table_values,
    trace_array,
)

DEMO = Path(__file__).resolve().parents[2] / "data_samples" / "markets_wide.csv"
UNIVERSE = "veloria equity & ore"
SERIES = ["VLX_BROAD", "VLX_BANKS", "VOB_ORE"]


@pytest.fixture(scope="module")
def config(tmp_path_factory: pytest.TempPathFactory) -> Config:
    folder = tmp_path_factory.mktemp("pipeline")
    path = folder / "shockflow.toml"
    path.write_text(textwrap.dedent(f"""
        [warehouse]
        path = "wh.duckdb"
        snapshot = "serving.duckdb"

        [[sources]]
        name = "veloria-markets"
        kind = "csv"
        path = "{DEMO}"

        [[universes]]
        name = "{UNIVERSE}"
        series = {SERIES!r}
        window = 250
        step = 60
        lags = 2
        horizon = 10
        identification = "cholesky"
        bands = {{ method = "bootstrap", draws = 60, seed = 4, coverage = 0.9 }}

        [export]
        directory = "exports"
        formats = ["html", "csv", "parquet"]
        """), encoding="utf-8")
    return load_config(path)


@pytest.fixture(scope="module")
def published(config: Config) -> Path:
    for source in config.sources:
        assert jobs.ingest_source(config.warehouse.path, source).status == "succeeded"
    result = jobs.run_universe(config.warehouse.path, config.universe(UNIVERSE))
    assert result.status == "succeeded", result.message
    jobs.publish_step(config)
    return config.warehouse.snapshot


@pytest.fixture(scope="module")
def report(published: Path, config: Config) -> tuple[str, list[Path]]:
    paths = export_universe(published, UNIVERSE, config.export.directory,
                            formats=("html", "csv", "parquet"))
    (html,) = [p for p in paths if p.suffix == ".html"]
    return html.read_text(encoding="utf-8"), paths


def _latest(snap: Path) -> object:
    return snapshot_frame(snap, "SELECT max(window_end) AS w FROM connectedness WHERE universe = ?",
                          [UNIVERSE])["w"][0]


def test_report_sits_under_the_latest_window_date(published: Path, config: Config,
                                                   report: tuple[str, list[Path]]) -> None:
    _, paths = report
    last = snapshot_frame(published, "SELECT max(window_end) AS w FROM window_fits WHERE "
                          "universe = ?", [UNIVERSE])["w"][0]
    root = config.export.directory.resolve()
    # the name sanitised, with the first 8 hex digits of sha256("veloria equity & ore") (pipeline.export)
    assert {p.parent for p in paths} == {root / last.isoformat() / "veloria_equity_ore-c1a12621"}


def test_report_numbers_are_the_pipeline_snapshot(published: Path,
                                                   report: tuple[str, list[Path]]) -> None:
    html, _ = report
    assert html.count(CAUTION) == 2
    w = _latest(published)
    pair = snapshot_frame(published, "SELECT source, target, share FROM pairwise WHERE "
                          "universe = ? AND window_end = ?", [UNIVERSE, w])
    rows = table_values(html, "spillover")
    for i, target in enumerate(SERIES):
        for j, source in enumerate(SERIES):
            cell = pair.filter((pl.col("target") == target) & (pl.col("source") == source))
            assert rows[i][j] == cell["share"][0]
    total = snapshot_frame(published, "SELECT total FROM connectedness WHERE universe = ? AND "
                           "window_end = ?", [UNIVERSE, w])["total"][0]
    assert rows[5][-1] == total

    g = snapshot_frame(published, "SELECT caused, causing, p_value FROM granger WHERE "
                       "universe = ? AND window_end = ?", [UNIVERSE, w])
    p_rows = table_values(html, "granger")
    for i, caused in enumerate(SERIES):
        for j, causing in enumerate(SERIES):
            if i != j:
                cell = g.filter((pl.col("caused") == caused) & (pl.col("causing") == causing))
                assert p_rows[i][j] == cell["p_value"][0]

    hist = snapshot_frame(published, "SELECT window_end, total FROM connectedness WHERE "
                          "universe = ? ORDER BY window_end", [UNIVERSE])
    (trace,) = plotly_traces(html, "fig-connectedness")
    np.testing.assert_array_equal(trace_array(trace["y"]), hist["total"].to_numpy())


def test_report_draws_the_runs_responses_and_bands(published: Path,
                                                   report: tuple[str, list[Path]]) -> None:
    html, _ = report
    w = _latest(published)
    r = snapshot_frame(published, "SELECT identification, horizon, response, lower, upper, coverage "
                       "FROM responses WHERE universe = ? AND window_end = ?", [UNIVERSE, w])
    n = len(SERIES)
    traces = plotly_traces(html, "fig-irf-0-0")
    if r.height:  # the run stored them
        row = r.row(0, named=True)
        H = row["horizon"]
        shape = (H + 1, n, n)
        resp = np.reshape(row["response"], shape)
        has_bands = row["lower"] is not None
        assert len(traces) == n * n * (2 if has_bands else 1)  # (band,) response per panel
        panels = response_panels(traces, list(SERIES))
        assert len(panels) == n * n
        for (i, j), p in panels.items():
            np.testing.assert_array_equal(p["response"], resp[:, i, j])
            if has_bands:
                np.testing.assert_array_equal(p["upper"], np.reshape(row["upper"], shape)[:, i, j])
                np.testing.assert_array_equal(p["lower"], np.reshape(row["lower"], shape)[:, i, j])
    else:  # derived from the stored parameters: the report says so
        assert len(traces) in (n * n, 2 * n * n)
        assert "derived with arlib" in html


def test_report_lineage_is_the_runs_row(published: Path, report: tuple[str, list[Path]]) -> None:
    html, _ = report
    run = snapshot_frame(published, "SELECT * FROM runs WHERE universe = ? AND status = "
                         "'succeeded' ORDER BY started DESC LIMIT 1", [UNIVERSE]).row(0, named=True)
    lineage = html[html.index('<section id="lineage"'):]
    for key in ("run_id", "config_hash", "data_fingerprint", "code_version"):
        assert str(run[key]) in lineage, key
    assert "veloria-markets" in lineage  # the source batch the run read


@pytest.mark.parametrize("table", ["connectedness", "directional", "pairwise", "granger",
                                   "window_fits"])
def test_pipeline_extracts_equal_the_tables(published: Path, report: tuple[str, list[Path]],
                                            table: str) -> None:
    _, paths = report
    files = {p.name: p for p in paths}
    expected = snapshot_frame(published, f"SELECT * FROM {table} WHERE universe = ?", [UNIVERSE])
    got = pl.read_parquet(files[f"{table}.parquet"]).select(expected.columns)
    assert_frame_equal(got.sort(pl.all()), expected.sort(pl.all()))
    got_csv = pl.read_csv(files[f"{table}.csv"], try_parse_dates=True,
                          schema_overrides=expected.schema).select(expected.columns)
    assert_frame_equal(got_csv.sort(pl.all()), expected.sort(pl.all()))


def test_pipeline_report_prints_to_pdf(published: Path, tmp_path: Path, chromium_path: str) -> None:
    paths = export_universe(published, UNIVERSE, tmp_path, formats=("html", "pdf"),
                            chromium_path=chromium_path)
    pdf = next(p for p in paths if p.suffix == ".pdf")
    assert pdf.read_bytes().startswith(b"%PDF-")
    pages = pdf_page_count(pdf)
    assert 3 <= pages <= 12, pages
