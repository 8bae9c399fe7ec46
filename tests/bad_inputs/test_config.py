"""Bad configuration, each through `shockflow run` (and `shockflow check`) on night 2 of the scenario.

A config that cannot be read or trusted stops the whole run before anything is opened: exit code
1, one line naming the file, the key and the fix (did-you-mean for typos), and the warehouse and
the snapshot are left exactly as they were. Problems that only show once the night runs (a glob
that matches nothing, a series no source provides, an export folder that cannot be written) fail
that part alone: the rest runs and the exit code is 2.
"""

from __future__ import annotations

import re
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import polars as pl
import pytest

from tests.bad_inputs.night import TRACEBACK, Night, assert_kept, new_rows, of_universe


@dataclass(frozen=True)
class ConfigCase:
    id: str
    edit: Callable[[str], str]
    pattern: str  # the message after "<config file>: "


def _replace(old: str, new: str, count: int = 1) -> Callable[[str], str]:
    def edit(text: str) -> str:
        assert old in text, old
        return text.replace(old, new, count)

    return edit


def _append(extra: str) -> Callable[[str], str]:
    return lambda text: text + "\n" + extra


def _drop_sources(text: str) -> str:
    head, _, rest = text.partition("[[sources]]")
    universes = rest[rest.index("[[universes]]") :]
    return head + universes


FATAL = [
    ConfigCase(
        "unknown-key-did-you-mean", _replace("window = 40", "windw = 40"),
        r"`universes\['stocks'\]\.windw` is not a known key \(did you mean 'window'\?\); rename it to `window`",
    ),
    ConfigCase(
        "unknown-optional-key-did-you-mean", _replace('formats = ["csv"]', 'formts = ["csv"]'),
        r"`export\.formts` is not a known key \(did you mean 'formats'\?\); rename it to `formats`",
    ),
    ConfigCase(
        "unknown-section-did-you-mean", _append('[schedul]\ncron = "0 22 * * 1-5"\n'),
        r"`schedul` is not a known section \(did you mean 'schedule'\?\); known sections: .*",
    ),
    ConfigCase(
        "missing-required-key", _replace('series = ["EQ_A", "EQ_B", "EQ_C"]\n', ""),
        r"`universes\['stocks'\]\.series` is required but missing; add `series = \.\.\.` to universes\['stocks'\]",
    ),
    ConfigCase(
        "missing-source-kind", _replace('kind = "csv"\npath = "rates.csv"', 'path = "rates.csv"'),
        r"`sources\['rates'\]\.kind` is required but missing; add `kind = \.\.\.` to sources\['rates'\]",
    ),
    ConfigCase(
        "password-in-sql-connection",
        _replace('kind = "csv"\npath = "rates.csv"', 'kind = "sql"\nconnection = "postgresql://u:hunter2@db/m"\nquery = "SELECT 1"'),
        r"`sources\['rates'\]\.connection` holds a password \('postgresql://u:\*\*\*@db/m'\); remove it; set PGPASSWORD or ~/\.pgpass in the environment instead",
    ),
    ConfigCase(
        "literal-secret-in-http-header",
        _replace('kind = "csv"\npath = "rates.csv"', 'kind = "http_csv"\nurl = "https://example.org/r.csv"\nheaders = ["X-Api-Key: abc123"]'),
        r"`sources\['rates'\]\.headers` gives header 'X-Api-Key' a literal value; name the environment variable that holds it, .* never the secret itself",
    ),
    ConfigCase(
        "no-sources-table", _drop_sources,
        r"`sources` is required but missing; add at least one \[\[sources\]\] table",
    ),
    ConfigCase(
        "window-too-short-for-lags-times-series", _replace("window = 40\nlags = 1", "window = 6\nlags = 1"),
        r"`universes\['stocks'\]\.window` = 6 leaves 5 observations for 4 coefficients per equation "
        r"\(3 series × 1 lags \+ trend\), fewer than the 7 needed; use window >= 8 .*",
    ),
    ConfigCase(
        "quantile-level-outside-0-1",
        _replace("window = 40\nlags = 1", 'window = 40\nlags = 1\nestimator = "quantile"\nquantile = { quantiles = [0.05, 1.5] }'),
        r"`universes\['stocks'\]\.quantile\.quantiles` is \[0\.05, 1\.5\]; list distinct levels in \(0, 1\), increasing, e\.g\. \[0\.05, 0\.5, 0\.95\]",
    ),
    ConfigCase(
        "quantile-table-without-estimator",
        _replace("window = 40\nlags = 1", "window = 40\nlags = 1\nquantile = { quantiles = [0.1, 0.9] }"),
        r"`universes\['stocks'\]\.quantile` is set but estimator is not 'quantile'; remove the "
        r"\[universes\.quantile\] table or set estimator = \"quantile\"",
    ),
    ConfigCase(
        "invalid-cron-value", _append('[schedule]\ncron = "0 25 * * 1-5"\n'),
        r"`schedule\.cron` is '0 25 \* \* 1-5': .*; fix the field, e\.g\. '0 22 \* \* 1-5' for 22:00 on weekdays",
    ),
    ConfigCase(
        "invalid-cron-fields", _append('[schedule]\ncron = "0 22 * *"\n'),
        r"`schedule\.cron` is '0 22 \* \*' with 4 fields; use 5 fields: minute hour day-of-month month day-of-week, e\.g\. '0 22 \* \* 1-5'",
    ),
]


