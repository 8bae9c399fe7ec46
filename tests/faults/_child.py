"""Test-only launcher: the `shockflow` CLI in a child process that SIGKILLs itself at a chosen point.

    python -m tests.faults._child POINT -- run --config FILE

SIGKILL sent by the process to itself is the same event as `kill -9` from outside at that instant:
no handler, no cleanup, no flush. The CLI and the pipeline are unchanged; the launcher only wraps
one pipeline function so the kill lands at a known place:

- ``ingest``: inside the transaction that stores the rates source, every row written, before COMMIT;
- ``fit``: when the first universe (stocks) starts fitting (universes are fitted side by side,
  then stored in turn: nothing of tonight's fits is stored yet);
- ``write``: inside the transaction that stores rates_pair's results, every row written, before COMMIT;
- ``publish``: while the new snapshot file is being filled (after four of its tables);
- ``export``: while a report is being written: its temporary file (``.<name>.<pid>.<id>.tmp``,
  named by pipeline.export's own ``temp_path``) holds the whole report, before the rename;
- ``none``: no kill (the plain CLI).
"""

from __future__ import annotations

import os
import signal
import sys
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

POINTS = ("ingest", "fit", "write", "publish", "export", "none")


def _die() -> None:
    sys.stdout.flush()
    sys.stderr.flush()
    os.kill(os.getpid(), signal.SIGKILL)


def _kill_inside_transaction(target: str) -> None:
    from pipeline import warehouse as wh

    original = wh.transaction

    @contextmanager
    def transaction(con: Any, *, path: Any, action: str) -> Iterator[None]:
        with original(con, path=path, action=action):
            yield
            if action == target:
                _die()  # every statement of the transaction ran; COMMIT never happens

    wh.transaction = transaction


def arm(point: str) -> None:
    if point == "ingest":
        _kill_inside_transaction("storing observations of source 'rates'")
    elif point == "write":
        _kill_inside_transaction("storing results of universe 'rates_pair'")
    elif point == "fit":
        from pipeline import jobs

        original = jobs.fit_block_step

        def fit_block_step(prepared: Any, universe: Any, *args: Any, **kwargs: Any) -> Any:
            if universe.name == "stocks":
                _die()
            return original(prepared, universe, *args, **kwargs)

        jobs.fit_block_step = fit_block_step
    elif point == "publish":
        from pipeline import publish

        original_order = publish._order_by
        calls = {"n": 0}

        def order_by(table: str, prefix: str = "") -> str:
            calls["n"] += 1
            if calls["n"] == 5:
                _die()
            return original_order(table, prefix)

        publish._order_by = order_by
    elif point == "export":
        from pipeline.export import _export, _paths

        def write_text_atomic(path: Any, text: str) -> None:
            tmp = _paths.temp_path(path)
            with open(tmp, "x", encoding="utf-8") as fh:
                fh.write(text)
            _die()  # the report is in its temporary file; the rename never happens

        _export._write_text_atomic = write_text_atomic
    elif point != "none":
        raise SystemExit(f"unknown kill point {point!r}; use one of {', '.join(POINTS)}")


def main(argv: list[str]) -> None:
    point, sep, *cli_args = argv
    assert sep == "--", "usage: python -m tests.faults._child POINT -- run --config FILE"
    arm(point)
    from shockflow.cli import main as cli_main

    sys.argv = ["shockflow", *cli_args]
    cli_main()


if __name__ == "__main__":
    main(sys.argv[1:])
