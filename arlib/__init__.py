"""arlib: vector autoregressions, their responses, decompositions, causality tests and connectedness.

Pure computation over numpy arrays; no I/O. Conventions: data `y` is (T, n), rows oldest first;
coefficients (p, n, n) with ``coefs[i]`` = A_{i+1}; responses (H+1, n, n) [horizon, response,
shock]; decompositions (H, n, n) [step, variable, shock].
"""

from __future__ import annotations

from ._causality import GrangerResult, granger_test
from ._decompose import Connectedness, connectedness, variance_decomposition
from ._estimate import (
    LagSelection,
    VARFit,
    VARProcess,
    companion_matrix,
    fit_var,
    select_lags,
    var_process,
)
from ._responses import impulse_responses, ma_coefficients
from ._validate import ArlibError, InvalidInputError, UnstableProcessWarning, VARLike

__all__ = [
    "ArlibError",
    "Connectedness",
    "GrangerResult",
    "InvalidInputError",
    "LagSelection",
    "UnstableProcessWarning",
    "VARFit",
    "VARLike",
    "VARProcess",
    "companion_matrix",
    "connectedness",
    "fit_var",
    "granger_test",
    "impulse_responses",
    "ma_coefficients",
    "select_lags",
    "var_process",
    "variance_decomposition",
]
