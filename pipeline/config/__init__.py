"""The one TOML configuration file: every key declared once, loaded, validated and frozen.

``load_config(path)`` reads the file with :mod:`tomllib`, checks every section and key, and returns
a frozen :class:`Config` (readable repr, compares by value). Every problem in the file is reported
at once in one :class:`~pipeline.errors.ConfigError` (``.problems``: one line each, naming the
file, the key and the fix; unknown keys get a did-you-mean). Paths are resolved relative to the
config file's folder, so a config works from any working directory.

Each key is declared once, as a field of a frozen dataclass made with
:func:`pipeline._declare.setting` — its default, its check, its one-line documentation and whether
it changes fitted results (default: yes). From the declarations come the loader, each universe's
fit hash (:meth:`UniverseConfig.fit_settings`: a new key enters it unless declared ``fit=False``)
and the README's configuration tables (``python -m pipeline.config.readme`` writes them; a test
fails when they differ). Why dataclasses rather than pydantic: see :mod:`pipeline._declare`.

Where the declarations are:

- ``[warehouse]``, ``[[universes]]``, ``[schedule]``, ``[export]``, ``[dashboard]``,
  ``[execution]``: ``_sections.py``; rules between keys (window against lags, Cholesky order,
  credentials off loopback, the dask address): ``_load.py``.
- ``[[sources]]``: :mod:`pipeline.sources._config`, beside the readers; the kinds come from the
  reader registry ``pipeline.sources.KINDS``, the transforms and frequencies from
  ``pipeline.prepare`` (``TRANSFORMS``, ``CALENDARS``), the minimum window from
  :func:`arlib.minimum_window` — each list of names is kept in one place.
"""

from __future__ import annotations

from pipeline.config._load import (
    SECTIONS,
    Section,
    check_series_coverage,
    load_config,
    load_config_text,
)
from pipeline.config._sections import (
    DEFAULT_CREDENTIAL_ENV,
    FIT_FORMAT_VERSION,
    FREQUENCIES,
    Bands,
    Config,
    DashboardConfig,
    ExecutionConfig,
    ExportConfig,
    LagSelection,
    QuantileSettings,
    ScheduleConfig,
    SeriesSpec,
    ShrinkageSettings,
    TVPSettings,
    UniverseConfig,
    WarehouseConfig,
    is_loopback,
)
from pipeline.sources import SourceConfig

__all__ = [
    "DEFAULT_CREDENTIAL_ENV",
    "FIT_FORMAT_VERSION",
    "FREQUENCIES",
    "SECTIONS",
    "Bands",
    "Config",
    "DashboardConfig",
    "ExecutionConfig",
    "ExportConfig",
    "LagSelection",
    "QuantileSettings",
    "ScheduleConfig",
    "Section",
    "SeriesSpec",
    "ShrinkageSettings",
    "SourceConfig",
    "TVPSettings",
    "UniverseConfig",
    "WarehouseConfig",
    "check_series_coverage",
    "is_loopback",
    "load_config",
    "load_config_text",
]
