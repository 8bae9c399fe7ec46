"""Responses and decompositions derived with arlib when a run did not store them, for the report.

The derivation itself is `serving`'s adapter (the dashboard uses the same one): arlib on the
window's stored parameters (`window_params`), bands by refitting the window's stored prepared rows
with the universe's configured draws, seed and coverage, and only when the refit reproduces the
stored coefficients. This module adds the report's notes saying what was derived and why a band
is missing.
"""

from __future__ import annotations

import datetime as dt

import arlib
from serving import (
    DecompositionSet,
    ResponseSet,
    ServingError,
    Snapshot,
    Universe,
    UnknownIdentificationError,
    band_settings,
    bands,
    decomposition,
    identification_of,
    responses,
)

__all__ = ["derive_decompositions", "derive_responses"]


def derive_responses(snap: Snapshot, info: Universe, end: dt.date, notes: list[str]) -> list[ResponseSet]:
    """Impulse responses (H+1, n, n) of window `end` under the universe's identification, with bands.

    Bands follow the universe's `bands` setting ("bootstrap" or "asymptotic"; "none" gives none).
    An unknown stored identification derives nothing and says so in `notes`.
    """
    try:
        ident = identification_of(info)
    except UnknownIdentificationError as exc:
        notes.append(f"Impulse responses were not stored by the run and cannot be derived: {exc}.")
        return []
    rs = responses(snap, info, end, identification=ident)
    settings = band_settings(info)
    if settings.method in ("bootstrap", "asymptotic"):
        why = ""
        try:
            if "prepared" not in snap.tables():
                raise ServingError("the window's prepared rows are not in the snapshot")
            b = bands(snap, info, end, identification=ident, kind=settings.method)
        except ServingError as exc:
            why = str(exc)
        except arlib.ArlibError as exc:
            why = f"arlib could not compute {settings.method} bands ({exc})"
        else:
            rs = ResponseSet(rs.identification, rs.horizon, rs.response, b.lower, b.upper, b.coverage,
                             rs.origin, rs.order)  # fmt: skip
        band_text = (f"{settings.method} bands from the window's prepared rows" if not why
                     else f"no bands: {why}")
    else:
        band_text = "no bands (the universe's `bands` method is 'none')"
    notes.append(f"Impulse responses were not stored by the run; derived with arlib from the "
                 f"window's stored parameters ({ident} shocks; {band_text}).")
    return [rs]


def derive_decompositions(snap: Snapshot, info: Universe, end: dt.date,
                          notes: list[str]) -> list[DecompositionSet]:
    """Generalized (and, when the universe identifies by Cholesky, Cholesky) decompositions."""
    methods = ["generalized"]
    try:
        if identification_of(info) == "cholesky":
            methods.insert(0, "cholesky")
    except UnknownIdentificationError as exc:
        notes.append(f"Only the generalized (order-free) decomposition is shown: {exc}.")
    out = [decomposition(snap, info, end, method=m) for m in methods]
    notes.append("Variance decompositions were not stored by the run; derived with arlib from the "
                 "window's stored parameters.")
    return out
