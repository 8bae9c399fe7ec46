"""What frequency bands and joint connectedness add to the headline rolling refit, side by side.

Headline case of `bench.rolling` (12 series, 6,000 rows, window 250, step 1, p = 2, H = 10, all
classic outputs, one BLAS thread) run four ways in one process, interleaved, best of 5:
plain; + Baruník–Křehlík bands (1, 5], (5, 20], (20, ∞) periods with a 100-step truncation of
the spectral part; + Lastrapes–Wiesen joint connectedness; + both. Target (issue 12): bands and
joint together add at most 30% to the plain run. Data: the invented VAR(2) of `bench.rolling`.
"""

from __future__ import annotations

import time

import arlib

from . import environment_line, print_table
from .rolling import scenario

BANDS = [(1.0, 5.0), (5.0, 20.0), (20.0, float("inf"))]
VARIANTS = {
    "plain (classic outputs)": {},
    "+ bands (truncation 100)": {"frequency_bands": BANDS, "band_truncation": 100},
    "+ joint": {"joint": True},
    "+ bands + joint": {"frequency_bands": BANDS, "band_truncation": 100, "joint": True},
}


def main(repeat: int = 5) -> None:
    y = scenario(12, 2, 6000)
    best = {k: (float("inf"), float("inf")) for k in VARIANTS}
    for _ in range(repeat):  # interleaved: each round runs every variant once
        for name, extra in VARIANTS.items():
            c0, t0 = time.process_time(), time.perf_counter()
            arlib.rolling_var(y, 250, 2, 10, **extra)  # type: ignore[arg-type]  # kwargs by variant
            wall, cpu = time.perf_counter() - t0, time.process_time() - c0
            if wall < best[name][0]:
                best[name] = (wall, cpu)
    base = best["plain (classic outputs)"][0]
    rows = [[k, f"{w:.3f}", f"{c:.3f}", f"{w / base:.2f}×", f"{100 * (w / base - 1):+.0f}%"]
            for k, (w, c) in best.items()]
    print_table(
        "Rolling refit with frequency bands and joint connectedness (12 series, 6,000 rows, "
        "window 250, p = 2, H = 10)",
        ["variant", "wall s", "CPU s", "vs plain", "added"],
        rows,
        [environment_line(), f"best of {repeat}, interleaved; target: + bands + joint adds ≤ 30%",
         "data: invented random stable VAR(2) (bench.rolling.scenario), not market data"],
    )
