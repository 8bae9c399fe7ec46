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
from .rolling import matmul_rate, scenario

N, P, T, WINDOW, H, TRUNCATION = 12, 2, 6000, 250, 10, 100
BANDS = [(1.0, 5.0), (5.0, 20.0), (20.0, float("inf"))]
VARIANTS = {
    "plain (classic outputs)": {},
    "+ bands (truncation 100)": {"frequency_bands": BANDS, "band_truncation": TRUNCATION},
    "+ joint": {"joint": True},
    "+ bands + joint": {"frequency_bands": BANDS, "band_truncation": TRUNCATION, "joint": True},
}


def main(repeat: int = 5) -> None:
    y = scenario(N, P, T)
    best = {k: (float("inf"), float("inf")) for k in VARIANTS}
    for _ in range(repeat):  # interleaved: each round runs every variant once
        for name, extra in VARIANTS.items():
            c0, t0 = time.process_time(), time.perf_counter()
            arlib.rolling_var(y, WINDOW, P, H, **extra)  # type: ignore[arg-type]  # kwargs by variant
            wall, cpu = time.perf_counter() - t0, time.process_time() - c0
            if wall < best[name][0]:
                best[name] = (wall, cpu)
    base = best["plain (classic outputs)"][0]
    rows = [[k, f"{w:.3f}", f"{c:.3f}", f"{w / base:.2f}×", f"{100 * (w / base - 1):+.0f}%"]
            for k, (w, c) in best.items()]
    floor = extras_floor(N, P, TRUNCATION, T - WINDOW + 1)
    rate, _ = matmul_rate()
    budget = 0.3 * base
    print_table(
        "Rolling refit with frequency bands and joint connectedness (12 series, 6,000 rows, "
        "window 250, p = 2, H = 10)",
        ["variant", "wall s", "CPU s", "vs plain", "added"],
        rows,
        [environment_line(), f"best of {repeat}, interleaved; target: + bands + joint adds ≤ 30%",
         "arithmetic floor of what bands + joint add (flops at the measured dgemm rate "
         f"{rate / 1e9:.1f} GFLOP/s with the BLAS threads above): "
         + ", ".join(f"{k} {v / rate:.3f} s" for k, v in floor.items())
         + f"; together {sum(floor.values()) / rate:.3f} s against a 30% budget of {budget:.3f} s "
         f"(floor alone: +{100 * sum(floor.values()) / rate / base:.0f}%)",
         "data: invented random stable VAR(2) (bench.rolling.scenario), not market data"],
    )


def extras_floor(n: int, p: int, truncation: int, windows: int) -> dict[str, float]:
    """Floating-point operations the exact band and joint outputs cannot avoid, for all windows:
    the MA terms Φ_h Σ D^{-1/2} to the truncation (one (n × np)(np × n) product per term), their
    projections on the kept eigenvectors of the bands' Toeplitz forms (`band_projection`: R
    vectors of about H/2 folded terms, for n² sequences) and the joint shares' (n × n)(n × n)
    product per kept vector (`_joint.band_joint_kernel`). Counts as in `bench.rolling`."""
    from arlib._frequency import band_projection, band_weights, default_grid

    grid = default_grid(truncation)
    proj = band_projection(band_weights(BANDS, grid), grid, truncation)
    kept = proj.even.shape[0] + proj.odd.shape[0]
    half = truncation / 2
    return {
        "MA terms": windows * (truncation - 1) * 2.0 * n * (n * p) * n,
        f"projections ({kept} vectors)": windows * kept * 2.0 * half * n * n,
        "joint by band": windows * kept * 2.0 * n**3,
    }
