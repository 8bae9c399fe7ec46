"""pipeline: sources, the DuckDB warehouse, Prefect flows, exports and the `shockflow` command."""
