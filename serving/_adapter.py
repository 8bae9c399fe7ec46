"""The one adapter from stored window parameters to arlib results, for the screen and the report.

Rules, in one place (docs/warehouse.md, "Derived on demand"):

- **Identification.** The stored name must be one this version knows (`IDENTIFICATIONS`, with the
  British spelling accepted); anything else raises `UnknownIdentificationError` naming the universe,
  the value and the choices. The config loader only writes known names, so an unknown one means a
  snapshot from another version: showing numbers under a scheme nobody configured (the report used
  to fall back to Cholesky, the screen to generalized) would be worse than saying so.
- **Stored first.** Responses and decompositions come from the snapshot when the stored array
  answers the request (same identification; the stored ordering; horizon within the stored one);
  otherwise arlib derives them from the window's stored coefficients and Σ_u (`window_params`).
- **Bands.** Computed on demand by refitting the window on its stored prepared rows, with the
  universe's own ``[universes.bands]`` draws, seed and coverage (`BandSettings`, defaults as
  pipeline/config.py's). The refit must reproduce the stored coefficients (`refit`), otherwise the
  rows are not the ones the run used and no band is drawn (`RefitMismatchError`).

Array conventions: responses (H+1, n, n) [h, response, shock]; decompositions (H, n, n)
[step, variable, shock], rows summing to one.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import warnings
from collections.abc import Sequence
from typing import TYPE_CHECKING, Any

import numpy as np

import arlib

from ._errors import RefitMismatchError, UnknownIdentificationError, WindowError

if TYPE_CHECKING:
    from ._reader import Fit, Snapshot, Universe

__all__ = [
    "DERIVED",
    "IDENTIFICATIONS",
    "STORED",
    "BandSet",
    "BandSettings",
    "DecompositionSet",
    "ResponseSet",
    "band_settings",
    "bands",
    "decomposition",
    "identification_of",
    "normalize_identification",
    "process",
    "refit",
    "responses",
    "stored_decompositions",
    "stored_responses",
]

#: Identification schemes (arlib's ``shocks=`` / ``method=`` names) → how they read on screen.
IDENTIFICATIONS = {"generalized": "generalized (order-free)", "cholesky": "Cholesky (recursive ordering)"}
_SPELLINGS = {"generalised": "generalized"}

#: Where numbers came from, said beside them on screen and in the report.
STORED = "stored by the run"
DERIVED = "derived by arlib from the stored parameters"

#: Refit agreement: same rows, same least squares; the run's batched solver agrees with a single
#: fit to rounding (arlib's rolling tests hold it to 1e-8), so 1e-8 relative is the bar.
REFIT_RTOL = 1e-8
REFIT_ATOL = 1e-10


@dataclasses.dataclass(frozen=True)
class ResponseSet:
    """Impulse responses of one window under one identification, with optional bands."""

    identification: str
    horizon: int
    response: np.ndarray  # (H+1, n, n) [h, response, shock]
    lower: np.ndarray | None  # same shape, or None when no bands
    upper: np.ndarray | None
    coverage: float | None
    origin: str  # STORED or DERIVED
    order: tuple[str, ...] | None = None  # the Cholesky order used (None: stored column order)
    cumulative: bool = False


@dataclasses.dataclass(frozen=True)
class DecompositionSet:
    """A forecast-error variance decomposition of one window under one method."""

    method: str
    horizon: int
    share: np.ndarray  # (H, n, n) [step, variable, shock], rows sum to one
    origin: str
    order: tuple[str, ...] | None = None


@dataclasses.dataclass(frozen=True)
class BandSettings:
    """A universe's ``[universes.bands]``: method, draws, seed, coverage (pipeline/config.py defaults)."""

    method: str = "none"
    draws: int = 200
    seed: int = 0
    coverage: float = 0.9

    @classmethod
    def from_config(cls, config: dict[str, Any]) -> BandSettings:
        raw = config.get("bands")
        if not isinstance(raw, dict):
            return cls()  # no [universes.bands] table: no bands
        d = cls()
        return cls(
            method=str(raw.get("method", "bootstrap")),  # a table without `method`: bootstrap
            draws=int(raw.get("draws", d.draws)),
            seed=int(raw.get("seed", d.seed)),
            coverage=float(raw.get("coverage", d.coverage)),
        )


