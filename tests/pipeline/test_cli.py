"""`shockflow` end to end on a real open data set: the quarterly US macro data statsmodels ships
(statsmodels.datasets.macrodata, 1959Q1–2009Q3), written to CSV by the test.

The universe is `quarterly`. Every stored window's coefficients, Σ_u, Granger F tests and
connectedness are checked against statsmodels' VAR on the same rows (statsmodels as a reference
library, tests only; the connectedness from statsmodels' MA coefficients and Σ_u by the
Pesaran–Shin 1998 eq. 11 / Diebold–Yilmaz 2012 Sec. 2 formulas written out below). Tolerance 1e-8
relative: arlib's agreement with statsmodels (justified in tests/reference/test_statsmodels_macrodata.py);
the warehouse stores DOUBLEs, so storing adds nothing.
"""

from __future__ import annotations

import tomllib
from datetime import date
from pathlib import Path

import duckdb
import numpy as np
import polars as pl
import pytest
from typer.testing import CliRunner

from shockflow.cli import app
from tests.pipeline.helpers import write_config
from tests.reference.test_statsmodels_macrodata import agree

CONFIG = """
[warehouse]
path = "wh/macro.duckdb"
snapshot = "wh/macro-serving.duckdb"

[[sources]]
name = "us_macro"
kind = "csv"
path = "macrodata.csv"

[[universes]]
name = "us_real"
series = ["realgdp", "realcons", "realinv"]
transform = "log_return"
frequency = "quarterly"   # rows labelled 31 Mar, 30 Jun, 30 Sep, 31 Dec
max_fill_gap = 0
window = 80
step = 4
lags = 2
horizon = 8
identification = "generalized"
frequency_bands = [4, 12]   # quarters: cycles within a year, one to three years, longer
joint = true

[export]
directory = "wh/exports"
formats = ["csv"]
"""


def generalized_connectedness(ma: np.ndarray, sigma: np.ndarray) -> np.ndarray:
    """100 × the row-normalised generalized decomposition over Φ_0..Φ_{H−1} (`ma`, (H, n, n)):
    θ_ij = σ_jj⁻¹ Σ_h (Φ_h Σ)_ij² / Σ_h (Φ_h Σ Φ_h')_ii (Pesaran & Shin 1998, eq. 11), rows divided
    by their sums (Diebold & Yilmaz 2012, Sec. 2); [variable, shock] in percent."""
    num = ((ma @ sigma) ** 2).sum(axis=0) / np.diag(sigma)[None, :]
    den = np.einsum("hij,jk,hik->i", ma, sigma, ma)
    theta = num / den[:, None]
    return 100.0 * theta / theta.sum(axis=1, keepdims=True)


def macro_csv(path: Path) -> pl.DataFrame:
    from statsmodels.datasets import macrodata

    raw = macrodata.load_pandas().data
    ends = {1: (3, 31), 2: (6, 30), 3: (9, 30), 4: (12, 31)}
    dates = [date(int(y), *ends[int(q)]) for y, q in zip(raw["year"], raw["quarter"], strict=True)]
    df = pl.DataFrame(
        {"date": dates, "realgdp": raw["realgdp"].to_numpy(), "realcons": raw["realcons"].to_numpy(), "realinv": raw["realinv"].to_numpy()}
    )
    df.write_csv(path)
    return df


