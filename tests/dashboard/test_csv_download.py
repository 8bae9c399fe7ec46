"""The CSV download callback's work grows linearly with the request it is sent.

The rows come from the browser (a store's contents), so a hostile request can hold any number of
keys. Column names used to be collected with a list's ``in`` test, one comparison per column seen
so far per key: a 100k-key request held a server thread for 109 s. The key comparisons are
counted here (key objects that count their own ``==``), not timed.
"""

from __future__ import annotations

import csv
import io
from typing import Any

from dashboard.callbacks import MAX_CSV_CELLS, csv_file


class CountingKey(str):
    """A column name that counts how often it is compared for equality."""

    compared = 0

    def __eq__(self, other: object) -> bool:
        CountingKey.compared += 1
        return str.__eq__(self, other)

    __hash__ = str.__hash__


def test_column_names_are_collected_in_linear_time() -> None:
    n = 3000  # a list's `in` made n * (n - 1) / 2 = 4.5 million comparisons of these keys
    row: dict[Any, Any] = {CountingKey(f"k{i}"): i for i in range(n)}
    CountingKey.compared = 0
    out = csv_file([row], "chart", {})
    assert out is not None
    assert CountingKey.compared <= 2 * n, CountingKey.compared
    header, values = list(csv.reader(io.StringIO(out["content"])))
    assert header == [f"k{i}" for i in range(n)] and values == [str(i) for i in range(n)]


def test_sparse_rows_keep_first_seen_column_order() -> None:
    out = csv_file([{"a": 1, "b": 2}, {"c": 3, "a": 4}], "chart", {"universe": "u"})
    assert out is not None
    assert list(csv.reader(io.StringIO(out["content"]))) == [["a", "b", "c"], ["1", "2", ""], ["4", "", "3"]]


def test_rows_that_would_be_written_out_too_dense_are_refused() -> None:
    # 2100 rows of 2 keys each, every key new: 4200 keys in, 8.8 million cells out
    count = MAX_CSV_CELLS // 2000 + 100
    rows = [{f"r{r}c{c}": 1 for c in range(2)} for r in range(count)]
    assert len(rows) * 2 * len(rows) > MAX_CSV_CELLS
    assert csv_file(rows, "chart", {}) is None
