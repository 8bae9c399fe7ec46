"""The read side: the result schema as data, the one snapshot reader, and the adapter from stored
window parameters to arlib results. Used by the pipeline (DDL, publish), the dashboard and the
report exports. Imports duckdb, numpy and arlib only (no Prefect, no Dash, no plotly, no polars).

- `serving._schema`: every table and column declared once (`SCHEMA`); the warehouse DDL, the
  snapshot's table list and docs/warehouse.md's schema table are generated from it.
- `serving._views`: long SQL views over the array tables (`response_long`, …).
- `serving._reader`: `Snapshot` / `SnapshotReader`, the one reader of the serving snapshot
  (`serving._results`: a declared result table read back as arrays, `Snapshot.results`).
- `serving._adapter`: stored parameters → arlib responses, decompositions and bands, one rule each.
"""

from __future__ import annotations

from ._adapter import (
    DERIVED,
    IDENTIFICATIONS,
    STORED,
    BandSet,
    BandSettings,
    DecompositionSet,
    ResponseSet,
    band_settings,
    bands,
    decomposition,
    identification_of,
    normalize_identification,
    process,
    refit,
    responses,
    stored_decompositions,
    stored_responses,
)
from ._doc import update_doc, write_doc
from ._errors import (
    RefitMismatchError,
    ServingError,
    SnapshotMissingError,
    StoredArrayError,
    UnknownIdentificationError,
    WindowError,
)
from ._reader import (
    BandHistory,
    DateWindow,
    Fit,
    JointHistory,
    QuantileHistory,
    Snapshot,
    SnapshotReader,
    StoredResult,
    Universe,
    parse_date,
)
from ._schema import (
    RESULT_TABLES,
    SCHEMA,
    SCHEMA_VERSION,
    SNAPSHOT_TABLES,
    UNIVERSE_TABLES,
    Column,
    Table,
    columns,
    ddl,
    order_by,
    schema_markdown,
    table,
)
from ._views import VIEWS, create_views

__all__ = [
    "DERIVED",
    "IDENTIFICATIONS",
    "RESULT_TABLES",
    "SCHEMA",
    "SCHEMA_VERSION",
    "SNAPSHOT_TABLES",
    "STORED",
    "UNIVERSE_TABLES",
    "VIEWS",
    "BandHistory",
    "BandSet",
    "BandSettings",
    "Column",
    "DateWindow",
    "DecompositionSet",
    "Fit",
    "JointHistory",
    "QuantileHistory",
    "RefitMismatchError",
    "ResponseSet",
    "ServingError",
    "Snapshot",
    "SnapshotMissingError",
    "SnapshotReader",
    "StoredArrayError",
    "StoredResult",
    "Table",
    "Universe",
    "UnknownIdentificationError",
    "WindowError",
    "band_settings",
    "bands",
    "columns",
    "create_views",
    "ddl",
    "decomposition",
    "identification_of",
    "normalize_identification",
    "order_by",
    "parse_date",
    "process",
    "refit",
    "responses",
    "schema_markdown",
    "stored_decompositions",
    "stored_responses",
    "table",
    "update_doc",
    "write_doc",
]
