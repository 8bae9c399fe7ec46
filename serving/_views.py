"""Long SQL views over the array tables: one row per element, named by series instead of positions.

The array columns (docs/warehouse.md) are flattened in C order with series positions from
``universe_series.position``; these views undo that inside DuckDB so an analyst selects one response
by name::

    SELECT h, value, lower, upper FROM response_long
    WHERE universe = 'all_markets' AND window_end = DATE '2024-03-28'
      AND response = 'VLX_BROAD' AND shock = 'VLX_BANKS' ORDER BY h;

The views live in both files (the warehouse creates them in `ensure_schema`, publish in the
snapshot); they hold no data, only the query, so they cost nothing to keep.
"""

from __future__ import annotations

import hashlib
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    import duckdb

__all__ = ["VIEWS", "create_views"]

_SIZES = "SELECT universe, count(*) AS n FROM universe_series GROUP BY universe"

#: view name → (one-line description for the docs, SELECT text). Names are ours.
VIEWS: dict[str, tuple[str, str]] = {
    "response_long": (
        "one row per (universe, window_end, identification, h, response, shock): value, lower, upper, "
        "coverage — `responses` unnested; h = 0 … horizon",
        f"""
WITH sizes AS ({_SIZES}),
flat AS (
    SELECT run_id, universe, window_end, identification, coverage,
           unnest(response) AS value, unnest(lower) AS lower, unnest(upper) AS upper,
           generate_subscripts(response, 1) - 1 AS k
    FROM responses
)
SELECT f.run_id, f.universe, f.window_end, f.identification,
       CAST(f.k // (s.n * s.n) AS INTEGER) AS h, r.series AS response, c.series AS shock,
       f.value, f.lower, f.upper, f.coverage
FROM flat f
JOIN sizes s ON s.universe = f.universe
JOIN universe_series r ON r.universe = f.universe AND r.position = (f.k // s.n) % s.n
JOIN universe_series c ON c.universe = f.universe AND c.position = f.k % s.n
""",
    ),
    "decomposition_long": (
        "one row per (universe, window_end, method, step, variable, shock): share (fraction; rows "
        "sum to one over shocks) — `decompositions` unnested; step = 1 … horizon steps ahead",
        f"""
WITH sizes AS ({_SIZES}),
flat AS (
    SELECT run_id, universe, window_end, method,
           unnest(share) AS share, generate_subscripts(share, 1) - 1 AS k
    FROM decompositions
)
SELECT f.run_id, f.universe, f.window_end, f.method,
       CAST(f.k // (s.n * s.n) + 1 AS INTEGER) AS step, r.series AS variable, c.series AS shock,
       f.share
FROM flat f
JOIN sizes s ON s.universe = f.universe
JOIN universe_series r ON r.universe = f.universe AND r.position = (f.k // s.n) % s.n
JOIN universe_series c ON c.universe = f.universe AND c.position = f.k % s.n
""",
    ),
    "coef_long": (
        "one row per (universe, window_end, lag, equation, regressor): value — the VAR coefficient "
        "A_lag[equation, regressor] of `window_params.coefs`; lag = 1 … lags",
        f"""
WITH sizes AS ({_SIZES}),
flat AS (
    SELECT run_id, universe, window_end,
           unnest(coefs) AS value, generate_subscripts(coefs, 1) - 1 AS k
    FROM window_params
)
SELECT f.run_id, f.universe, f.window_end,
       CAST(f.k // (s.n * s.n) + 1 AS INTEGER) AS lag, r.series AS equation, c.series AS regressor,
       f.value
FROM flat f
JOIN sizes s ON s.universe = f.universe
JOIN universe_series r ON r.universe = f.universe AND r.position = (f.k // s.n) % s.n
JOIN universe_series c ON c.universe = f.universe AND c.position = f.k % s.n
""",
    ),
    "band_long": (
        "one row per (universe, window_end, band, variable, shock): period_lo, period_hi and share "
        "(percent of the variable's forecast-error variance from the shock's cycles in the band) — "
        "`band_connectedness.shares` unnested; the bands of a window add up to the total table",
        f"""
WITH sizes AS ({_SIZES}),
flat AS (
    SELECT run_id, universe, window_end, band, period_lo, period_hi,
           unnest(shares) AS share, generate_subscripts(shares, 1) - 1 AS k
    FROM band_connectedness
)
SELECT f.run_id, f.universe, f.window_end, f.band, f.period_lo, f.period_hi,
       r.series AS variable, c.series AS shock, f.share
FROM flat f
JOIN sizes s ON s.universe = f.universe
JOIN universe_series r ON r.universe = f.universe AND r.position = f.k // s.n
JOIN universe_series c ON c.universe = f.universe AND c.position = f.k % s.n
""",
    ),
    "quantile_long": (
        "one row per (universe, window_end, quantile, variable, shock): share (percent, the "
        "generalized table at τ) — `quantile_connectedness.shares` unnested",
        f"""
WITH sizes AS ({_SIZES}),
flat AS (
    SELECT run_id, universe, window_end, quantile,
           unnest(shares) AS share, generate_subscripts(shares, 1) - 1 AS k
    FROM quantile_connectedness
)
SELECT f.run_id, f.universe, f.window_end, f.quantile, r.series AS variable, c.series AS shock, f.share
FROM flat f
JOIN sizes s ON s.universe = f.universe
JOIN universe_series r ON r.universe = f.universe AND r.position = f.k // s.n
JOIN universe_series c ON c.universe = f.universe AND c.position = f.k % s.n
""",
    ),
    "pairwise_net": (
        "one row per (universe, window_end, source, target), source ≠ target: share (source → "
        "target), reverse (target → source) and net = share − reverse, in percent — from `pairwise`",
        """
SELECT a.run_id, a.universe, a.window_end, a.source, a.target, a.share,
       b.share AS reverse, a.share - b.share AS net
FROM pairwise a
JOIN pairwise b ON b.universe = a.universe AND b.window_end = a.window_end
               AND b.source = a.target AND b.target = a.source
WHERE a.source <> a.target
""",
    ),
}


def view_tag(name: str) -> str:
    """The comment stored on view `name`: its description and a hash of its SELECT text, so an
    opened file tells whether its views are this code's (pipeline.warehouse.ensure_schema)."""
    doc, select = VIEWS[name]
    digest = hashlib.sha256(select.encode()).hexdigest()[:16]
    return f"{doc} [definition {digest}]"


def create_views(con: duckdb.DuckDBPyConnection, *, catalog: str | None = None) -> None:
    """``CREATE OR REPLACE`` every view on `con` (a DuckDB connection), in `catalog` if given,
    each with its `view_tag` as comment.

    A view created in an attached file binds its table names inside that file, so the same text
    serves the warehouse and the snapshot.
    """
    prefix = f"{catalog}." if catalog else ""
    for name, (_, select) in VIEWS.items():
        con.execute(f"CREATE OR REPLACE VIEW {prefix}{name} AS {select}")
        con.execute(f"COMMENT ON VIEW {prefix}{name} IS '{view_tag(name).replace(chr(39), chr(39) * 2)}'")
