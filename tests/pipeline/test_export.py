"""Report exports on a hand-built snapshot (docs/warehouse.md schema, arlib numbers; see
test_export_snapshot_builder.py): every number shown equals the snapshot's, the HTML is
self-contained, extracts equal the tables, nothing is written outside `out_dir`.

The same checks on a snapshot the real pipeline produced are in test_export_pipeline.py.
"""

from __future__ import annotations

import datetime as dt
import json
import logging
import os
import re
import shutil
import subprocess
from html import unescape
from html.parser import HTMLParser
from pathlib import Path

import duckdb
import numpy as np
import polars as pl
import pytest
from polars.testing import assert_frame_equal

import arlib
from pipeline.errors import ExportError, ShockflowError
from pipeline.export import (
    CAUTION,
    EXTRACT_TABLES,
    export_all,
    export_universe,
    pdf_page_count,
    safe_dir_name,
)
from pipeline.export._paths import universe_dir
from tests.charts.grids import response_panels, trace_array
from tests.pipeline.test_export_snapshot_builder import build_snapshot

HTML_SECTIONS = ("glance", "connectedness", "spillovers", "responses", "decompositions",
                 "granger", "health", "lineage")


# -- helpers that read the written report back ----------------------------------------------------

class _Cells(HTMLParser):
    """Collects the `data-*` attributes of every <td> inside tables of a given class."""

    def __init__(self, table_class: str) -> None:
        super().__init__()
        self.want = table_class
        self.depth = 0
        self.rows: list[list[dict[str, str]]] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        a = {k: v or "" for k, v in attrs}
        if tag == "table":
            if self.depth or self.want in a.get("class", "").split():
                self.depth += 1
        elif self.depth and tag == "tr":
            self.rows.append([])
        elif self.depth and tag == "td":
            self.rows[-1].append(a)

    def handle_endtag(self, tag: str) -> None:
        if tag == "table" and self.depth:
            self.depth -= 1


def table_values(html: str, table_class: str, attr: str = "data-value") -> list[list[float]]:
    """Numbers (full precision, from `attr`) of the table's body rows; NaN for empty cells."""
    p = _Cells(table_class)
    p.feed(html)
    return [[float(c[attr]) if attr in c else np.nan for c in row] for row in p.rows if row]


def plotly_traces(html: str, div_id: str) -> list[dict]:
    """The trace list handed to `Plotly.newPlot` for the chart with id `div_id`."""
    m = re.search(r'Plotly\.newPlot\(\s*"' + re.escape(div_id) + r'",\s*', html)
    assert m, f"chart {div_id} not in report"
    traces, _ = json.JSONDecoder().raw_decode(html, m.end())
    return traces


def snapshot_frame(path: Path, sql: str, params: list) -> pl.DataFrame:
    con = duckdb.connect(str(path), read_only=True)
    try:
        return con.sql(sql, params=params).pl()
    finally:
        con.close()


# -- fixtures -------------------------------------------------------------------------------------

@pytest.fixture(scope="module")
def snap(tmp_path_factory: pytest.TempPathFactory) -> Path:
    path = tmp_path_factory.mktemp("snapshot") / "serving.duckdb"
    return build_snapshot(path, {
        "rates & fx": {"draws": 20},
        "derived": {"store_arrays": False, "skip_last": True, "seed": 9, "run_id": "run-test-2"},
        "../escape": {"T": 140, "store_arrays": False, "seed": 5, "run_id": "run-test-3",
                      "bands": "none"},
    })


@pytest.fixture(scope="module")
def exported(snap: Path, tmp_path_factory: pytest.TempPathFactory) -> dict[str, list[Path]]:
    out = tmp_path_factory.mktemp("exports")
    return export_all(snap, out, formats=("html", "csv", "parquet"))


def html_of(exported: dict[str, list[Path]], universe: str) -> str:
    (path,) = [p for p in exported[universe] if p.suffix == ".html"]
    return path.read_text(encoding="utf-8")


def latest(snap: Path, universe: str) -> dt.date:
    return snapshot_frame(snap, "SELECT max(window_end) AS w FROM connectedness WHERE universe = ?",
                          [universe])["w"][0]


# -- the HTML report ------------------------------------------------------------------------------

