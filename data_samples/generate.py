"""Build the invented demo market of the Republic of Veloria (a fictional economy).

Nothing here is real data: the country, its markets, series and tickers are made up for shockflow's
demo and tests. The nine daily series come from a known VAR(1) in daily log returns (percent) and
yield/spread changes (basis points), whose cross-market coefficients, common-factor loadings and
volatilities rise smoothly during a nine-month stress episode and then fade back to the calm regime.

Run ``python data_samples/generate.py [--out DIR]`` (default: this folder). It writes

- ``markets_wide.csv``   prices, one WIDE file: ``date`` + one column per price series;
- ``rates_long.csv``     yields, the breakeven, the credit spread and the currency, one LONG file:
                         ``date,series,value`` (a blank ``value`` is a missing observation);
- ``true_parameters.json`` the generator's true parameters (calm and stress regimes, stress profile,
                         calendars, the cells blanked on purpose);
- ``sector_wide.csv``    prices of 40 invented stocks VSX_01..VSX_40 (WIDE), driven by the broad
                         index and a sparse VAR of their own (`sector_panel`): the demo's large
                         universe, fitted by the shrinkage VAR.

The output is deterministic: the random draws come from ``numpy.random.default_rng`` seeded with
``SEED`` (NumPy's Generator streams are stable within a NumPy release line), the recursion runs in
plain Python floats (IEEE arithmetic, no BLAS, whose summation order may differ between machines),
and every number is written with a fixed number of decimals.

The process (one row per business day t, n = 9 series in ``SERIES`` order, s_t in [0, 1] the stress
intensity):

    y_t = c_t + A(s_t) y_{t-1} + L(s_t) f_t + diag(psi(s_t)) e_t,   f_t ~ N(0, I_2), e_t ~ N(0, I_n)
    A(s)   = A_calm + s * DELTA_A_STRESS
    L(s)   = L_calm + s * (L_stress - L_calm)                (two common factors: risk, rates)
    psi(s) = psi_calm * (1 + s * (IDIO_VOL_MULT - 1))
    Sigma_u(s) = L(s) L(s)' + diag(psi(s)^2)
    c_t    = c_calm + (I - A(s_t)) STRESS_SWING (s_t - s_{t-1})   (a sell-off, then a recovery)

The (I - A) factor makes the expected cumulated move over the rise about STRESS_SWING (the VAR
would otherwise amplify the intercept shift by (I - A)^{-1}), undone over the fade.

so outside the episode (s = 0) the data follow the calm VAR(1) (c_calm, A_calm, Sigma_u(0)) exactly.
"""

from __future__ import annotations

import argparse
import json
import math
import sys
from dataclasses import dataclass
from datetime import date, timedelta
from pathlib import Path

import numpy as np

# ---------------------------------------------------------------------------------------------
# Seed, dates and the series (everything a user may want to change lives here, at the top)
# ---------------------------------------------------------------------------------------------

SEED = 20240917
FIRST_DAY = date(2010, 1, 4)  # a Monday
LAST_DAY = date(2024, 12, 31)
BURN_IN = 250  # calm-regime steps simulated and discarded before FIRST_DAY


@dataclass(frozen=True)
class Series:
    """One invented series: where it is written, its units and how it turns into VAR changes."""

    ticker: str
    description: str
    file: str  # "wide" (markets_wide.csv) or "long" (rates_long.csv)
    level_unit: str
    change: str  # "log_pct": 100*diff(log level); "pct_to_bp": 100*diff(level); "bp": diff(level)
    change_unit: str
    start_level: float
    decimals: int
    first_date: date = FIRST_DAY


