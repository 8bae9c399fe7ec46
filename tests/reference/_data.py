"""Outside data sets used by the reference checks, read from files the statsmodels package ships.

Only the data files are read; no numbers are taken from statsmodels' own test results.
"""

from __future__ import annotations

import os

import numpy as np


def e1_levels() -> np.ndarray:
    """(92, 3) West German investment, income, consumption, 1960Q1–1982Q4, billions of DM.

    Source: Lütkepohl (2005), data set E1 (Deutsche Bundesbank), as the file `e1.dat` shipped in
    statsmodels/tsa/vector_ar/tests/results/. Comment lines, the date label and the column header
    are skipped; every remaining line is three numbers.
    """
    import statsmodels

    path = os.path.join(
        os.path.dirname(statsmodels.__file__), "tsa", "vector_ar", "tests", "results", "e1.dat"
    )
    rows = []
    with open(path, encoding="ascii") as handle:
        for line in handle:
            parts = line.split()
            if len(parts) == 3 and all(_is_number(p) for p in parts):
                rows.append([float(p) for p in parts])
    out = np.array(rows)
    assert out.shape == (92, 3), out.shape
    return out


def e1_growth_1960_1978() -> np.ndarray:
    """(75, 3) first differences of logs of E1 for 1960Q1–1978Q4 (76 quarters of levels)."""
    return np.diff(np.log(e1_levels()[:76]), axis=0)


def macro_growth(columns: tuple[str, ...] = ("realgdp", "realcons", "realinv")) -> np.ndarray:
    """(202, k) first differences of logs of US quarterly series, 1959Q1–2009Q3.

    Source: statsmodels.datasets.macrodata (US Federal Reserve / BEA data, public domain).
    """
    from statsmodels.datasets import macrodata

    data = macrodata.load_pandas().data
    return np.diff(np.log(data[list(columns)].to_numpy(dtype=float)), axis=0)


def _is_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True