def test_html_is_self_contained(exported: dict[str, list[Path]]) -> None:
    html = html_of(exported, "rates & fx")
    # No external script, stylesheet, image or frame: every src/href is local or an anchor.
    for attr in re.findall(r'<(?:script|link|img|iframe)\b[^>]*\b(?:src|href)\s*=\s*"([^"]*)"', html):
        assert not attr.lower().startswith(("http:", "https:", "//")), attr
    assert not re.search(r"<script\b[^>]*\bsrc\s*=", html)  # no script loaded from anywhere
    # plotly.js inlined exactly once, every chart drawn with it.
    assert html.count("plotly.js v") == 1
    assert html.count("Plotly.newPlot(") >= 6
    assert '"displayModeBar": false' in html or '"displayModeBar":false' in html


def test_html_has_caution_and_every_section(exported: dict[str, list[Path]]) -> None:
    html = html_of(exported, "rates & fx")
    assert html.count(CAUTION) == 2  # under the title and in the footer
    for section in HTML_SECTIONS:
        assert f'<section id="{section}"' in html, section
    assert "break-inside: avoid" in html  # charts stay whole on a printed page


def test_spillover_table_equals_snapshot(snap: Path, exported: dict[str, list[Path]]) -> None:
    html = html_of(exported, "rates & fx")
    names = ["alpha", "beta", "gamma"]
    w = latest(snap, "rates & fx")
    pair = snapshot_frame(snap, "SELECT source, target, share FROM pairwise WHERE universe = ? "
                          "AND window_end = ?", ["rates & fx", w])
    direc = snapshot_frame(snap, "SELECT series, to_others, from_others, net FROM directional "
                           "WHERE universe = ? AND window_end = ?", ["rates & fx", w])
    total = snapshot_frame(snap, "SELECT total FROM connectedness WHERE universe = ? AND "
                           "window_end = ?", ["rates & fx", w])["total"][0]
    rows = table_values(html, "spillover")
    for i, target in enumerate(names):
        for j, source in enumerate(names):
            share = pair.filter((pl.col("target") == target) & (pl.col("source") == source))
            assert rows[i][j] == share["share"][0]
        assert rows[i][3] == direc.filter(pl.col("series") == target)["from_others"][0]
    for j, s in enumerate(names):
        d = direc.filter(pl.col("series") == s)
        assert rows[3][j] == d["to_others"][0]
        assert rows[4][j] == d["net"][0]
    assert rows[5][-1] == total
    # Shown to two decimals.
    assert f">{total:.2f}<" in html


def test_connectedness_chart_is_the_stored_history(snap: Path,
                                                   exported: dict[str, list[Path]]) -> None:
    html = html_of(exported, "rates & fx")
    stored = snapshot_frame(snap, "SELECT window_end, total FROM connectedness WHERE universe = ? "
                            "ORDER BY window_end", ["rates & fx"])
    (trace,) = plotly_traces(html, "fig-connectedness")
    assert trace["x"] == [d.isoformat() for d in stored["window_end"]]
    np.testing.assert_array_equal(trace_array(trace["y"]), stored["total"].to_numpy())


def test_granger_table_equals_snapshot(snap: Path, exported: dict[str, list[Path]]) -> None:
    html = html_of(exported, "rates & fx")
    names = ["alpha", "beta", "gamma"]
    g = snapshot_frame(snap, "SELECT caused, causing, f_stat, p_value FROM granger WHERE "
                       "universe = ? AND window_end = ?", ["rates & fx", latest(snap, "rates & fx")])
    p_rows = table_values(html, "granger")
    f_rows = table_values(html, "granger", "data-f")
    for i, caused in enumerate(names):
        for j, causing in enumerate(names):
            if i == j:
                assert np.isnan(p_rows[i][j])
                continue
            r = g.filter((pl.col("caused") == caused) & (pl.col("causing") == causing))
            assert p_rows[i][j] == r["p_value"][0]
            assert f_rows[i][j] == r["f_stat"][0]
    flagged = int((g["p_value"] < 0.05).sum())
    assert f'<span data-value="{flagged}">{flagged}</span> of 6 ordered pairs' in html