SERIES: tuple[Series, ...] = (
    Series("VLX_BROAD", "Veloria Exchange broad equity index (price index)", "wide",
           "index points", "log_pct", "log return, percent", 1000.0, 2),
    Series("VLX_BANKS", "Veloria Exchange bank-sector equity index (price index)", "wide",
           "index points", "log_pct", "log return, percent", 500.0, 2),
    Series("VLX_SMALL", "Veloria Exchange small-company equity index (launched 2013)", "wide",
           "index points", "log_pct", "log return, percent", 250.0, 2, date(2013, 1, 2)),
    Series("VOB_ORE", "Velorian ore benchmark, price per tonne in Fedrian crowns "
           "(settled on a foreign venue)", "wide",
           "Fedrian crowns per tonne", "log_pct", "log return, percent", 80.0, 2),
    Series("FX_VLR", "velor exchange rate: Fedrian crowns per 1 velor (up = velor stronger)",
           "long", "Fedrian crowns per velor", "log_pct", "log return, percent", 1.25, 5),
    Series("VGB_2Y", "2-year Velorian government bond yield", "long",
           "percent per year", "pct_to_bp", "change, basis points", 2.5, 3),
    Series("VGB_10Y", "10-year Velorian government bond yield", "long",
           "percent per year", "pct_to_bp", "change, basis points", 4.0, 3),
    Series("VGB_BE10", "10-year inflation breakeven (nominal minus index-linked yield)", "long",
           "percent per year", "pct_to_bp", "change, basis points", 2.2, 3),
    Series("VCR_SPREAD", "Velorian investment-grade corporate credit spread index", "long",
           "basis points", "bp", "change, basis points", 180.0, 2),
)
TICKERS = tuple(s.ticker for s in SERIES)
N = len(SERIES)

# ---------------------------------------------------------------------------------------------
# Calm regime: VAR(1) y_t = c + A y_{t-1} + u_t. Rows are equations (the responding series),
# columns the lagged series, both in SERIES order. Units: row i's change (percent or bp) per unit
# of column j's lagged change (percent or bp).
# ---------------------------------------------------------------------------------------------

#                BROAD  BANKS  SMALL  ORE    FX     2Y      10Y    BE10   SPREAD
INTERCEPT_CALM = [0.025, 0.020, 0.030, 0.010, 0.000, 0.000, 0.000, 0.000, 0.000]

COEFS_CALM = [
    # BROAD  BANKS  SMALL   ORE     FX      2Y      10Y     BE10    SPREAD
    [-0.04,  0.03,  0.00,   0.02,   0.00,   0.000,  0.000,  0.000,  -0.020],  # VLX_BROAD
    [0.05,  -0.03,  0.00,   0.00,   0.00,   0.004,  0.000,  0.000,  -0.030],  # VLX_BANKS
    [0.12,   0.00,  0.06,   0.00,   0.00,   0.000,  0.000,  0.000,  -0.020],  # VLX_SMALL
    [0.05,   0.00,  0.00,  -0.03,   0.00,   0.000,  0.000,  0.000,   0.000],  # VOB_ORE
    [0.03,   0.00,  0.00,   0.04,   0.02,   0.010,  0.000,  0.000,   0.000],  # FX_VLR
    [0.40,   0.00,  0.00,   0.00,   0.00,   0.080,  0.050,  0.100,   0.000],  # VGB_2Y
    [0.60,   0.00,  0.00,   0.30,   0.00,   0.100,  0.020,  0.100,   0.000],  # VGB_10Y
    [0.00,   0.00,  0.00,   0.35,  -0.80,   0.000,  0.000,  0.050,   0.000],  # VGB_BE10
    [-0.50, -0.20,  0.00,   0.00,   0.00,   0.000,  0.000,  0.000,   0.100],  # VCR_SPREAD
]

# Innovations u_t = L f_t + diag(psi) e_t: factor 1 "risk appetite", factor 2 "rates level".
LOADINGS_CALM = [
    # risk   rates
    [0.55,  0.00],  # VLX_BROAD
    [0.75,  0.00],  # VLX_BANKS
    [0.60,  0.00],  # VLX_SMALL
    [0.50,  0.00],  # VOB_ORE
    [0.15,  0.10],  # FX_VLR
    [1.00,  2.50],  # VGB_2Y
    [1.30,  3.20],  # VGB_10Y
    [0.60,  1.20],  # VGB_BE10
    [-0.70, 0.00],  # VCR_SPREAD
]
IDIO_SD_CALM = [0.70, 0.95, 0.80, 1.40, 0.46, 2.20, 2.90, 2.10, 1.85]