@pytest.mark.prefect
def test_cli_run_check_export_on_us_macro_data(prefect_harness: None, tmp_path: Path) -> None:
    df = macro_csv(tmp_path / "macrodata.csv")
    config = write_config(tmp_path, CONFIG)
    runner = CliRunner()

    checked = runner.invoke(app, ["check", "--config", str(config)])
    assert checked.exit_code == 0, checked.output
    assert "config ok: 1 source(s), 1 universe(s)" in checked.output
    assert not (tmp_path / "wh").exists()  # check writes nothing

    result = runner.invoke(app, ["run", "--config", str(config)])
    assert result.exit_code == 0, result.output
    assert "us_real" in result.output and "succeeded" in result.output

    con = duckdb.connect(str(tmp_path / "wh" / "macro-serving.duckdb"), read_only=True)
    try:
        fits = con.execute("SELECT window_end, window_start, nobs FROM window_fits ORDER BY window_end").fetchall()
        params = {r[0]: r[1:] for r in con.execute("SELECT window_end, lags, coefs, intercept, sigma_u FROM window_params").fetchall()}
        granger = con.execute("SELECT window_end, caused, causing, f_stat, p_value FROM granger").fetchall()
        totals = dict(con.execute("SELECT window_end, total FROM connectedness").fetchall())
        shares = con.execute("SELECT window_end, source, target, share FROM pairwise").fetchall()
        prepared_dates = [r[0] for r in con.execute("SELECT DISTINCT date FROM prepared ORDER BY date").fetchall()]
    finally:
        con.close()
    # 203 quarters → 202 log returns, dated at quarter ends; windows of 80 ending at rows 79, 83, ..., 199
    ends = {1: (3, 31), 2: (6, 30), 3: (9, 30), 4: (12, 31)}
    assert prepared_dates == [date(y, *ends[q]) for y in range(1959, 2010) for q in (1, 2, 3, 4)][1:-1]
    assert len(fits) == 31
    assert fits[-1][0] == date(2009, 3, 31) and fits[-1][2] == 78

    # statsmodels' VAR(2) on the same 80 rows of every window: coefficients, Σ_u, the F-form
    # Granger test per pair and the connectedness table
    from statsmodels.tsa.api import VAR

    names = ["realgdp", "realcons", "realinv"]
    logs = np.log(df.select(names).to_numpy())
    returns = np.diff(logs, axis=0)
    assert len(params) == len(totals) == 31
    for w, (end, start, nobs) in enumerate(fits):
        end_row = 79 + 4 * w
        assert (start, end) == (prepared_dates[end_row - 79], prepared_dates[end_row])
        rows = returns[end_row - 79 : end_row + 1]
        res = VAR(rows).fit(2, trend="c")
        assert nobs == res.nobs == 78
        lags, coefs, intercept, sigma_u = params[end]
        assert lags == 2
        agree(np.reshape(coefs, (2, 3, 3)), res.coefs)
        agree(np.asarray(intercept), res.intercept)
        agree(np.reshape(sigma_u, (3, 3)), res.sigma_u)
        table = generalized_connectedness(res.ma_rep(7), res.sigma_u)  # horizon 8: Φ_0..Φ_7
        assert totals[end] == pytest.approx((table.sum() - np.trace(table)) / 3, rel=1e-8)
        stored = np.full((3, 3), np.nan)
        for e, source, target, share in shares:
            if e == end:
                stored[names.index(target), names.index(source)] = share
        agree(stored, table)
        for e, caused, causing, f_stat, p_value in granger:
            if e != end:
                continue
            ref = res.test_causality(names.index(caused), names.index(causing), kind="f")
            assert f_stat == pytest.approx(ref.test_statistic, rel=1e-8)
            assert p_value == pytest.approx(ref.pvalue, rel=1e-8, abs=1e-14)
    assert len(granger) == 31 * 6

    # frequency bands and joint connectedness of the newest window, through the whole pipeline,
    # equal arlib's single-window functions on the same rows (Baruník–Křehlík; Lastrapes–Wiesen)
    import arlib

    rows = returns[199 - 79 : 199 + 1]
    fit = arlib.fit_var(rows, 2)
    fc = arlib.frequency_connectedness(fit, bands=[(1, 4), (4, 12), (12, float("inf"))], truncation=100)
    jc = arlib.joint_connectedness(fit, 8)
    con = duckdb.connect(str(tmp_path / "wh" / "macro-serving.duckdb"), read_only=True)
    try:
        bands = con.execute(
            "SELECT band, period_lo, period_hi, total, within_total, shares FROM band_connectedness "
            "WHERE window_end = ? ORDER BY band", [fits[-1][0]]).fetchall()  # fmt: skip
        joint = con.execute("SELECT total, from_others FROM joint_connectedness WHERE window_end = ?",
                            [fits[-1][0]]).fetchall()  # fmt: skip
        n_band_windows = con.execute("SELECT count(DISTINCT window_end) FROM band_connectedness").fetchone()
    finally:
        con.close()
    assert n_band_windows == (31,)
    assert [(b, lo, hi) for b, lo, hi, *_ in bands] == [(0, 1.0, 4.0), (1, 4.0, 12.0), (2, 12.0, float("inf"))]
    for b, *_, total, within, shares in bands:
        assert total == pytest.approx(fc.total[b], rel=1e-8)
        assert within == pytest.approx(fc.within_total[b], rel=1e-8)
        np.testing.assert_allclose(np.reshape(shares, (3, 3)), fc.tables[b], rtol=1e-8, atol=1e-10)
    assert joint[0][0] == pytest.approx(jc.total, rel=1e-8)
    np.testing.assert_allclose(joint[0][1], jc.from_others, rtol=1e-8)

    again = runner.invoke(app, ["run", "--config", str(config), "--always-flow"])  # the flow's own record
    assert again.exit_code == 0, again.output
    con = duckdb.connect(str(tmp_path / "wh" / "macro.duckdb"), read_only=True)
    try:
        last = con.execute("SELECT status, windows_fitted, message FROM runs ORDER BY started DESC LIMIT 1").fetchall()
    finally:
        con.close()
    assert last == [("succeeded", 0, "nothing changed")]

    out = tmp_path / "elsewhere"
    exported = runner.invoke(app, ["export", "--config", str(config), "--out", str(out)])
    assert exported.exit_code == 0, exported.output
    assert any(p.suffix == ".csv" for p in out.rglob("*"))