def test_stored_responses_and_bands_are_drawn(snap: Path, exported: dict[str, list[Path]]) -> None:
    html = html_of(exported, "rates & fx")
    r = snapshot_frame(snap, "SELECT horizon, response, lower, upper FROM responses WHERE "
                       "universe = ? AND window_end = ?", ["rates & fx", latest(snap, "rates & fx")])
    H = r["horizon"][0]
    resp, lo, hi = (np.asarray(r[c][0]).reshape(H + 1, 3, 3) for c in ("response", "lower", "upper"))
    traces = plotly_traces(html, "fig-irf-0-0")
    assert len(traces) == 9 * 2  # band, response per panel of the 3 × 3 grid
    panels = response_panels(traces, ["alpha", "beta", "gamma"])
    for (i, j), p in panels.items():
        np.testing.assert_array_equal(p["response"], resp[:, i, j])
        np.testing.assert_array_equal(p["lower"], lo[:, i, j])
        np.testing.assert_array_equal(p["upper"], hi[:, i, j])
    assert len(panels) == 9
    assert "90% band" in html


def test_stored_decompositions_are_shown(snap: Path, exported: dict[str, list[Path]]) -> None:
    html = html_of(exported, "rates & fx")
    d = snapshot_frame(snap, "SELECT method, horizon, share FROM decompositions WHERE universe = ? "
                       "AND window_end = ? ORDER BY method", ["rates & fx", latest(snap, "rates & fx")])
    rows = table_values(html, "decomposition")
    for k, (method, H, share) in enumerate(d.iter_rows()):
        expected = 100.0 * np.asarray(share).reshape(H, 3, 3)[-1]
        np.testing.assert_array_equal(np.array(rows[3 * k: 3 * k + 3]), expected)
        assert f'data-method="{method}"' in html


def test_lineage_names_the_run(exported: dict[str, list[Path]]) -> None:
    html = html_of(exported, "rates & fx")
    lineage = html[html.index('<section id="lineage"'):]
    for text in ("run-test-1", "cfg-rates &amp; fx", "fp-0123abcd", "0.1.0+test",
                 "2024-01-05 22:00:01", "2024-01-05 22:00:09", "batch-1"):
        assert text in lineage, text


def test_unstored_responses_are_derived_with_arlib(snap: Path,
                                                   exported: dict[str, list[Path]]) -> None:
    """A run that kept only parameters: responses, bands and decompositions equal arlib's."""
    html = html_of(exported, "derived")
    w = latest(snap, "derived")
    p = snapshot_frame(snap, "SELECT coefs, intercept, sigma_u FROM window_params WHERE "
                       "universe = ? AND window_end = ?", ["derived", w]).row(0, named=True)
    proc = arlib.var_process(np.reshape(p["coefs"], (1, 3, 3)), np.reshape(p["sigma_u"], (3, 3)),
                             p["intercept"])
    resp = arlib.impulse_responses(proc, 8, shocks="cholesky")
    # Bands: the builder's universe config asks for 30 bootstrap draws, seed 3, 90%, on the
    # window's prepared rows.
    start = snapshot_frame(snap, "SELECT window_start FROM window_fits WHERE universe = ? AND "
                           "window_end = ?", ["derived", w])["window_start"][0]
    rows = (snapshot_frame(snap, "SELECT date, series, value FROM prepared WHERE universe = ? "
                           "AND date BETWEEN ? AND ?", ["derived", start, w])
            .pivot(on="series", index="date", values="value").sort("date")
            .select("alpha", "beta", "gamma").to_numpy())
    bands = arlib.irf_bands(arlib.fit_var(rows, 1), 8, shocks="cholesky", draws=30, rng=3,
                            coverage=0.9)
    traces = plotly_traces(html, "fig-irf-0-0")
    assert len(traces) == 18
    panels = response_panels(traces, ["alpha", "beta", "gamma"])
    assert len(panels) == 9
    for (i, j), p in panels.items():
        np.testing.assert_allclose(p["response"], resp[:, i, j], rtol=0, atol=1e-14)
        np.testing.assert_allclose(p["lower"], bands.lower[:, i, j], rtol=0, atol=1e-12)
        np.testing.assert_allclose(p["upper"], bands.upper[:, i, j], rtol=0, atol=1e-12)
    rows_shown = table_values(html, "decomposition")
    chol = 100.0 * arlib.variance_decomposition(proc, 8, method="cholesky")[-1]
    gen = 100.0 * arlib.variance_decomposition(proc, 8, method="generalized")[-1]
    np.testing.assert_allclose(np.array(rows_shown[:3]), chol, rtol=0, atol=1e-12)
    np.testing.assert_allclose(np.array(rows_shown[3:6]), gen, rtol=0, atol=1e-12)
    # The generalized decomposition ×100 is the stored spillover table (same window, same H).
    np.testing.assert_allclose(np.array(table_values(html, "spillover")[:3])[:, :3], gen,
                               rtol=0, atol=1e-10)
    # compared as text: how an apostrophe is escaped (&#x27; or &#39;) is the template engine's choice
    assert "derived with arlib from the window's stored parameters" in unescape(html)
    assert "bootstrap bands from the window's prepared rows" in unescape(html)