# ---------------------------------------------------------------------------------------------
# Stress regime (reached at full intensity s = 1): stronger lagged spill-overs, a much heavier
# common risk factor and higher idiosyncratic volatility.
# ---------------------------------------------------------------------------------------------

DELTA_COEFS_STRESS = [
    # BROAD  BANKS  SMALL   ORE     FX      2Y      10Y     BE10    SPREAD
    [0.00,   0.10,  0.00,   0.00,   0.00,   0.000,  0.000,  0.000,  -0.040],  # VLX_BROAD
    [0.08,   0.00,  0.00,   0.00,   0.00,   0.000,  0.000,  0.000,  -0.080],  # VLX_BANKS
    [0.15,   0.00,  0.00,   0.00,   0.00,   0.000,  0.000,  0.000,  -0.040],  # VLX_SMALL
    [0.10,   0.00,  0.00,   0.00,   0.10,   0.000,  0.000,  0.000,   0.000],  # VOB_ORE
    [0.08,   0.00,  0.00,   0.05,   0.00,   0.000,  0.000,  0.000,   0.000],  # FX_VLR
    [1.00,   0.00,  0.00,   0.00,   0.00,   0.000,  0.000,  0.000,  -0.200],  # VGB_2Y
    [1.20,   0.00,  0.00,   0.00,   0.00,   0.000,  0.000,  0.000,  -0.200],  # VGB_10Y
    [0.50,   0.00,  0.00,   0.50,   0.00,   0.000,  0.000,  0.000,   0.000],  # VGB_BE10
    [-0.80, -0.80,  0.00,   0.00,   0.00,   0.000,  0.000,  0.000,   0.100],  # VCR_SPREAD
]
LOADINGS_STRESS = [
    # risk   rates
    [1.60,  0.00],  # VLX_BROAD
    [2.40,  0.00],  # VLX_BANKS
    [1.90,  0.00],  # VLX_SMALL
    [1.70,  0.00],  # VOB_ORE
    [0.60,  0.10],  # FX_VLR
    [3.50,  2.50],  # VGB_2Y
    [4.50,  3.20],  # VGB_10Y
    [2.20,  1.20],  # VGB_BE10
    [-3.80, 0.00],  # VCR_SPREAD
]
IDIO_VOL_MULT = [1.4, 1.6, 1.4, 1.3, 1.3, 1.2, 1.2, 1.2, 1.5]

# The episode: s rises as sin^2 over the rise, stays at 1 on the plateau, falls as cos^2 over the
# fade (a Tukey window), on business days. About nine months from first rise to full calm.
STRESS_RISE_START = date(2017, 8, 1)
STRESS_PEAK_START = date(2017, 10, 16)
STRESS_PEAK_END = date(2018, 2, 15)
STRESS_FADE_END = date(2018, 4, 30)
# Cumulated move of each series over the rise (undone over the fade), in change units:
# log points in percent for prices, basis points for yields and the spread.
STRESS_SWING = [-30.0, -45.0, -35.0, -25.0, -12.0, -120.0, -70.0, -60.0, 180.0]

# ---------------------------------------------------------------------------------------------
# Calendars and missing cells
# ---------------------------------------------------------------------------------------------

# Veloria Exchange (equities and the wide file's rows): fixed-date holidays (no weekend
# substitution), Good Friday, Easter Monday and Harvest Monday (first Monday of October).
EXCHANGE_FIXED_HOLIDAYS = [(1, 1), (3, 14), (5, 1), (12, 24), (12, 25), (12, 26)]
EXCHANGE_ONE_OFF_CLOSURES = [date(2016, 3, 9)]  # a trading-system outage
# Velorian money and bond market (the long file): its own fixed dates, Easter Monday and
# Treasury Settlement Day (last Friday of June).
RATES_FIXED_HOLIDAYS = [(1, 1), (1, 2), (8, 9), (11, 11), (12, 25), (12, 26)]
# Foreign venue that settles the ore price: blank VOB_ORE cells on its holidays (third Monday of
# February and 20 November) even when the Veloria Exchange is open.
ORE_VENUE_FIXED_HOLIDAYS = [(11, 20)]
# Cells blanked at random (a late or failed print): how many in each file.
MISSING_CELLS_WIDE = 10
MISSING_CELLS_LONG = 10

