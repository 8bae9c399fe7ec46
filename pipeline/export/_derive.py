"""Responses and decompositions derived with arlib when a run did not store them.

The run always stores each window's parameters (`window_params`: coefs (p, n, n), intercept (n,),
sigma_u (n, n)); impulse responses and decompositions are cheap to derive from them, so a report
may show them even when the run kept only the scalar results. Bands need the window's data (the
`prepared` rows): a residual bootstrap refits the VAR on resampled data.
"""

from __future__ import annotations

import warnings
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


def _window_fit(info: UniverseInfo, params: dict[str, Any], proc: Any,
                rows: tuple[list, np.ndarray] | None) -> tuple[Any, str]:
    """Refit the window on its prepared rows; the fit only counts if it reproduces the stored
    coefficients (else the rows are not the ones the run used). Returns (fit or None, why)."""
    if rows is None:
        return None, "the window's prepared rows are not in the snapshot"
    _, y = rows
    trend = str(info.config.get("trend", "c"))
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", arlib.UnstableProcessWarning)  # shown under health
            fit = arlib.fit_var(y, int(params["lags"]), trend=trend, names=list(info.series))
    except arlib.ArlibError as exc:
        return None, f"refitting the window failed ({exc})"
    # Same rows, same least squares: agreement to rounding (1e-8 relative) is expected.
    if not np.allclose(fit.coefs, proc.coefs, rtol=1e-8, atol=1e-12):
        return None, "the prepared rows do not reproduce the stored coefficients"
    return fit, ""


def derive_responses(info: UniverseInfo, params: dict[str, Any],
                     rows: tuple[list, np.ndarray] | None, notes: list[str]) -> ResponseSet:
    """Impulse responses (H+1, n, n) of the window from its stored parameters, with bands.

    Bands follow the universe's `bands` setting (method "bootstrap" or "asymptotic", draws,
    seed, coverage) and need the window's prepared rows (`rows`: dates and y (T, n)); the refit
    on them must reproduce the stored coefficients. Otherwise the responses carry no bands and a
    note says why.
    """
    from pipeline.export._data import ResponseSet

    ident = _SHOCKS.get(info.identification.lower(), "cholesky")
    proc = process_from_params(info, params)
    resp = np.asarray(arlib.impulse_responses(proc, info.horizon, shocks=ident))
    spec = info.config.get("bands") or {}
    kind = str(spec.get("method", "none"))
    lower = upper = coverage = None
    if kind in ("bootstrap", "asymptotic"):
        fit, why = _window_fit(info, params, proc, rows)
        if fit is not None:
            try:
                b = arlib.irf_bands(fit, info.horizon, shocks=ident, kind=kind,
                                    coverage=float(spec.get("coverage", 0.9)),
                                    draws=int(spec.get("draws", 200)),
                                    rng=int(spec.get("seed", 0)))
            except arlib.ArlibError as exc:
                why = f"arlib could not compute {kind} bands ({exc})"
            else:
                lower, upper, coverage = np.asarray(b.lower), np.asarray(b.upper), b.coverage
        band_text = (f"{kind} bands from the window's prepared rows" if lower is not None
                     else f"no bands: {why}")
    else:
        band_text = "no bands (the universe's `bands` method is 'none')"
    notes.append(f"Impulse responses were not stored by the run; derived with arlib from the "
                 f"window's stored parameters ({ident} shocks; {band_text}).")
    return ResponseSet(identification=ident, horizon=info.horizon, response=resp, lower=lower,
                       upper=upper, coverage=coverage, origin="derived from stored parameters")


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