def test_derived_responses_without_bands_say_so(exported: dict[str, list[Path]]) -> None:
    html = html_of(exported, "../escape")
    assert len(plotly_traces(html, "fig-irf-0-0")) == 9  # one line per panel, no band traces
    assert "no bands (the universe's `bands` method is 'none')" in unescape(html)
    assert "no bands available" in html


def test_many_series_get_one_response_figure_per_shock(tmp_path: Path) -> None:
    """Above six series the n × n grid splits into one figure per shock (responses wrapped)."""
    path = build_snapshot(tmp_path / "s.duckdb", {"seven": {
        "n": 7, "T": 150, "window": 120, "step": 30, "store_arrays": False, "bands": "none"}})
    paths = export_universe(path, "seven", tmp_path / "out", formats=("html",))
    html = paths[0].read_text(encoding="utf-8")
    w = latest(path, "seven")
    p = snapshot_frame(path, "SELECT coefs, sigma_u FROM window_params WHERE universe = ? AND "
                       "window_end = ?", ["seven", w]).row(0, named=True)
    resp = arlib.impulse_responses(
        arlib.var_process(np.reshape(p["coefs"], (1, 7, 7)), np.reshape(p["sigma_u"], (7, 7))),
        8, shocks="cholesky")
    for shock in range(7):
        traces = plotly_traces(html, f"fig-irf-0-{shock}")
        assert len(traces) == 7
        for i, tr in enumerate(traces):
            np.testing.assert_allclose(trace_array(tr["y"]), resp[:, i, shock], rtol=0, atol=1e-14)
    assert 'id="fig-irf-0-7"' not in html


def test_skipped_latest_window_is_reported(snap: Path, exported: dict[str, list[Path]]) -> None:
    html = html_of(exported, "derived")
    skipped = snapshot_frame(snap, "SELECT window_end FROM window_fits WHERE universe = ? AND "
                             "skip_reason IS NOT NULL", ["derived"])["window_end"][0]
    fitted = latest(snap, "derived")
    assert skipped > fitted
    health = html[html.index('<section id="health"'):html.index('<section id="lineage"')]
    assert "Skipped windows (1)" in health
    assert "too few rows after gaps: 40 of 120" in health
    assert f"The latest window ({skipped}) was not fitted" in html
    # The directory is named by the latest window end, fitted or not.
    (path,) = [p for p in exported["derived"] if p.suffix == ".html"]
    assert path.parent.parent.name == skipped.isoformat()


def test_a_universe_with_no_fitted_window_still_reports(snap: Path, tmp_path: Path) -> None:
    """Every window skipped: the report says so, lists the reasons and names the run."""
    copy = tmp_path / "copy.duckdb"
    copy.write_bytes(snap.read_bytes())
    con = duckdb.connect(str(copy))
    try:
        for t in ("connectedness", "directional", "pairwise", "granger", "window_params"):
            con.execute(f"DELETE FROM {t} WHERE universe = ?", ["../escape"])
        con.execute("UPDATE window_fits SET skip_reason = 'series s1 is constant in the window', "
                    "spectral_radius = NULL, stable = NULL, lags = NULL WHERE universe = ?",
                    ["../escape"])
    finally:
        con.close()
    paths = export_universe(copy, "../escape", tmp_path / "out", formats=("html", "parquet"))
    html = next(p for p in paths if p.suffix == ".html").read_text(encoding="utf-8")
    assert "No window up to this date was fitted" in html
    assert html.count("series s1 is constant in the window") >= 2  # every skipped window listed
    assert "run-test-3" in html[html.index('<section id="lineage"'):]
    assert pl.read_parquet(next(p for p in paths if p.name == "connectedness.parquet")).height == 0