HERE = Path(__file__).resolve().parent
WIDE_FILE = "markets_wide.csv"
LONG_FILE = "rates_long.csv"
PARAMS_FILE = "true_parameters.json"
SECTOR_FILE = "sector_wide.csv"

# ---------------------------------------------------------------------------------------------
# Calendars
# ---------------------------------------------------------------------------------------------


def business_days(first: date, last: date) -> list[date]:
    """Monday-to-Friday dates from `first` to `last`, inclusive."""
    out, d = [], first
    while d <= last:
        if d.weekday() < 5:
            out.append(d)
        d += timedelta(days=1)
    return out


def easter_sunday(year: int) -> date:
    """Gregorian Easter Sunday (the anonymous Gregorian algorithm, Meeus/Jones/Butcher)."""
    a, b, c = year % 19, year // 100, year % 100
    d, e = b // 4, b % 4
    f = (b + 8) // 25
    g = (b - f + 1) // 3
    h = (19 * a + b - d - g + 15) % 30
    i, k = c // 4, c % 4
    ell = (32 + 2 * e + 2 * i - h - k) % 7
    m = (a + 11 * h + 22 * ell) // 451
    month = (h + ell - 7 * m + 114) // 31
    day = (h + ell - 7 * m + 114) % 31 + 1
    return date(year, month, day)


def nth_weekday(year: int, month: int, weekday: int, nth: int) -> date:
    """The `nth` (1-based; -1 = last) `weekday` (Monday = 0) of a month."""
    if nth > 0:
        d = date(year, month, 1)
        d += timedelta(days=(weekday - d.weekday()) % 7)
        return d + timedelta(weeks=nth - 1)
    nxt = date(year + (month == 12), month % 12 + 1, 1)
    d = nxt - timedelta(days=1)
    return d - timedelta(days=(d.weekday() - weekday) % 7)


def exchange_holidays(years: range) -> set[date]:
    """Days the Veloria Exchange is closed (rows absent from the wide file)."""
    out = set(EXCHANGE_ONE_OFF_CLOSURES)
    for y in years:
        out.update(date(y, m, d) for m, d in EXCHANGE_FIXED_HOLIDAYS)
        easter = easter_sunday(y)
        out.update({easter - timedelta(days=2), easter + timedelta(days=1)})
        out.add(nth_weekday(y, 10, 0, 1))
    return out


def rates_holidays(years: range) -> set[date]:
    """Days the Velorian money and bond market is closed (no rows in the long file)."""
    out: set[date] = set()
    for y in years:
        out.update(date(y, m, d) for m, d in RATES_FIXED_HOLIDAYS)
        out.add(easter_sunday(y) + timedelta(days=1))
        out.add(nth_weekday(y, 6, 4, -1))
    return out


def ore_venue_holidays(years: range) -> set[date]:
    """Days the foreign venue publishes no ore price (blank VOB_ORE cells in the wide file)."""
    out: set[date] = set()
    for y in years:
        out.update(date(y, m, d) for m, d in ORE_VENUE_FIXED_HOLIDAYS)
        out.add(nth_weekday(y, 2, 0, 3))
    return out


# ---------------------------------------------------------------------------------------------
# The process
# ---------------------------------------------------------------------------------------------


