"""Benchmarks for shockflow, run by ``make bench`` (``python -m bench``).

Each case is a function registered by name in ``bench.__main__.CASES`` (a dotted
``"module:function"`` path, imported only when the case runs). A case prints one or more tables
with `print_table`, measuring every baseline side by side in the same process and run, and
returns nothing. Select cases by name: ``python -m bench rolling``; list them with ``--list``.

Timing targets live here, never as timed asserts in tests. Numbers depend on the machine and its
load, so every table states the load average and BLAS thread count it ran under.
"""

from __future__ import annotations

import os
import platform
import time
from collections.abc import Callable, Sequence
from typing import Any, TypeVar

__all__ = ["best_of", "environment_line", "print_table"]

T = TypeVar("T")


def best_of(fn: Callable[[], T], repeat: int = 3) -> tuple[float, float, T]:
    """Run `fn` `repeat` times; return (best wall seconds, CPU seconds of that run, last result).

    CPU time (this process only) is reported next to wall time because the benchmark machine may
    be shared: wall time then includes waiting for a core, CPU time does not.
    """
    best = (float("inf"), float("inf"))
    result: Any = None
    for _ in range(repeat):
        c0, t0 = time.process_time(), time.perf_counter()
        result = fn()
        wall, cpu = time.perf_counter() - t0, time.process_time() - c0
        if wall < best[0]:
            best = (wall, cpu)
    return best[0], best[1], result


def environment_line() -> str:
    """One line: CPU count, load average, BLAS threads, Python/numpy/scipy versions."""
    import numpy as np
    import scipy

    try:
        load = "load average {:.2f} {:.2f} {:.2f}".format(*os.getloadavg())
    except OSError:
        load = "load average n/a"
    threads = os.environ.get("OPENBLAS_NUM_THREADS", "default")
    return (
        f"{os.cpu_count()} CPUs, {load}, BLAS threads {threads}; Python "
        f"{platform.python_version()}, numpy {np.__version__}, scipy {scipy.__version__}"
    )


def print_table(
    title: str, header: Sequence[str], rows: Sequence[Sequence[Any]], notes: Sequence[str] = ()
) -> None:
    """Print an aligned text table with a title and notes underneath."""
    cells = [[str(h) for h in header]] + [[str(c) for c in row] for row in rows]
    widths = [max(len(r[i]) for r in cells) for i in range(len(header))]

    def line(r: list[str]) -> str:
        first = r[0].ljust(widths[0])
        rest = [c.rjust(w) for c, w in zip(r[1:], widths[1:], strict=True)]
        return "  ".join([first, *rest])

    rule = "-" * len(line(cells[0]))
    print()
    print(title)
    print(rule)
    print(line(cells[0]))
    print(rule)
    for r in cells[1:]:
        print(line(r))
    print(rule)
    for note in notes:
        print(note)