@dataclasses.dataclass(frozen=True)
class BandSet:
    """Pointwise response bands computed on demand: arrays (H+1, n, n), and how they were drawn."""

    lower: np.ndarray
    upper: np.ndarray
    coverage: float
    kind: str  # "bootstrap" or "asymptotic"
    draws: int
    seed: int
    rows: int  # prepared rows the window was refitted on

    @property
    def note(self) -> str:
        rows = f"refitted on the window's {self.rows} prepared rows"
        if self.kind == "bootstrap":
            return f"{100 * self.coverage:.0f}% residual-bootstrap band ({self.draws} draws, seed {self.seed}; {rows})"
        return f"{100 * self.coverage:.0f}% asymptotic (delta-method) band ({rows})"


def normalize_identification(value: Any, *, where: str) -> str:
    """`value` as one of `IDENTIFICATIONS` (British spelling accepted), else a clear error."""
    text = str(value).strip().lower()
    text = _SPELLINGS.get(text, text)
    if text not in IDENTIFICATIONS:
        msg = (
            f"{where}: identification {str(value)[:40]!r} is not one this shockflow knows; use one of "
            f"{', '.join(IDENTIFICATIONS)} (a snapshot written by another version: publish it again "
            "with this one's `shockflow run`)"
        )
        raise UnknownIdentificationError(msg)
    return text


def identification_of(universe: Universe) -> str:
    """The universe's stored identification, checked (see the module's rules)."""
    return normalize_identification(universe.identification, where=f"universe {universe.name!r}")


def band_settings(universe: Universe) -> BandSettings:
    """The universe's configured bands (method, draws, seed, coverage) from its stored config."""
    return BandSettings.from_config(universe.config)


