"""Ingest memory: peak resident memory per MB of input for large wide CSV files.

Case (issue 10, item 11): invented random-walk prices, 200 series in one wide CSV of about 50 and
200 MB (8 decimals per value, one row per calendar day). Each measurement runs in a fresh child
process and reports its resident-set high-water mark (``resource.getrusage(RUSAGE_SELF).ru_maxrss``)
and the same after importing polars, DuckDB and the pipeline, so the table shows both the whole
process and the memory the work itself added ("net").

Side by side, on the same file:

- ``polars read_csv``: the baseline, a plain ``pl.read_csv`` of the file (no checks, no storing);
- ``checks, one chunk``: shockflow's reader and row checks with the whole file as one chunk (how
  the file was read before chunking);
- ``ingest``: ``shockflow``'s ingest as a run does it — read and check in 4 MB chunks, then merge
  into an empty warehouse;
- ``re-ingest``: the same file ingested a second time (every row compared with the stored one).

Target: net peak within 3× the file size (or a fixed bound).

    python -m bench.ingest_memory [--sizes 50 200] [--keep DIR]
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

from bench import environment_line, print_table

__all__ = ["case", "main", "write_wide_csv"]

SERIES = 200
TARGET_NET_PER_MB = 3.0

_CHILD = r"""
import json, resource, sys, time
from pathlib import Path
mode, file, folder = sys.argv[1], sys.argv[2], Path(sys.argv[3])
import duckdb, polars as pl
from datetime import date
from pipeline import jobs
from pipeline.config import SourceConfig

def peak():
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024  # kB on Linux

imports = peak()
source = SourceConfig(name="wide", kind="csv", path=file)
t0 = time.perf_counter()
rows = 0
if mode == "polars":
    rows = pl.read_csv(file).height
elif mode == "one_chunk":
    from pipeline.sources._csv import parse_csv_stream
    with open(file, "rb") as stream:
        size = Path(file).stat().st_size
        rows = parse_csv_stream(stream, origin=file, source=source, today=date.today(), chunk_bytes=size + 1).height
else:
    for _ in range(2 if mode == "reingest" else 1):
        r = jobs.ingest_source(folder / "wh.duckdb", source)
        assert r.status == "succeeded", r.message
        rows = r.rows_read
print(json.dumps({"imports": imports, "peak": peak(), "seconds": time.perf_counter() - t0, "rows": rows}))
"""

MODES = (
    ("polars", "polars read_csv (baseline)"),
    ("one_chunk", "checks, one chunk"),
    ("ingest", "ingest (4 MB chunks + merge)"),
    ("reingest", "re-ingest (second run)"),
)


def write_wide_csv(path: Path, megabytes: float, *, series: int = SERIES, seed: int = 20240101) -> Path:
    """An invented wide CSV of about `megabytes` MB: a date column and `series` random walks."""
    import numpy as np
    import polars as pl

    row_bytes = 11 + series * 13  # "yyyy-mm-dd," + ",123.45678901" per series (about)
    rows = max(int(megabytes * 2**20 / row_bytes), 2)
    rng = np.random.default_rng(seed)
    dates = pl.date_range(pl.date(1700, 1, 1), pl.date(2020, 1, 1), "1d", eager=True)[:rows]
    cols = {}
    for j in range(series):
        cols[f"S{j:03d}"] = np.round(100.0 * np.exp(np.cumsum(rng.standard_normal(len(dates)) * 0.01)), 8)
    pl.DataFrame({"date": dates, **cols}).write_csv(path)
    return path


def _measure(mode: str, file: Path, folder: Path) -> dict[str, float]:
    work = Path(tempfile.mkdtemp(prefix="wh-", dir=folder))
    try:
        done = subprocess.run(
            [sys.executable, "-c", _CHILD, mode, str(file), str(work)],
            capture_output=True, text=True, check=False, env=os.environ.copy(),
        )  # fmt: skip
        if done.returncode != 0:
            msg = f"bench child {mode!r} failed: {done.stderr.strip().splitlines()[-1:]}"
            raise RuntimeError(msg)
        return json.loads(done.stdout.strip().splitlines()[-1])
    finally:
        shutil.rmtree(work, ignore_errors=True)


def run(sizes: tuple[float, ...] = (50, 200), keep: Path | None = None) -> list[dict[str, float | str]]:
    """Measure every mode on a file of each size; returns the rows (also printed)."""
    folder = Path(keep) if keep else Path(tempfile.mkdtemp(prefix="shockflow-bench-ingest-"))
    folder.mkdir(parents=True, exist_ok=True)
    out: list[dict[str, float | str]] = []
    try:
        for size in sizes:
            file = write_wide_csv(folder / f"wide_{size:g}mb.csv", size)
            mb = file.stat().st_size / 2**20
            for mode, label in MODES:
                m = _measure(mode, file, folder)
                net = m["peak"] - m["imports"]
                out.append({"file_mb": mb, "mode": label, **m, "net": net})
        rows = [
            [
                f"{r['file_mb']:.0f}", r["mode"], f"{r['rows']:,.0f}", f"{r['peak']:.0f}", f"{r['peak'] / r['file_mb']:.2f}",
                f"{r['net']:.0f}", f"{r['net'] / r['file_mb']:.2f}", f"{r['seconds']:.1f}",
            ]
            for r in out
        ]  # fmt: skip
        print_table(
            f"ingest peak memory, wide CSV of {SERIES} series (child process per row)",
            ["file MB", "what", "rows", "peak MB", "peak/MB", "net MB", "net/MB", "s"],
            rows,
            notes=[
                "peak = the child's RSS high-water mark; net = peak minus the same after imports "
                f"(polars, DuckDB, pipeline); target net/MB <= {TARGET_NET_PER_MB:g} for ingest",
                "rows: CSV rows for the baseline, long rows (series x date) for shockflow",
                environment_line(),
            ],
        )
    finally:
        if keep is None:
            shutil.rmtree(folder, ignore_errors=True)
    return out


def case() -> None:
    """`make bench` entry: the 50 and 200 MB files."""
    run()


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(prog="python -m bench.ingest_memory", description=__doc__.split("\n")[0])
    parser.add_argument("--sizes", type=float, nargs="+", default=[50, 200], help="file sizes in MB")
    parser.add_argument("--keep", type=Path, default=None, help="keep the generated files in DIR")
    args = parser.parse_args(argv)
    run(tuple(args.sizes), args.keep)


if __name__ == "__main__":
    main()