def stress_intensity(days: list[date]) -> list[float]:
    """s_t in [0, 1] for each day: sin^2 rise, plateau at 1, cos^2 fade, 0 elsewhere.

    The rise and fade are measured in business days, so s reaches exactly 1 and exactly 0.
    """
    rise = [d for d in days if STRESS_RISE_START <= d <= STRESS_PEAK_START]
    fade = [d for d in days if STRESS_PEAK_END <= d <= STRESS_FADE_END]
    out = []
    for d in days:
        if STRESS_RISE_START <= d <= STRESS_PEAK_START:
            x = rise.index(d) / (len(rise) - 1)
            out.append(math.sin(0.5 * math.pi * x) ** 2)
        elif STRESS_PEAK_START < d < STRESS_PEAK_END:
            out.append(1.0)
        elif STRESS_PEAK_END <= d <= STRESS_FADE_END:
            x = fade.index(d) / (len(fade) - 1)
            out.append(math.cos(0.5 * math.pi * x) ** 2)
        else:
            out.append(0.0)
    return out


def regime(s: float) -> tuple[list[list[float]], list[list[float]], list[float]]:
    """(A(s), L(s), psi(s)) at stress intensity s, as nested Python float lists."""
    a = [[COEFS_CALM[i][j] + s * DELTA_COEFS_STRESS[i][j] for j in range(N)] for i in range(N)]
    load = [[LOADINGS_CALM[i][k] + s * (LOADINGS_STRESS[i][k] - LOADINGS_CALM[i][k])
             for k in range(2)] for i in range(N)]
    psi = [IDIO_SD_CALM[i] * (1.0 + s * (IDIO_VOL_MULT[i] - 1.0)) for i in range(N)]
    return a, load, psi


def innovation_covariance(s: float) -> list[list[float]]:
    """Sigma_u(s) = L(s) L(s)' + diag(psi(s)^2), in plain floats (the same bits on every machine)."""
    _, load, psi = regime(s)
    return [[load[i][0] * load[j][0] + load[i][1] * load[j][1] + (psi[i] ** 2 if i == j else 0.0)
             for j in range(N)] for i in range(N)]


def simulate(days: list[date], rng: np.random.Generator) -> list[list[float]]:
    """Changes y_t (len(days) rows of N floats) from the recursion in the module docstring."""
    s_path = [0.0] * BURN_IN + stress_intensity(days)
    draws = rng.standard_normal((len(s_path), 2 + N)).tolist()
    y_prev = [0.0] * N
    out = []
    s_last = 0.0
    for t, s in enumerate(s_path):
        a, load, psi = regime(s)
        f1, f2, *e = draws[t]
        y = []
        ds = s - s_last
        for i in range(N):
            row = a[i]
            # (I - A(s)) SWING ds, row i
            acc = INTERCEPT_CALM[i] + STRESS_SWING[i] * ds
            for j in range(N):
                acc -= row[j] * STRESS_SWING[j] * ds
            for j in range(N):
                acc += row[j] * y_prev[j]
            acc += load[i][0] * f1 + load[i][1] * f2 + psi[i] * e[i]
            y.append(acc)
        y_prev, s_last = y, s
        if t >= BURN_IN:
            out.append(y)
    return out


def to_levels(days: list[date], changes: list[list[float]]) -> list[list[float]]:
    """Cumulate changes to levels; a series' level on its first date is its start level."""
    levels = []
    current = [s.start_level for s in SERIES]
    for t, y in enumerate(changes):
        for i, spec in enumerate(SERIES):
            if days[t] <= spec.first_date:  # not yet launched: hold at the start level
                current[i] = spec.start_level
            elif spec.change == "log_pct":
                current[i] = current[i] * math.exp(y[i] / 100.0)
            elif spec.change == "pct_to_bp":
                current[i] = current[i] + y[i] / 100.0
            else:
                current[i] = current[i] + y[i]
        levels.append(list(current))
    return levels


# ---------------------------------------------------------------------------------------------
# Files
# ---------------------------------------------------------------------------------------------


def _fmt(value: float, decimals: int) -> str:
    text = f"{value:.{decimals}f}"
    return "0." + "0" * decimals if text == "-0." + "0" * decimals else text


def _pick_missing(rng: np.random.Generator, cells: list[tuple[date, str]], k: int
                  ) -> list[tuple[date, str]]:
    idx = rng.choice(len(cells), size=k, replace=False)
    return sorted(cells[int(i)] for i in idx)