# -- extracts -------------------------------------------------------------------------------------

@pytest.mark.parametrize("table", ["connectedness", "directional", "pairwise", "granger",
                                   "window_fits"])
def test_extracts_equal_the_snapshot_tables(snap: Path, exported: dict[str, list[Path]],
                                            table: str) -> None:
    files = {p.name: p for p in exported["rates & fx"]}
    expected = snapshot_frame(snap, f"SELECT * EXCLUDE (universe), universe FROM {table} "
                              "WHERE universe = ? ORDER BY ALL", ["rates & fx"])
    cols = expected.columns
    from_parquet = pl.read_parquet(files[f"{table}.parquet"]).select(cols).sort(pl.all())
    assert_frame_equal(from_parquet, expected.sort(pl.all()))
    from_csv = pl.read_csv(files[f"{table}.csv"], try_parse_dates=True,
                           schema_overrides=expected.schema).select(cols).sort(pl.all())
    assert_frame_equal(from_csv, expected.sort(pl.all()))


def test_array_extracts_equal_the_stored_arrays(snap: Path, exported: dict[str, list[Path]]) -> None:
    files = {p.name: p for p in exported["rates & fx"]}
    w = latest(snap, "rates & fx")
    r = snapshot_frame(snap, "SELECT horizon, response, lower, upper FROM responses WHERE "
                       "universe = ? AND window_end = ?", ["rates & fx", w]).row(0, named=True)
    H = r["horizon"]
    for fmt in ("csv", "parquet"):
        f = files[f"responses.{fmt}"]
        long = pl.read_parquet(f) if fmt == "parquet" else pl.read_csv(f, try_parse_dates=True)
        assert long.height == (H + 1) * 9
        assert (long["window_end"] == w).all()
        long = long.sort("horizon", "response", "shock")  # names sort in series order here
        for col in ("response", "lower", "upper"):
            src = "value" if col == "response" else col
            np.testing.assert_array_equal(long[src].to_numpy(), np.asarray(r[col]))
    d = pl.read_parquet(files["decompositions.parquet"])
    stored = snapshot_frame(snap, "SELECT method, share FROM decompositions WHERE universe = ? "
                            "AND window_end = ?", ["rates & fx", w])
    for method, share in stored.iter_rows():
        got = d.filter(pl.col("method") == method).sort("step", "variable", "shock")["share"]
        np.testing.assert_array_equal(got.to_numpy(), np.asarray(share))


def test_every_extract_table_is_written(exported: dict[str, list[Path]]) -> None:
    names = {p.name for p in exported["rates & fx"]}
    for t in EXTRACT_TABLES:
        assert {f"{t}.csv", f"{t}.parquet"} <= names


# -- paths ----------------------------------------------------------------------------------------

def test_nothing_is_written_outside_out_dir(snap: Path, tmp_path: Path) -> None:
    out = tmp_path / "exports"
    paths = export_universe(snap, "../escape", out, formats=("html", "csv"))
    root = out.resolve()
    assert paths and all(p.resolve().is_relative_to(root) for p in paths)
    assert {p.parent.name for p in paths} == {safe_dir_name("../escape")} == {"escape-1ba7343c"}
    on_disk = {p.resolve() for p in tmp_path.rglob("*") if p.is_file()}
    assert on_disk == {p.resolve() for p in paths}  # nothing else anywhere under tmp_path


# a name sanitising changes gets the first 8 hex digits of sha256(name) (hashlib, computed here)
@pytest.mark.parametrize(("name", "safe"), [("rates & fx", "rates_fx"), ("../../etc", "etc"),
                                            ("a/b\\c", "a_b_c"), (".hidden", "hidden"),
                                            ("EM-fx_2.0", "EM-fx_2.0"), ("x-0123abcd", "x-0123abcd")])
def test_safe_dir_name(name: str, safe: str) -> None:
    import hashlib

    kept = name == safe and not re.search(r"-[0-9a-f]{8}$", name)
    expected = safe if kept else f"{safe}-{hashlib.sha256(name.encode()).hexdigest()[:8]}"
    assert safe_dir_name(name) == expected