def process(fit: Fit, universe: Universe) -> Any:
    """The stored window's VAR as an arlib process (an unstable window still gives its responses)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", arlib.UnstableProcessWarning)  # shown under model health
        return arlib.var_process(fit.coefs, fit.sigma_u, fit.intercept, names=list(universe.series))


def refit(snap: Snapshot, universe: Universe, end: dt.date) -> Any:
    """The window refitted by arlib on its stored prepared rows, checked against the stored fit.

    Raises `RefitMismatchError` when the refit's coefficients differ from the stored ones beyond
    rounding (`REFIT_RTOL`): the rows are then not the ones the run used (e.g. the prepared data
    were revised since), and nothing derived from them may be shown as this window's.
    """
    stored = snap.fit(universe, end)
    y = snap.prepared(universe, stored.window_start, stored.window_end)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", arlib.UnstableProcessWarning)
        fit = arlib.fit_var(y, stored.lags, trend=universe.trend, names=list(universe.series))
    if fit.coefs.shape != stored.coefs.shape or not np.allclose(
        fit.coefs, stored.coefs, rtol=REFIT_RTOL, atol=REFIT_ATOL
    ):
        worst = (
            float(np.max(np.abs(fit.coefs - stored.coefs)))
            if fit.coefs.shape == stored.coefs.shape
            else float("nan")
        )
        msg = (
            f"universe {universe.name!r}, window ending {end}: refitting its {y.shape[0]} stored prepared "
            f"rows does not reproduce the stored coefficients (largest difference {worst:.3g}); the rows "
            "were changed since the fit — run `shockflow run` to refit and publish"
        )
        raise RefitMismatchError(msg)
    return fit


def _order(order: Sequence[str] | None, universe: Universe) -> tuple[str, ...] | None:
    """None for the stored column order, else the full order as a tuple of series names."""
    if order is None:
        return None
    full = tuple(order)
    if full == universe.series:
        return None
    unknown = [s for s in full if s not in universe.series]
    if unknown or len(set(full)) != len(full):
        msg = f"ordering {list(full)} must name distinct series of {universe.name!r}: {list(universe.series)}"
        raise WindowError(msg)
    return full + tuple(s for s in universe.series if s not in full)


def responses(
    snap: Snapshot,
    universe: Universe,
    end: dt.date,
    *,
    identification: str | None = None,
    order: Sequence[str] | None = None,
    horizon: int | None = None,
    cumulative: bool = False,
) -> ResponseSet:
    """Responses (H+1, n, n) at window `end`: stored when they answer the request, else from arlib.

    identification: None = the universe's own (`identification_of`). order: a Cholesky ordering
    (series names, the rest following in stored order; ignored for generalized). horizon: None =
    the universe's. Stored bands come only with the stored identification and ordering,
    non-cumulative; derived responses carry none (ask `bands`).
    """
    ident = (
        identification_of(universe)
        if identification is None
        else normalize_identification(identification, where=f"universe {universe.name!r}")
    )
    H = universe.horizon if horizon is None else int(horizon)
    chosen = _order(order, universe) if ident == "cholesky" else None
    stored = snap.responses(universe, end, ident) if chosen is None else None
    if stored is not None and stored[0].shape[0] - 1 >= H:
        resp, lower, upper, coverage = stored
        resp = resp[: H + 1]
        lower = None if lower is None else lower[: H + 1]
        upper = None if upper is None else upper[: H + 1]
        origin = STORED
    else:
        resp = arlib.impulse_responses(
            process(snap.fit(universe, end), universe), H, shocks=ident,
            order=list(chosen) if chosen is not None else None,
        )  # fmt: skip
        lower = upper = None
        coverage = None
        origin = DERIVED
    if cumulative:
        resp = np.cumsum(resp, axis=0)
        lower = upper = None
        coverage = None
    return ResponseSet(ident, H, np.asarray(resp), lower, upper, coverage if lower is not None else None,
                       origin, chosen, cumulative)  # fmt: skip


def decomposition(
    snap: Snapshot,
    universe: Universe,
    end: dt.date,
    *,
    method: str | None = None,
    order: Sequence[str] | None = None,
    horizon: int | None = None,
) -> DecompositionSet:
    """Decomposition (H, n, n) at window `end`: stored when it answers the request, else from arlib."""
    m = (
        identification_of(universe)
        if method is None
        else normalize_identification(method, where=f"universe {universe.name!r}")
    )
    H = universe.horizon if horizon is None else int(horizon)
    chosen = _order(order, universe) if m == "cholesky" else None
    stored = snap.decomposition(universe, end, m) if chosen is None else None
    if stored is not None and stored.shape[0] >= H:
        return DecompositionSet(m, H, stored[:H], STORED, None)
    share = arlib.variance_decomposition(
        process(snap.fit(universe, end), universe), H, method=m,
        order=list(chosen) if chosen is not None else None,
    )  # fmt: skip
    return DecompositionSet(m, H, np.asarray(share), DERIVED, chosen)


def bands(
    snap: Snapshot,
    universe: Universe,
    end: dt.date,
    *,
    identification: str | None = None,
    order: Sequence[str] | None = None,
    horizon: int | None = None,
    cumulative: bool = False,
    kind: str | None = None,
) -> BandSet:
    """Response bands computed now, with the universe's configured draws, seed and coverage.

    kind: "bootstrap" or "asymptotic"; None = the universe's bands method, or "bootstrap" when that
    is "none". The window is refitted on its stored rows first (`refit`, which checks the stored
    coefficients are reproduced).
    """
    settings = band_settings(universe)
    how = kind or (settings.method if settings.method in ("bootstrap", "asymptotic") else "bootstrap")
    ident = (
        identification_of(universe)
        if identification is None
        else normalize_identification(identification, where=f"universe {universe.name!r}")
    )
    H = universe.horizon if horizon is None else int(horizon)
    chosen = _order(order, universe) if ident == "cholesky" else None
    fit = refit(snap, universe, end)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", arlib.UnstableProcessWarning)
        b = arlib.irf_bands(
            fit, H, shocks=ident, cumulative=cumulative,
            order=list(chosen) if chosen is not None else None, kind=how,
            coverage=settings.coverage, draws=settings.draws, rng=settings.seed,
        )  # fmt: skip
    return BandSet(np.asarray(b.lower), np.asarray(b.upper), float(b.coverage), how, settings.draws,
                   settings.seed, int(fit.nobs + fit.lags))  # fmt: skip


def stored_responses(snap: Snapshot, universe: Universe, end: dt.date) -> list[ResponseSet]:
    """Every identification's responses the run stored at window `end` (possibly none)."""
    out = []
    for ident in snap.variants("responses", universe.name, end):
        row = snap.responses(universe, end, ident)
        if row is not None:
            resp, lower, upper, coverage = row
            out.append(ResponseSet(ident, resp.shape[0] - 1, resp, lower, upper, coverage, STORED))
    return out


def stored_decompositions(snap: Snapshot, universe: Universe, end: dt.date) -> list[DecompositionSet]:
    """Every method's decomposition the run stored at window `end` (possibly none)."""
    out = []
    for method in snap.variants("decompositions", universe.name, end):
        share = snap.decomposition(universe, end, method)
        if share is not None:
            out.append(DecompositionSet(method, share.shape[0], share, STORED))
    return out