def build(out_dir: Path) -> dict[str, Path]:
    """Simulate the scenario and write the three files into `out_dir`; return their paths."""
    out_dir.mkdir(parents=True, exist_ok=True)
    sim_seq, gap_seq = np.random.SeedSequence(SEED).spawn(2)
    days = business_days(FIRST_DAY, LAST_DAY)
    years = range(FIRST_DAY.year, LAST_DAY.year + 1)
    check_stable()
    changes = simulate(days, np.random.default_rng(sim_seq))
    levels = to_levels(days, changes)
    check_levels(days, levels)

    closed_exchange = exchange_holidays(years)
    closed_rates = rates_holidays(years)
    closed_ore = ore_venue_holidays(years)
    col = {s.ticker: i for i, s in enumerate(SERIES)}
    wide = [s for s in SERIES if s.file == "wide"]
    long = [s for s in SERIES if s.file == "long"]
    wide_days = [d for d in days if d not in closed_exchange]
    long_days = [d for d in days if d not in closed_rates]

    # Candidate cells for random blanks: observed, after the series starts, not its first day.
    gap_rng = np.random.default_rng(gap_seq)
    wide_cells = [(d, s.ticker) for d in wide_days for s in wide
                  if d > s.first_date and not (s.ticker == "VOB_ORE" and d in closed_ore)]
    long_cells = [(d, s.ticker) for s in long for d in long_days if d > s.first_date]
    blank_wide = set(_pick_missing(gap_rng, wide_cells, MISSING_CELLS_WIDE))
    blank_long = set(_pick_missing(gap_rng, long_cells, MISSING_CELLS_LONG))
    day_index = {d: t for t, d in enumerate(days)}

    def cell(d: date, spec: Series, blanks: set[tuple[date, str]]) -> str:
        if d < spec.first_date or (d, spec.ticker) in blanks:
            return ""
        if spec.ticker == "VOB_ORE" and d in closed_ore:
            return ""
        return _fmt(levels[day_index[d]][col[spec.ticker]], spec.decimals)

    wide_lines = ["date," + ",".join(s.ticker for s in wide)]
    wide_lines += [d.isoformat() + "," + ",".join(cell(d, s, blank_wide) for s in wide)
                   for d in wide_days]
    long_lines = ["date,series,value"]
    long_lines += [f"{d.isoformat()},{s.ticker},{cell(d, s, blank_long)}"
                   for s in long for d in long_days if d >= s.first_date]

    paths = {"wide": out_dir / WIDE_FILE, "long": out_dir / LONG_FILE,
             "params": out_dir / PARAMS_FILE}
    _write(paths["wide"], "\n".join(wide_lines) + "\n")
    _write(paths["long"], "\n".join(long_lines) + "\n")
    params = true_parameters(
        days=days, closed_exchange=closed_exchange, closed_rates=closed_rates,
        closed_ore=closed_ore, blanks=sorted(blank_wide | blank_long),
    )
    _write(paths["params"], json.dumps(params, indent=1) + "\n")
    broad = [row[col["VLX_BROAD"]] for row in changes]
    paths["sector"] = out_dir / SECTOR_FILE
    _write(paths["sector"], sector_panel(days, wide_days, broad))
    return paths


# ---------------------------------------------------------------------------------------------
# The 40-stock panel (a large invented universe for the shrinkage VAR)
# ---------------------------------------------------------------------------------------------

#: the invented stocks of the panel: VSX_01 .. VSX_40 (Veloria Exchange constituents)
SECTOR_TICKERS = [f"VSX_{i:02d}" for i in range(1, 41)]
SECTOR_SEED = SEED + 40


