"""Report exports: a self-contained HTML report, CSV/Parquet extracts and a PDF per universe.

Everything is read from the serving snapshot (read-only, parameterised queries) and written under
``<out_dir>/<date>/<universe>/``, where <date> is the universe's latest window end (or `as_of`)
and <universe> the name reduced to letters, digits, `.`, `_`, `-` — with a short hash of the name
appended when that changed it, so two universes never share a folder — (checked to stay inside
`out_dir`):

- ``<universe>-<date>.html`` — one file, plotly.js inlined, opens with no network: the caution;
  at a glance; total connectedness over time and net transmitters; the latest spillover table
  (with from/to others, net, total); the impulse-response grid with bands (stored by the run, or
  derived with arlib from the stored parameters and prepared rows); variance decompositions;
  Granger p-values at the universe's level (and how often each pair was significant); model
  health (spectral radius, lags, the latest fit's criteria, skipped windows with reasons); the
  lineage (run id, configuration hash, data fingerprint, code version, times, source batches).
- ``<table>.csv`` / ``<table>.parquet`` for connectedness, directional, pairwise, granger,
  window_fits, runs (full history up to the date) and responses, decompositions (long rows of
  the report's window).
- ``<universe>-<date>.pdf`` — the HTML printed by headless Chromium (skipped, with a warning,
  when no Chromium is installed).
"""

from __future__ import annotations

from pipeline.export._export import FORMATS, export_all, export_universe
from pipeline.export._extracts import EXTRACT_TABLES
from pipeline.export._paths import remove_abandoned, safe_dir_name
from pipeline.export._pdf import find_chromium, pdf_page_count
from pipeline.export._report import CAUTION

__all__ = [
    "CAUTION",
    "EXTRACT_TABLES",
    "FORMATS",
    "export_all",
    "export_universe",
    "find_chromium",
    "pdf_page_count",
    "remove_abandoned",
    "safe_dir_name",
]
