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
    "responses",
]
