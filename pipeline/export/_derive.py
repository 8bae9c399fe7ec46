"""Responses and decompositions derived with arlib when a run did not store them.

The run always stores each window's parameters (`window_params`: coefs (p, n, n), intercept (n,),
sigma_u (n, n)); impulse responses and decompositions are cheap to derive from them, so a report
may show them even when the run kept only the scalar results. Bands need the window's data (the
`prepared` rows): a residual bootstrap refits the VAR on resampled data.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

import numpy as np

import arlib

if TYPE_CHECKING:
    from pipeline.export._data import DecompositionSet, ResponseSet
    from pipeline.export._snapshot import UniverseInfo

__all__ = ["derive_decompositions", "derive_responses", "process_from_params"]

#: Identification names the report accepts, mapped to arlib's `shocks=` / `method=` options.
_SHOCKS = {"cholesky": "cholesky", "generalized": "generalized", "generalised": "generalized",
           "unit": "unit"}


def process_from_params(info: UniverseInfo, params: dict[str, Any]) -> Any:
    """`arlib.var_process` from one `window_params` row (arrays flattened in C order)."""
    n = info.n
    p = int(params["lags"])
    coefs = np.asarray(params["coefs"], dtype=np.float64).reshape(p, n, n)
    sigma = np.asarray(params["sigma_u"], dtype=np.float64).reshape(n, n)
    intercept = params.get("intercept")
    c = None if intercept is None else np.asarray(intercept, dtype=np.float64).reshape(n)
    return arlib.var_process(coefs, sigma, c, names=list(info.series))


def derive_responses(info: UniverseInfo, params: dict[str, Any],
                     rows: tuple[list, np.ndarray] | None, notes: list[str]) -> ResponseSet:
    """Impulse responses (H+1, n, n) of the window from its stored parameters.

    `rows` (the window's prepared data) is accepted for bootstrap bands; without it, or while arlib
    offers no band function, the responses carry no bands and a note says so.
    """
    from pipeline.export._data import ResponseSet

    ident = _SHOCKS.get(info.identification.lower(), "cholesky")
    proc = process_from_params(info, params)
    resp = np.asarray(arlib.impulse_responses(proc, info.horizon, shocks=ident))
    notes.append(f"Impulse responses were not stored by the run; derived with arlib from the "
                 f"window's stored parameters ({ident} shocks, no bands).")
    return ResponseSet(identification=ident, horizon=info.horizon, response=resp, lower=None,
                       upper=None, coverage=None, origin="derived from stored parameters")


def derive_decompositions(info: UniverseInfo, params: dict[str, Any],
                          notes: list[str]) -> list[DecompositionSet]:
    """Generalized (and, when the universe identifies by Cholesky, Cholesky) decompositions."""
    from pipeline.export._data import DecompositionSet

    proc = process_from_params(info, params)
    methods = ["generalized"]
    if _SHOCKS.get(info.identification.lower()) == "cholesky":
        methods.insert(0, "cholesky")
    out = [
        DecompositionSet(method=m, horizon=info.horizon,
                         share=np.asarray(arlib.variance_decomposition(proc, info.horizon, method=m)),
                         origin="derived from stored parameters")
        for m in methods
    ]
    notes.append("Variance decompositions were not stored by the run; derived with arlib from the "
                 "window's stored parameters.")
    return out