@pytest.mark.parametrize("case", FATAL, ids=[c.id for c in FATAL])
def test_config_error_stops_before_anything_is_written(night: Night, case: ConfigCase) -> None:
    night.write_config(case.edit(night.config_text()))
    before, snap_before = night.tables(), night.snapshot_tables()
    expected = re.compile(re.escape(f"error: {night.config}: ") + case.pattern)
    for result in (night.run("--no-export"), night.check()):
        assert result.exit_code == 1, result.stderr
        assert not TRACEBACK.search(result.stderr), result.stderr
        lines = result.lines("error:")
        assert len(lines) == 1 and expected.fullmatch(lines[0]), result.stderr
    after, snap_after = night.tables(), night.snapshot_tables()
    for name, frame in before.items():
        assert after[name].equals(frame), name
    for name, frame in snap_before.items():
        assert snap_after[name].equals(frame), name


def test_every_config_problem_is_printed_at_once(night: Night) -> None:
    text = night.config_text().replace("window = 40", "windw = 40", 1) + '\n[schedule]\ncron = "0 25 * * 1-5"\n'
    night.write_config(text)
    before = night.tables()
    for result in (night.run("--no-export"), night.check()):
        assert result.exit_code == 1, result.stderr
        assert not TRACEBACK.search(result.stderr), result.stderr
        lines = result.stderr.splitlines()
        start = lines.index(f"error: {night.config}: 2 problems, each to fix:")
        assert re.fullmatch(r"  - `universes\['stocks'\]\.windw` is not a known key \(did you mean 'window'\?\); rename it to `window`", lines[start + 1])
        assert re.fullmatch(r"  - `schedule\.cron` is '0 25 \* \* 1-5': .*; fix the field, .*", lines[start + 2])
    after = night.tables()
    for name, frame in before.items():
        assert after[name].equals(frame), name


def test_debug_shows_the_traceback(night: Night) -> None:
    night.write_config(night.config_text().replace("window = 40", "windw = 40", 1))
    plain = night.run("--no-export")
    debug = night.run("--no-export", "--debug")
    assert plain.exit_code == debug.exit_code == 1
    assert not TRACEBACK.search(plain.stderr)
    assert "Traceback" in debug.stderr and "ConfigError" in debug.stderr
    assert plain.lines("error:") == debug.lines("error:")


def _partial(night: Night) -> tuple[dict[str, pl.DataFrame], Any, dict[str, pl.DataFrame]]:
    before = night.tables()
    result = night.run()
    assert not TRACEBACK.search(result.stderr), result.stderr
    return before, result, night.tables()