def test_cli_config_error_is_one_line_and_exit_1(tmp_path: Path) -> None:
    config = write_config(tmp_path, CONFIG.replace("window = 80", "windw = 80"))
    result = CliRunner().invoke(app, ["run", "--config", str(config)])
    assert result.exit_code == 1
    lines = [line for line in result.output.splitlines() if line.strip()]
    assert len(lines) == 1 and lines[0].startswith("error: ")
    assert "`universes['us_real'].windw` is not a known key (did you mean 'window'?)" in lines[0]
    assert "Traceback" not in result.output


def test_cli_debug_shows_traceback(tmp_path: Path) -> None:
    config = write_config(tmp_path, CONFIG.replace("window = 80", "windw = 80"))
    result = CliRunner().invoke(app, ["check", "--config", str(config), "--debug"])
    assert result.exit_code == 1
    assert "Traceback" in result.output and "ConfigError" in result.output


def test_cli_unknown_universe(tmp_path: Path) -> None:
    macro_csv(tmp_path / "macrodata.csv")
    config = write_config(tmp_path, CONFIG)
    result = CliRunner().invoke(app, ["run", "--config", str(config), "--universe", "us_rael"])
    assert result.exit_code == 1
    assert "no universe named 'us_rael' (did you mean 'us_real'?)" in result.output


def test_cli_check_names_missing_series_and_failed_source(tmp_path: Path) -> None:
    macro_csv(tmp_path / "macrodata.csv")
    text = CONFIG.replace('"realinv"]', '"realinvest"]') + '\n[[sources]]\nname = "gone"\nkind = "csv"\npath = "gone/*.csv"\n'
    config = write_config(tmp_path, text)
    result = CliRunner().invoke(app, ["check", "--config", str(config)])
    assert result.exit_code == 2  # one source read, problems found
    flat = " ".join(result.output.split())
    assert "no file matches path" in flat
    assert "lists series 'realinvest', which no source provides (did you mean 'realinv'?)" in flat
    assert not (tmp_path / "wh").exists()