def sector_panel(days: list[date], wide_days: list[date], broad: list[float]) -> str:
    """Prices of 40 invented stocks (Veloria Exchange calendar, 2 decimals), as a WIDE csv text.

    Daily log returns in percent:  r_it = β_i(s_t) m_t + Σ_j a_ij r_j,t−1 + σ_i(s_t) e_it,
    m_t the broad index's return (VLX_BROAD, the same draws as the main market), β_i(s) =
    β_i (1 + 0.5 s) and σ_i(s) = σ_i (1 + s) rising with the stress intensity s_t, and a sparse
    own and cross lag matrix a (own 0.02..0.10, two cross effects per stock ±0.06..0.12; stable).
    Plain Python floats, seeded with SECTOR_SEED: the same bits on every machine.
    """
    n = len(SECTOR_TICKERS)
    rng = np.random.default_rng(SECTOR_SEED)
    beta = [round(float(b), 3) for b in rng.uniform(0.4, 1.3, n)]
    sd = [round(float(v), 3) for v in rng.uniform(0.8, 1.8, n)]
    own = [round(float(v), 3) for v in rng.uniform(0.02, 0.10, n)]
    cross: list[list[tuple[int, float]]] = []
    for i in range(n):
        others = [int(j) for j in rng.choice([j for j in range(n) if j != i], size=2, replace=False)]
        signs = rng.choice([-1.0, 1.0], size=2)
        sizes = rng.uniform(0.06, 0.12, size=2)
        cross.append([(j, round(float(sg * sz), 3)) for j, sg, sz in zip(others, signs, sizes, strict=True)])
    s_path = stress_intensity(days)
    draws = rng.standard_normal((len(days), n)).tolist()
    prev = [0.0] * n
    level = [100.0] * n
    by_day = {}
    for t, d in enumerate(days):
        s = s_path[t]
        r = []
        for i in range(n):
            acc = beta[i] * (1.0 + 0.5 * s) * broad[t] + own[i] * prev[i]
            for j, a in cross[i]:
                acc += a * prev[j]
            acc += sd[i] * (1.0 + s) * draws[t][i]
            r.append(acc)
        prev = r
        level = [lv * math.exp(x / 100.0) for lv, x in zip(level, r, strict=True)]
        by_day[d] = list(level)
    lines = ["date," + ",".join(SECTOR_TICKERS)]
    lines += [d.isoformat() + "," + ",".join(_fmt(v, 2) for v in by_day[d]) for d in wide_days]
    return "\n".join(lines) + "\n"


def _write(path: Path, text: str) -> None:
    with open(path, "w", encoding="utf-8", newline="\n") as fh:
        fh.write(text)


def check_stable(grid: int = 21) -> None:
    """Refuse parameters for which A(s), Sigma_u(s) is not a stable VAR for some s in [0, 1].

    Uses arlib's companion-matrix spectral radius (arlib is this repository's own package).
    """
    try:
        import arlib
    except ImportError:  # run with a Python that has not installed the repository
        sys.path.insert(0, str(HERE.parent))
        import arlib
    for k in range(grid):
        s = k / (grid - 1)
        a, _, _ = regime(s)
        radius = arlib.var_process(np.array([a]), np.array(innovation_covariance(s))).spectral_radius
        if radius >= 1.0:
            msg = (f"the VAR at stress intensity s={s:.2f} has spectral radius {radius:.4f} >= 1; "
                   f"shrink COEFS_CALM or DELTA_COEFS_STRESS in {Path(__file__).name}")
            raise ValueError(msg)


def check_levels(days: list[date], levels: list[list[float]]) -> None:
    """Refuse a parameter change that makes the scenario implausible (negative spread, etc.)."""
    for i, spec in enumerate(SERIES):
        lo = min(row[i] for row in levels)
        floor = {"VCR_SPREAD": 20.0, "VGB_2Y": -1.0, "VGB_10Y": -1.0, "VGB_BE10": -1.0}
        if spec.ticker in floor and lo < floor[spec.ticker]:
            t = min(range(len(days)), key=lambda k: levels[k][i])
            msg = (f"{spec.ticker} falls to {lo:.3f} on {days[t]} (floor {floor[spec.ticker]}); "
                   f"change SEED or the parameters at the top of {Path(__file__).name}")
            raise ValueError(msg)


def _matrix(rows: list[list[float]]) -> list[list[float]]:
    return [[float(x) for x in r] for r in rows]