def test_series_no_source_provides(night: Night) -> None:
    night.write_config(night.config_text().replace('"EQ_C"]', '"EQ_D"]', 1))
    before, result, after = _partial(night)
    assert result.exit_code == 2, result.stderr
    runs = new_rows(before["runs"], after["runs"])
    stocks = runs.filter(pl.col("universe") == "stocks").row(0, named=True)
    message = (
        "universe 'stocks': series 'EQ_D' has no observations in the warehouse; "
        "check its name or add a source that provides it"
    )
    assert (stocks["status"], stocks["message"]) == ("failed", message)
    assert result.lines("failed:") == [f"failed: {message}"]  # "universe 'stocks'" once (was twice)
    # the other universe ran; the failing one keeps every earlier result
    rates_run = runs.filter(pl.col("universe") == "rates_pair").row(0, named=True)
    assert rates_run["status"] == "succeeded"
    assert_kept(before, after, untouched=["stocks", "rates_pair"])
    # `check` names the series before any run, with a did-you-mean
    check = night.check()
    assert check.exit_code == 2
    assert [ln for ln in check.lines("error:") if "EQ_D" in ln] and re.fullmatch(
        re.escape(f"error: {night.config}: universe 'stocks' lists series 'EQ_D', which no source provides")
        + r" \(did you mean 'EQ_[ABC]'\?\); fix the name or add a source that has it",
        check.lines("error:")[0],
    ), check.stderr


def test_source_glob_matches_nothing(night: Night) -> None:
    night.write_config(night.config_text().replace('path = "rates.csv"', 'path = "rates_*.csv"', 1))
    before, result, after = _partial(night)
    assert result.exit_code == 2, result.stderr
    pattern = night.folder / "rates_*.csv"
    message = (
        f"source 'rates': no file matches path {str(pattern)!r}; check the path "
        "(relative paths start at the config file's folder)"
    )
    batch = new_rows(before["ingest_batches"], after["ingest_batches"]).filter(pl.col("source") == "rates").row(0, named=True)
    assert (batch["status"], batch["message"]) == ("failed", message)
    assert result.lines("failed:") == [f"failed: {message}"]  # "source 'rates'" once (was twice)
    assert_kept(before, after, untouched=["rates_pair"], grown=["stocks"])
    assert of_universe(after["window_fits"], "stocks").height == of_universe(before["window_fits"], "stocks").height + 1
    check = night.check()
    assert check.exit_code == 2, check.stderr
    first, *rest = check.lines("error:")
    assert first == f"error: {message}"
    # the universe over that source's series is reported too, pointing at the unread source
    assert rest == [
        f"error: {night.config}: universe 'rates_pair' lists series 'RT_X', which no source provides; fix the name "
        "or add a source that has it (source(s) 'rates' could not be read above and may provide it)"
    ], check.stderr


def test_export_directory_cannot_be_written(night: Night) -> None:
    night.write("blocker", "a file where the export folder should be\n")
    night.write_config(night.config_text().replace('directory = "exports"', 'directory = "blocker/exports"', 1))
    before, result, after = _partial(night)
    # the night's work is stored and published; only the export failed, and says where and why
    assert result.exit_code == 2, result.stderr
    assert_kept(before, after, untouched=["rates_pair"], grown=["stocks"])
    snap = night.snapshot_tables()
    assert of_universe(snap["window_fits"], "stocks").height == of_universe(before["window_fits"], "stocks").height + 1
    (line,) = result.lines("failed:")
    folder = str(night.folder / "blocker" / "exports")
    assert line.startswith("failed: export: ") and folder in line, line
    assert not (night.folder / "blocker").is_dir()
    check = night.check()
    assert check.exit_code == 2  # the sources were read: "partial"
    assert check.lines("error:") == [
        f"error: {night.config}: [export] directory folder {folder!r} cannot be written; choose a writable folder"
    ], check.stderr