def test_prefect_environment_defaults_do_not_override() -> None:
    from shockflow.cli import prefect_environment

    env = {"PREFECT_LOGGING_LEVEL": "DEBUG"}
    prefect_environment(env)
    assert env["PREFECT_LOGGING_LEVEL"] == "DEBUG"
    assert env["PREFECT_SERVER_ANALYTICS_ENABLED"] == "false"
    assert env["PREFECT_SERVER_EPHEMERAL_STARTUP_TIMEOUT_SECONDS"] == "120"
    assert env["DO_NOT_TRACK"] == "1"


def _served_windows(tmp_path: Path) -> int:
    con = duckdb.connect(str(tmp_path / "wh" / "macro-serving.duckdb"), read_only=True)
    try:
        return con.execute("SELECT count(*) FROM window_fits WHERE universe = 'us_real'").fetchall()[0][0]
    finally:
        con.close()


@pytest.mark.prefect
def test_a_window_larger_than_the_data_is_reported_and_never_wipes_stored_results(prefect_harness: None, tmp_path: Path) -> None:
    """Issue 10 item 8: `check` reports it, `run` fails the universe (exit 2) and keeps serving the
    previous results; only `--full` with the changed config replaces them by none, and says so."""
    macro_csv(tmp_path / "macrodata.csv")
    config = write_config(tmp_path, CONFIG)
    runner = CliRunner()
    first = runner.invoke(app, ["run", "--config", str(config)])
    assert first.exit_code == 0, first.output
    assert _served_windows(tmp_path) == 31

    # 202 prepared rows (203 quarters → 202 log returns); a window of 500 cannot fit
    write_config(tmp_path, CONFIG.replace("window = 80", "window = 500"))
    checked = runner.invoke(app, ["check", "--config", str(config)])
    flat = " ".join(checked.output.split())
    assert checked.exit_code == 2, checked.output
    assert "universe 'us_real': window = 500 is more than its 202 prepared row(s)" in flat
    assert "config ok" not in flat

    result = runner.invoke(app, ["run", "--config", str(config)])
    flat = " ".join(result.output.split())
    assert result.exit_code == 2, result.output
    assert "universe us_real: failed" in flat
    assert "failed: universe 'us_real': window = 500 is more than its 202 prepared row(s)" in flat
    assert "its previous results stay served" in flat
    assert _served_windows(tmp_path) == 31  # was 0: every stored window deleted, "succeeded"
    con = duckdb.connect(str(tmp_path / "wh" / "macro.duckdb"), read_only=True)
    try:
        assert con.execute("SELECT count(*) FROM window_fits").fetchall() == [(31,)]
    finally:
        con.close()

    # the user asks: --full with the changed config replaces them by none, and the summary says so
    full = runner.invoke(app, ["run", "--config", str(config), "--full"])
    flat = " ".join(full.output.split())
    assert full.exit_code == 0, full.output
    assert "--full with a changed config: every one of the 31 stored window(s) deleted as asked" in flat
    assert _served_windows(tmp_path) == 0


def _flat_help(*args: str) -> str:
    result = CliRunner().invoke(app, [*args, "--help"], env={"COLUMNS": "80"})
    assert result.exit_code == 0, result.output
    assert all(len(line) <= 80 for line in result.output.splitlines()), result.output
    return " ".join(result.output.split())


def test_help_shows_every_word_and_no_value_for_flags() -> None:
    """Issue 10 item 14: "(default:  directory)" (markup ate "[export]"), `--full <bool>`, and
    `demo --host/--port` without help."""
    assert "(default: the config's [export] directory)" in _flat_help("export")
    for command in ("run", "check", "export", "schedule", "dashboard", "demo"):
        text = _flat_help(command)
        assert "<bool>" not in text and "<list[str]>" not in text, (command, text)
    run = _flat_help("run")
    assert "--full Refit every window" in run and "--no-export Skip the report exports." in run
    demo = _flat_help("demo")
    assert "--host ADDRESS Address to listen on (default: [dashboard] host, else 127.0.0.1)" in demo
    assert "--port PORT Port to listen on (default: [dashboard] port, else 8050)" in demo