def test_names_that_sanitise_alike_get_different_folders(snap: Path, tmp_path: Path) -> None:
    """Issue 10 item 10: "rates fx" then "rates&fx", exported by different runs, overwrote each
    other's reports in one folder `rates_fx` (the same-run check could not see it)."""
    import hashlib

    names = ["rates fx", "rates&fx", "rates & fx", "rates_fx", "rates__fx",
             "rates_fx-" + hashlib.sha256(b"rates fx").hexdigest()[:8]]
    folders = [safe_dir_name(n) for n in names]
    assert len(set(folders)) == len(names), folders
    paths = export_universe(snap, "rates & fx", tmp_path, formats=("csv",))
    assert {p.parent.name for p in paths} == {safe_dir_name("rates & fx")} != {"rates_fx"}


@pytest.mark.parametrize("name", ["..", "/", "...", " "])
def test_unusable_universe_names_are_refused(name: str) -> None:
    with pytest.raises(ExportError, match="leaves nothing usable as a directory name"):
        safe_dir_name(name)


def test_a_symlink_out_of_out_dir_is_refused(tmp_path: Path) -> None:
    out = tmp_path / "exports"
    elsewhere = tmp_path / "elsewhere"
    out.mkdir()
    elsewhere.mkdir()
    os.symlink(elsewhere, out / "2024-01-05")
    with pytest.raises(ExportError, match="lies outside `out_dir`"):
        universe_dir(out, dt.date(2024, 1, 5), "rates")


# -- options and bad input ------------------------------------------------------------------------

def test_as_of_limits_windows_and_names_the_directory(snap: Path, tmp_path: Path) -> None:
    ends = snapshot_frame(snap, "SELECT window_end FROM connectedness WHERE universe = ? ORDER BY 1",
                          ["rates & fx"])["window_end"].to_list()
    as_of = ends[4] + dt.timedelta(days=1)
    paths = export_universe(snap, "rates & fx", tmp_path, formats=("html", "parquet"),
                            as_of=as_of.isoformat())
    assert {p.parent.parent.name for p in paths} == {as_of.isoformat()}
    conn = pl.read_parquet(next(p for p in paths if p.name == "connectedness.parquet"))
    assert conn["window_end"].to_list() == ends[:5]
    html = next(p for p in paths if p.suffix == ".html").read_text(encoding="utf-8")
    assert f"Latest window end</dt><dd>{ends[4]}" in html


def test_pdf_is_skipped_with_a_warning_without_chromium(snap: Path, tmp_path: Path,
                                                        monkeypatch: pytest.MonkeyPatch,
                                                        caplog: pytest.LogCaptureFixture) -> None:
    monkeypatch.setenv("PATH", str(tmp_path / "no-browsers-here"))
    with caplog.at_level(logging.WARNING, logger="shockflow.export"):
        paths = export_universe(snap, "../escape", tmp_path / "out", formats=("html", "pdf"))
    assert [p.suffix for p in paths] == [".html"]
    assert "no headless Chromium found" in caplog.text


@pytest.mark.parametrize(("kwargs", "match"), [
    ({"formats": ("html", "docx")}, r"`formats`.*'docx'.*html, csv, parquet, pdf"),
    ({"formats": ()}, "`formats` is empty"),
    ({"as_of": "28/03/2024"}, r"`as_of` '28/03/2024' is not a date; use YYYY-MM-DD"),
    ({"as_of": "2000-01-01"}, r"no windows on or before 2000-01-01"),
    ({"chromium_path": "/nonexistent/chromium"}, r"`chromium_path` '/nonexistent/chromium'"),
])
def test_bad_options_are_named(snap: Path, tmp_path: Path, kwargs: dict, match: str) -> None:
    kwargs = {"formats": ("html", "pdf"), **kwargs}
    with pytest.raises(ExportError, match=match):
        export_universe(snap, "rates & fx", tmp_path, **kwargs)


def test_unknown_universe_lists_the_known_ones(snap: Path, tmp_path: Path) -> None:
    with pytest.raises(ExportError, match=r"universe 'ratez' is not in serving snapshot .*"
                       r"known universes: '../escape', 'derived', 'rates & fx'"):
        export_universe(snap, "ratez", tmp_path)


