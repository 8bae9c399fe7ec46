"""Reading a response grid back from its figure, whichever way it was drawn.

`charts.responses_figure` draws a grid two ways. In print (the report) each panel is a subplot:
one response trace per panel with ``meta = [response, shock]``, a band one filled trace per
panel (upper over the horizons, then lower in reverse). On screen (the dashboard) the grid is one
pair of axes: one trace holds every panel's response, its points' ``customdata`` the true values
``[response, shock, horizon, value]`` (plus ``lower, upper`` with a band), cells separated by a
null; its y values are positions in the cells, not values. `response_panels` returns the same
panels from either, so the screen and the report are compared panel by panel, value by value.
"""

from __future__ import annotations

import base64
from typing import Any

import numpy as np

#: customdata columns of a one-axis grid's points.
VALUE, LOWER, UPPER = 3, 4, 5


def trace_array(value: object) -> np.ndarray:
    """Plotly stores numpy arrays as {"dtype", "bdata" (base64)}; lists stay lists."""
    if isinstance(value, dict):
        return np.frombuffer(base64.b64decode(value["bdata"]), dtype=np.dtype(value["dtype"]))
    return np.asarray(value, dtype=float)


def cell_values(trace: dict[str, Any], column: int = VALUE) -> dict[tuple[str, str], np.ndarray]:
    """A one-axis grid trace: per (response, shock) name pair, customdata's `column` over the
    horizons (NaN where None), in the order the cells are drawn (row after row)."""
    cells: dict[tuple[str, str], dict[int, float]] = {}
    for point in trace["customdata"]:
        if point is None:  # the gap between two cells
            continue
        value = point[column]
        cells.setdefault((point[0], point[1]), {})[int(point[2])] = np.nan if value is None else float(value)
    return {pair: np.array([by_h[h] for h in sorted(by_h)]) for pair, by_h in cells.items()}


def response_panels(traces: list[dict[str, Any]], names: list[str]) -> dict[tuple[int, int], dict[str, np.ndarray]]:
    """Per panel (response i, shock j) of a response grid: "response", and "lower"/"upper" when
    a band is drawn — from the print figure's per-panel traces or the screen's merged ones."""
    out: dict[tuple[int, int], dict[str, np.ndarray]] = {}
    for t in traces:
        if t.get("customdata") is not None:  # the screen: every panel's response in one trace
            if t.get("legendgroup") != "response":
                continue
            banded = any(p is not None and len(p) > UPPER for p in t["customdata"])
            parts = {"response": VALUE, **({"lower": LOWER, "upper": UPPER} if banded else {})}
            for part, column in parts.items():
                for (r, s), values in cell_values(t, column).items():
                    out.setdefault((names.index(r), names.index(s)), {})[part] = values
        elif t.get("meta"):  # print: one trace per panel
            i, j = names.index(t["meta"][0]), names.index(t["meta"][1])
            y = trace_array(t["y"])
            if t.get("fill") == "toself":
                h1 = len(y) // 2
                out.setdefault((i, j), {}).update(upper=y[:h1], lower=y[h1:][::-1])
            else:
                out.setdefault((i, j), {})["response"] = y
    return out


def panel_pairs(figure: dict[str, Any]) -> set[tuple[str, str]]:
    """The (response, shock) name pairs a grid figure draws, on screen or in print."""
    pairs = set()
    for t in figure["data"]:
        if t.get("customdata") is not None:
            pairs |= {(p[0], p[1]) for p in t["customdata"] if p is not None}
        elif t.get("meta") and len(t["meta"]) == 2:
            pairs.add((t["meta"][0], t["meta"][1]))
    return pairs