def test_usage_errors_exit_64_not_the_partial_code() -> None:
    """Issue 10 item 13: click's usage errors exited 2, the code documented for "partial"."""
    from shockflow.cli import EXIT_PARTIAL, EXIT_USAGE

    assert (EXIT_USAGE, EXIT_PARTIAL) == (64, 2)
    for args in (["run", "--bogus"], ["run"], ["nosuchcommand"], ["dashboard", "-c", "x.toml", "--port", "eighty"]):
        result = CliRunner().invoke(app, args)
        assert result.exit_code == EXIT_USAGE, (args, result.exit_code, result.output)


def test_summary_is_a_table_only_where_it_fits() -> None:
    """Issue 10 item 14: in an 80-column terminal or a log file the table wrapped mid-word; there
    the summary is one plain line per universe, never wrapped."""
    import io

    from rich.console import Console

    from pipeline.flows import NightlySummary
    from pipeline.jobs import IngestResult, UniverseResult
    from shockflow import cli

    summary = NightlySummary(
        ingest=[IngestResult("veloria_exchange", "succeeded", 12_000, 40, 2, None, 0.5)],
        universes=[
            UniverseResult("all_markets", "succeeded", "r1", 12, 0, 0, 300, "12 new window(s)", None,
                           {"prepare": 0.2, "fit": 1.5, "store": 0.3}),
            UniverseResult("rates_fx", "failed", "r2", message="universe 'rates_fx': window = 900 is more than its 800 prepared row(s)"),
        ],
    )
    table = cli._summary_table(summary)
    narrow = Console(file=io.StringIO(), force_terminal=True, width=80)
    wide = Console(file=io.StringIO(), force_terminal=True, width=250)
    log_file = Console(file=io.StringIO(), force_terminal=False, width=250)
    assert not cli._fits(table, narrow) and cli._fits(table, wide) and not cli._fits(table, log_file)
    assert cli._summary_lines(summary) == [
        "universe all_markets: succeeded; fitted 12, skipped 0, failed 0, reused 300; prepare 0.20 s, fit 1.50 s, "
        "store 0.30 s; 12 new window(s)",
        "universe rates_fx: failed; fitted 0, skipped 0, failed 0, reused 0; prepare 0.00 s, fit 0.00 s, "
        "store 0.00 s; universe 'rates_fx': window = 900 is more than its 800 prepared row(s)",
    ]
    assert cli._sources_lines(summary) == [
        "source veloria_exchange: succeeded; 12,000 rows read, 40 new, 2 revised; 0.50 s, 24,000 rows/s"
    ]


def test_the_demo_config_reads_the_packaged_data_and_writes_into_its_folder(tmp_path: Path) -> None:
    """Issue 11 item 6: the demo found its data through parents[2] of a checkout and wrote to
    ../demo_output beside it; now the data come from the `data_samples` package wherever it is
    installed and the output goes to the folder given (default ./demo_output)."""
    import data_samples
    from pipeline.config import load_config
    from shockflow.cli import demo_config

    cfg = load_config(demo_config(tmp_path / "out"))
    out = (tmp_path / "out").resolve()
    assert (cfg.warehouse.path, cfg.warehouse.snapshot, cfg.export.directory) == (
        out / "shockflow.duckdb", out / "shockflow-serving.duckdb", out / "exports",
    )
    assert [s.path for s in cfg.sources] == [
        str(data_samples.folder() / "markets_wide.csv"), str(data_samples.folder() / "rates_long.csv"),
        str(data_samples.folder() / "sector_wide.csv"),
    ]
    demo_toml = tomllib.loads((data_samples.folder() / "demo.toml").read_text(encoding="utf-8"))
    assert [u.name for u in cfg.universes] == [u["name"] for u in demo_toml["universes"]]
    assert {"all_markets", "rates_fx", "equities_weekly"} <= {u.name for u in cfg.universes}
