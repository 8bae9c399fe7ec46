"""Report exports: a self-contained HTML report, CSV/Parquet extracts and a PDF per universe.

Everything is read from the serving snapshot (read-only, parameterised queries) and written under
``<out_dir>/<date>/<universe>/``, where <date> is the universe's latest window end (or `as_of`).
"""

from __future__ import annotations

from pipeline.export._export import FORMATS, export_all, export_universe
from pipeline.export._extracts import EXTRACT_TABLES
from pipeline.export._paths import safe_dir_name
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
    "safe_dir_name",
]
