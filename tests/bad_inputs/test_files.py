"""Bad files and bad data shapes, each run through `shockflow run` on night 2 of the scenario.

Every case checks, besides its own message: the message is one line, printed verbatim by the CLI
(no traceback without --debug); nothing stored before is lost or changed (every table compared
before and after); the rest of the night still runs (the equities source is ingested, the
`stocks` universe fits its one new window and the snapshot is published with it); and the exit
code is 2 ("partial") when anything failed, 0 when the input was accepted.
"""

from __future__ import annotations

from typing import Any

import polars as pl
import pytest

from tests.bad_inputs.cases import FILE_CASES, SHAPE_CASES, Case
from tests.bad_inputs.night import TRACEBACK, CliResult, Night, assert_kept, new_rows, of_universe


def _night_two(night: Night, case: Case) -> tuple[dict[str, Any], dict[str, pl.DataFrame], CliResult, dict[str, pl.DataFrame]]:
    values = case.build(night)
    before = night.tables()
    result = night.run("--no-export")
    after = night.tables()
    assert not TRACEBACK.search(result.stderr), result.stderr
    return values, before, result, after


def _rest_of_night_ran(night: Night, before: dict[str, pl.DataFrame], after: dict[str, pl.DataFrame]) -> None:
    """Equities ingested (3 new rows), `stocks` fitted exactly its new window, snapshot has it."""
    batches = new_rows(before["ingest_batches"], after["ingest_batches"])
    eq = batches.filter(pl.col("source") == "equities").row(0, named=True)
    assert (eq["status"], eq["rows_new"], eq["rows_revised"]) == ("succeeded", 3, 0)
    runs = new_rows(before["runs"], after["runs"])
    stocks = runs.filter(pl.col("universe") == "stocks").row(0, named=True)
    assert (stocks["status"], stocks["windows_fitted"], stocks["windows_skipped"]) == ("succeeded", 1, 0)
    n_before = of_universe(before["window_fits"], "stocks").height
    assert of_universe(after["window_fits"], "stocks").height == n_before + 1
    snap = night.snapshot_tables()
    assert of_universe(snap["window_fits"], "stocks").height == n_before + 1


def _failure_line(result: CliResult, what: str, message: str) -> None:
    """The CLI prints the recorded message verbatim, on one line, once, naming what failed once."""
    assert "\n" not in message
    expected = f"failed: {message}" if message.startswith(f"{what}:") else f"failed: {what}: {message}"
    assert result.lines("failed:") == [expected], result.stderr


@pytest.mark.parametrize("case", FILE_CASES, ids=[c.id for c in FILE_CASES])
def test_bad_file(night: Night, case: Case) -> None:
    values, before, result, after = _night_two(night, case)
    _rest_of_night_ran(night, before, after)
    runs = new_rows(before["runs"], after["runs"])
    batches = new_rows(before["ingest_batches"], after["ingest_batches"])
    rates_batch = batches.filter(pl.col("source") == "rates").row(0, named=True)
    rates_run = runs.filter(pl.col("universe") == "rates_pair").row(0, named=True)

    if case.outcome == "source":
        assert result.exit_code == 2, result.stderr
        assert rates_batch["status"] == "failed"
        message = rates_batch["message"]
        assert case.regex(values).fullmatch(message), message
        _failure_line(result, "source 'rates'", message)
        # nothing of the broken file is stored; the universe reran on the stored rows: no change
        assert rates_run["status"] == "succeeded" and rates_run["windows_fitted"] == 0
        assert_kept(before, after, untouched=["rates_pair"], grown=["stocks"])
        rt = after["observations"].filter(pl.col("source") == "rates")
        assert rt.equals(before["observations"].filter(pl.col("source") == "rates"))
        # `check` reads the same file and refuses it with the same message
        check = night.check()
        assert check.exit_code != 0, check.stdout
        assert f"error: {message}" in check.lines("error:"), check.stderr
    elif case.outcome == "universe":
        assert result.exit_code == 2, result.stderr
        assert rates_batch["status"] == "succeeded"
        assert rates_run["status"] == "failed"
        message = rates_run["message"]
        assert case.regex(values).fullmatch(message), message
        _failure_line(result, "universe 'rates_pair'", message)
        assert_kept(before, after, untouched=["rates_pair"], grown=["stocks"])
    else:
        assert case.outcome == "accepted"
        assert result.exit_code == 0, result.stderr
        assert result.lines("failed:") == []
        assert (rates_batch["status"], rates_run["status"], rates_run["windows_fitted"]) == ("succeeded", "succeeded", 1)
        assert_kept(before, after, grown=["stocks", "rates_pair"])
    if case.check is not None:
        case.check(night, values)


@pytest.mark.parametrize("case", SHAPE_CASES, ids=[c.id for c in SHAPE_CASES])
def test_bad_shape(night: Night, case: Case) -> None:
    values, before, result, after = _night_two(night, case)
    _rest_of_night_ran(night, before, after)
    runs = new_rows(before["runs"], after["runs"])
    run = runs.filter(pl.col("universe") == case.universe).row(0, named=True)
    fits = of_universe(after["window_fits"], case.universe)
    if case.outcome == "universe":
        assert result.exit_code == 2, result.stderr
        assert run["status"] == "failed"
        assert case.regex(values).fullmatch(run["message"]), run["message"]
        _failure_line(result, f"universe {case.universe!r}", run["message"])
        assert fits.height == 0
    else:
        assert case.outcome == "skipped"
        assert result.exit_code == 0, result.stderr
        assert result.lines("failed:") == []
        skipped = fits.filter(pl.col("skip_reason").is_not_null())
        assert skipped.height >= case.extra["min_skipped"], fits["skip_reason"].value_counts()
        assert skipped.height < fits.height  # the other windows are fitted
        assert (run["status"], run["windows_skipped"], run["windows_fitted"]) == (
            "succeeded", skipped.height, fits.height - skipped.height,
        )  # fmt: skip
        rx = case.regex(values)
        for reason in skipped["skip_reason"].unique().to_list():
            assert rx.fullmatch(reason), reason
        # a skipped window stores no numbers, and no result row elsewhere
        assert skipped["spectral_radius"].null_count() == skipped.height
        ends = set(skipped["window_end"].to_list())
        for t in ("connectedness", "pairwise", "granger", "responses", "decompositions", "window_params"):
            assert not ends & set(of_universe(after[t], case.universe)["window_end"].to_list()), t
    assert_kept(before, after, untouched=["rates_pair"], grown=["stocks"])
    if case.check is not None:
        case.check(night, values)

