"""``python -m bench [case ...]``: run benchmark cases by name (all when none is given).

Cases are registered in `CASES`, name → "module:function"; add a case by adding one entry.
BLAS is limited to one thread unless ``--blas-threads`` (or OPENBLAS_NUM_THREADS) says otherwise,
so engine and baselines compare like for like on a machine other jobs may share.
"""

from __future__ import annotations

import argparse
import importlib
import os
import sys
import time

#: Benchmark cases: name -> "module:function" (the function takes no arguments).
CASES: dict[str, str] = {
    "rolling": "bench.rolling:main",
    "rolling_extras": "bench.rolling_extras:main",
    "dashboard": "bench.dashboard_callbacks:case",
    "dashboard_browser": "bench.dashboard_browser:case",
    "pipeline": "bench.pipeline:main",
    "load": "bench.load_dashboard:case",
    "ingest_memory": "bench.ingest_memory:case",
    "tvp": "bench.tvp:main",
    "tvp_nightly": "bench.tvp_nightly:main",
    "hundred": "bench.hundred:main",
    "quiet": "bench.quiet:main",
    "quantile": "bench.quantile:main",
    "shrink": "bench.shrink:main",
}


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m bench", description=__doc__)
    parser.add_argument("cases", nargs="*", help=f"cases to run (default all): {sorted(CASES)}")
    parser.add_argument("--list", action="store_true", help="list the cases and exit")
    parser.add_argument(
        "--blas-threads", default=None, help="BLAS/OpenMP threads (default 1, or the environment)"
    )
    args = parser.parse_args(argv)
    if args.list:
        for name, target in sorted(CASES.items()):
            print(f"{name:12s} {target}")
        return 0
    unknown = [c for c in args.cases if c not in CASES]
    if unknown:
        parser.error(f"unknown case(s) {unknown}; choose from {sorted(CASES)}")
    threads = args.blas_threads or os.environ.get("OPENBLAS_NUM_THREADS") or "1"
    if "numpy" in sys.modules and os.environ.get("OPENBLAS_NUM_THREADS") != threads:
        print("note: numpy was imported before the thread setting; it may not apply")
    for var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ[var] = str(threads)
    for name in args.cases or list(CASES):
        module, func = CASES[name].split(":")
        t0 = time.perf_counter()
        print(f"\n=== bench case {name!r} ===")
        getattr(importlib.import_module(module), func)()
        print(f"=== case {name!r} finished in {time.perf_counter() - t0:.1f} s ===")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