def test_missing_snapshot_says_how_to_make_one(tmp_path: Path) -> None:
    with pytest.raises(ShockflowError, match=r"does not exist; run `shockflow run"):
        export_universe(tmp_path / "nope.duckdb", "rates", tmp_path)


def test_a_file_that_is_not_a_snapshot_is_refused(tmp_path: Path) -> None:
    path = tmp_path / "other.duckdb"
    duckdb.connect(str(path)).close()
    with pytest.raises(ExportError, match=r"lacks table\(s\) universes, universe_series"):
        export_universe(path, "rates", tmp_path)


def test_export_all_refuses_colliding_directory_names(snap: Path, tmp_path: Path) -> None:
    # folder names are injective up to the 8-hex-digit hash suffix; these two names share their
    # sanitised text and their suffix (found by searching sha256 over "rates" + punctuation + "fx")
    a, b = "rates !;;!fx", "rates$@%==fx"
    assert safe_dir_name(a) == safe_dir_name(b) == "rates_fx-6135adc7"
    with pytest.raises(ExportError, match=r"share the export directory name 'rates_fx-6135adc7'"):
        export_all(snap, tmp_path, formats=("csv",), universes=[a, b])


def test_export_all_tries_every_universe_and_names_failures(snap: Path, tmp_path: Path) -> None:
    with pytest.raises(ExportError, match=r"1 of 2 universe export\(s\) failed: 'nope'") as info:
        export_all(snap, tmp_path, formats=("csv",), universes=["nope", "derived"])
    assert set(info.value.written) == {"derived"}


# -- PDF and the report in a real browser ----------------------------------------------------------

def test_pdf_is_printed_by_headless_chromium(snap: Path, tmp_path: Path, chromium_path: str) -> None:
    paths = export_universe(snap, "rates & fx", tmp_path, formats=("pdf",),
                            chromium_path=chromium_path)
    (pdf,) = paths  # the HTML it was printed from is not kept when only "pdf" was asked for
    assert pdf.suffix == ".pdf"
    assert pdf.read_bytes().startswith(b"%PDF-")
    assert pdf_page_count(pdf) >= 3  # eight sections with charts do not fit on fewer A4 pages
    assert list(pdf.parent.glob("*.html")) == []
    pdftotext = shutil.which("pdftotext")  # poppler-utils; optional
    if pdftotext:
        text = " ".join(subprocess.run([pdftotext, "-layout", str(pdf), "-"], capture_output=True,
                                       text=True, check=True, timeout=60).stdout.split())
        assert CAUTION in text
        for heading in ("Spillover table", "Impulse responses", "Granger causality", "Lineage"):
            assert heading in text, heading
        # Chart titles are SVG text drawn by plotly.js: present only if the charts rendered.
        assert "Total connectedness, rates & fx" in text
        assert "Model health by window" in text


@pytest.mark.browser
def test_report_opens_offline_in_chromium(exported: dict[str, list[Path]], chromium_path: str) -> None:
    """Open the report in Chromium with the network cut; no request leaves the machine and every
    chart is drawn by the inlined plotly.js."""
    from playwright.sync_api import sync_playwright

    from tests.conftest import CHROMIUM_ARGS

    (path,) = [p for p in exported["rates & fx"] if p.suffix == ".html"]
    html = path.read_text(encoding="utf-8")
    expected_charts = html.count("Plotly.newPlot(")
    requests: list[str] = []
    with sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=chromium_path, args=CHROMIUM_ARGS)
        try:
            context = browser.new_context(offline=True)
            page = context.new_page()
            page.on("request", lambda r: requests.append(r.url))
            errors: list[str] = []
            page.on("pageerror", lambda e: errors.append(str(e)))
            page.goto(path.as_uri(), wait_until="load")
            page.wait_for_function(
                f"document.querySelectorAll('.js-plotly-plot .main-svg').length >= {expected_charts}",
                timeout=30_000)
            drawn = page.evaluate("document.querySelectorAll('.js-plotly-plot').length")
            has_plotly = page.evaluate("typeof window.Plotly === 'object'")
            toolbars = page.evaluate("document.querySelectorAll('.modebar-btn').length")
        finally:
            browser.close()
    assert errors == []
    assert has_plotly and drawn == expected_charts
    assert toolbars == 0
    outside = [u for u in requests if not u.startswith(("file:", "data:", "about:", "blob:"))]
    assert outside == []
