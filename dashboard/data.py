"""The dashboard's access to the serving snapshot: the one reader and adapter of `serving`.

Kept as a module so the dashboard's imports (`from .data import Snapshot, …`) stay as they are;
everything here is `serving`'s (schema, reader, adapter). The dashboard holds no SQL of its own.

- reader: `Snapshot` (per-file caches; `universe`, `window`, `fitted_end`, `index_history`,
  `index_in`, `health`, `directional`, `pairwise_at`, `pairwise_mean`, `granger_at`,
  `granger_share`, `fit`, `prepared`, `responses`, `decomposition`, `spillover_sums`,
  `spillover_sums_mean`, `cached`), `SnapshotReader`, `DateWindow`, `Universe`, `Fit`, `parse_date`;
- adapter (stored parameters → arlib; one identification rule, the universe's band draws, the refit
  check): `responses`, `decomposition`, `bands`, `refit`, `process`, `identification_of`,
  `band_settings`, with results `ResponseSet`, `DecompositionSet`, `BandSet`.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Sequence

import numpy as np

from serving import (
    DERIVED,
    IDENTIFICATIONS,
    STORED,
    BandSet,
    BandSettings,
    DateWindow,
    DecompositionSet,
    Fit,
    ResponseSet,
    Snapshot,
    SnapshotReader,
    Universe,
    band_settings,
    bands,
    decomposition,
    identification_of,
    parse_date,
    process,
    refit,
    responses,
)

__all__ = [
    "DERIVED",
    "IDENTIFICATIONS",
    "STORED",
    "BandSet",
    "BandSettings",
    "DateWindow",
    "DecompositionSet",
    "Fit",
    "ResponseSet",
    "Snapshot",
    "SnapshotReader",
    "Universe",
    "band_settings",
    "bands",
    "decomposition",
    "identification_of",
    "parse_date",
    "process",
    "refit",
    "response_band",
    "response_paths",
    "responses",
    "shares_at",
]


# -- drop-in replacements for the view helpers of callbacks.py (same arguments and results) ---------
def response_paths(
    snap: Snapshot,
    u: Universe,
    end: dt.date,
    *,
    identification: str,
    order: Sequence[str],
    horizon: int,
    cumulative: bool,
) -> tuple[np.ndarray, np.ndarray | None, np.ndarray | None, str]:
    """(response (H+1, n, n), stored lower, stored upper, where from) — `serving.responses`.

    Replaces callbacks' ``_responses``: stored when the stored array answers the request (same
    identification and ordering, horizon within the stored one), else derived by arlib; stored bands
    only non-cumulative.
    """
    rs = responses(snap, u, end, identification=identification, order=order, horizon=horizon, cumulative=cumulative)
    return rs.response, rs.lower, rs.upper, rs.origin


def response_band(
    snap: Snapshot,
    u: Universe,
    end: dt.date,
    *,
    identification: str,
    order: Sequence[str],
    horizon: int,
    cumulative: bool,
) -> tuple[np.ndarray, np.ndarray, str]:
    """(lower, upper, note) computed now — `serving.bands` with the universe's draws, seed, coverage.

    Replaces callbacks' ``_bootstrap_band`` (which drew a fixed 199 and never checked the refit):
    a bootstrap band refitted on the window's stored rows, refused (`RefitMismatchError`) when the
    refit does not reproduce the stored coefficients.
    """
    b = bands(snap, u, end, identification=identification, order=order, horizon=horizon,
              cumulative=cumulative, kind="bootstrap")  # fmt: skip
    return b.lower, b.upper, b.note


def shares_at(
    snap: Snapshot, u: Universe, end: dt.date, method: str, order: Sequence[str], horizon: int
) -> tuple[np.ndarray, str]:
    """(n, n) shares [variable, shock] in percent at `horizon` steps, and where from.

    Replaces callbacks' ``_shares`` — `serving.decomposition`.
    """
    d = decomposition(snap, u, end, method=method, order=order, horizon=horizon)
    return 100.0 * d.share[horizon - 1], d.origin
