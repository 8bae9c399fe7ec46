"""The `shockflow` command: the one place that assembles the pipeline and the dashboard.

`pipeline/` (ingest, fit, publish, export) and `dashboard/` (the read-only browser app) never import
each other; this package's `cli` wires both behind one command (``shockflow`` or
``python -m shockflow``).
"""