def true_parameters(*, days: list[date], closed_exchange: set[date], closed_rates: set[date],
                    closed_ore: set[date], blanks: list[tuple[date, str]]) -> dict:
    """The generator's truth as plain JSON: regimes, stress profile, calendars, blanked cells."""
    a_stress, load_stress, psi_stress = regime(1.0)
    a_calm, load_calm, psi_calm = regime(0.0)
    in_range = [d for d in sorted(closed_exchange) if FIRST_DAY <= d <= LAST_DAY and d.weekday() < 5]
    rates_in_range = [d for d in sorted(closed_rates)
                      if FIRST_DAY <= d <= LAST_DAY and d.weekday() < 5]
    ore_in_range = [d for d in sorted(closed_ore) if FIRST_DAY <= d <= LAST_DAY and d.weekday() < 5]
    s_path = stress_intensity(days)
    return {
        "about": ("Invented scenario: the Republic of Veloria is fictional and so is every series. "
                  "True parameters of the VAR(1) that generated data_samples/ "
                  "(see data_samples/README.md and generate.py)."),
        "seed": SEED,
        "first_day": FIRST_DAY.isoformat(),
        "last_day": LAST_DAY.isoformat(),
        "model": ("y_t = c_t + A(s_t) y_{t-1} + u_t, u_t ~ N(0, Sigma_u(s_t)); "
                  "A(s) = A_calm + s (A_stress - A_calm); Sigma_u(s) = L(s) L(s)' + diag(psi(s)^2)"),
        "series": [
            {"ticker": s.ticker, "description": s.description,
             "file": WIDE_FILE if s.file == "wide" else LONG_FILE,
             "level_unit": s.level_unit, "change_in_var": s.change_unit,
             "change_formula": {"log_pct": "100 * (ln level_t - ln level_{t-1})",
                                "pct_to_bp": "100 * (level_t - level_{t-1})",
                                "bp": "level_t - level_{t-1}"}[s.change],
             "first_date": s.first_date.isoformat(), "decimals": s.decimals}
            for s in SERIES
        ],
        "lags": 1,
        "calm": {
            "intercept": [float(x) for x in INTERCEPT_CALM],
            "coefs": [_matrix(a_calm)],
            "sigma_u": innovation_covariance(0.0),
            "factor_loadings": _matrix(load_calm),
            "idiosyncratic_sd": psi_calm,
        },
        "stress": {
            "note": "the regime at full stress intensity s = 1 (the plateau)",
            "coefs": [_matrix(a_stress)],
            "sigma_u": innovation_covariance(1.0),
            "factor_loadings": _matrix(load_stress),
            "idiosyncratic_sd": psi_stress,
        },
        "stress_profile": {
            "shape": ("s = sin^2 rise over business days from rise_start to peak_start, 1 on the "
                      "plateau, cos^2 fade from peak_end to fade_end, 0 elsewhere"),
            "rise_start": STRESS_RISE_START.isoformat(),
            "peak_start": STRESS_PEAK_START.isoformat(),
            "peak_end": STRESS_PEAK_END.isoformat(),
            "fade_end": STRESS_FADE_END.isoformat(),
            "intercept_swing": [float(x) for x in STRESS_SWING],
            "intercept_swing_note": ("c_t = c_calm + (I - A(s_t)) swing (s_t - s_{t-1}): about "
                                     "the expected cumulated move over the rise, undone over "
                                     "the fade"),
            "business_days_with_stress": sum(1 for s in s_path if s > 0.0),
        },
        "calendars": {
            "exchange_closed_weekdays": [d.isoformat() for d in in_range],
            "rates_closed_weekdays": [d.isoformat() for d in rates_in_range],
            "ore_venue_closed_weekdays": [d.isoformat() for d in ore_in_range],
        },
        "blank_cells": [{"date": d.isoformat(), "series": t} for d, t in blanks],
    }


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(
        description="Rebuild the invented Veloria demo market (CSV files and true parameters).")
    parser.add_argument("--out", type=Path, default=HERE,
                        help="folder to write into (default: the folder of this script)")
    args = parser.parse_args(argv)
    paths = build(args.out)
    for path in paths.values():
        print(f"wrote {path} ({path.stat().st_size:,} bytes)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
