"""The nightly update of a `model = "tvp"` universe: continue the stored filter vs re-filter all dates.

Case (issue 12): 12 series × 6,000 business days (invented random-walk prices, seeded; not market
data), one tvp universe (p = 2, H = 10, κ₁ = κ₂ = 0.99, frequency bands [5, 20] with 100 MA terms),
run through the job's own steps (`pipeline.jobs`, no Prefect). After the first run one new day is
appended and the universe run again: that run continues the stored filter state from its last
date. Side by side, the same new day with ``--full`` re-filters every date. Target: the nightly
update's fit ≤ 0.2 s of work.

    python -m bench tvp_nightly        (or python -m bench.tvp_nightly [--days 6000] [--series 12])
"""

from __future__ import annotations

import argparse
import shutil
import tempfile
import time
from pathlib import Path

from . import environment_line, print_table

__all__ = ["main", "run"]

TARGET_NIGHTLY_FIT_S = 0.2


def _inputs(folder: Path, series: int, days: int) -> Path:
    import numpy as np
    import polars as pl

    rng = np.random.default_rng(20240101)
    dates = pl.date_range(pl.date(2000, 1, 3), pl.date(2100, 1, 1), "1d", eager=True)
    dates = dates.filter(dates.dt.weekday() <= 5)[: days + 1]
    levels = 100.0 * np.exp(np.cumsum(rng.standard_normal((days + 1, series)) * 0.01, axis=0))
    frame = pl.DataFrame({"date": dates, **{f"X{j:03d}": np.round(levels[:, j], 6) for j in range(series)}})
    frame.head(days).write_csv(folder / "prices.csv")
    frame.write_csv(folder / "prices_next_day.csv")
    names = ", ".join(f'"X{j:03d}"' for j in range(series))
    config = folder / "bench.toml"
    config.write_text(
        '[warehouse]\npath = "wh.duckdb"\nsnapshot = "serving.duckdb"\n\n'
        '[[sources]]\nname = "prices"\nkind = "csv"\npath = "prices.csv"\n\n'
        f'[[universes]]\nname = "tvp"\nmodel = "tvp"\nseries = [{names}]\nlags = 2\nhorizon = 10\n'
        "frequency_bands = [5, 20]\n[universes.tvp]\ntraining = 100\n",
        encoding="utf-8",
    )
    return config


def _run(config: Path, *, full: bool = False) -> dict[str, float]:
    from pipeline import jobs
    from pipeline.config import load_config

    cfg = load_config(config)
    t0 = time.perf_counter()
    (src,) = cfg.sources
    assert jobs.ingest_source(cfg.warehouse.path, src).status == "succeeded"
    t_ingest = time.perf_counter() - t0
    (u,) = cfg.universes
    t0 = time.perf_counter()
    r = jobs.run_universe(cfg.warehouse.path, u, full=full)
    wall = time.perf_counter() - t0
    assert r.status == "succeeded", r.message
    return {"ingest": t_ingest, "wall": wall, **r.seconds, "fitted": float(r.fitted)}


def run(series: int = 12, days: int = 6000) -> dict[str, dict[str, float]]:
    folder = Path(tempfile.mkdtemp(prefix="bench-tvp-nightly-"))
    try:
        config = _inputs(folder, series, days)
        out = {"first run": _run(config)}
        shutil.copy(folder / "prices_next_day.csv", folder / "prices.csv")
        out["nightly (continue state)"] = _run(config)
        out["same day, --full re-filter"] = _run(config, full=True)
        return out
    finally:
        shutil.rmtree(folder, ignore_errors=True)


def main() -> None:
    parser = argparse.ArgumentParser(prog="python -m bench.tvp_nightly")
    parser.add_argument("--series", type=int, default=12)
    parser.add_argument("--days", type=int, default=6000)
    args = parser.parse_args([]) if __name__ != "__main__" else parser.parse_args()
    out = run(args.series, args.days)
    rows = [
        (name, f"{r['fitted']:.0f}", f"{r['prepare']:.3f}", f"{r['fit']:.3f}", f"{r['store']:.3f}", f"{r['wall']:.3f}")
        for name, r in out.items()
    ]
    nightly, full = out["nightly (continue state)"], out["same day, --full re-filter"]
    print_table(
        f"TVP universe nightly update: {args.series} series × {args.days} days, p = 2, H = 10, bands [5, 20]",
        ("run", "dates fitted", "prepare s", "fit s", "store s", "universe wall s"),
        rows,
        notes=[
            f"nightly fit {nightly['fit']:.3f} s (target ≤ {TARGET_NIGHTLY_FIT_S} s: "
            f"{'met' if nightly['fit'] <= TARGET_NIGHTLY_FIT_S else 'NOT met'}); "
            f"--full re-filter fit {full['fit']:.2f} s, {full['fit'] / max(nightly['fit'], 1e-9):.0f}× the nightly",
            environment_line(),
        ],
    )


if __name__ == "__main__":
    main()
