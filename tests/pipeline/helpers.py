"""Small builders shared by the pipeline tests (configs written to tmp folders)."""

from __future__ import annotations

import contextlib
import ssl
import textwrap
import threading
from collections.abc import Iterator
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from pathlib import Path

import polars as pl

from pipeline.config import Config, load_config


def write_config(folder: Path, body: str, *, name: str = "shockflow.toml") -> Path:
    """Write a TOML config into `folder` and return its path."""
    path = folder / name
    path.write_text(textwrap.dedent(body), encoding="utf-8")
    return path


MINIMAL = """
[warehouse]
path = "wh.duckdb"
snapshot = "serving.duckdb"

[[sources]]
name = "prices"
kind = "csv"
path = "prices.csv"

[[universes]]
name = "pair"
series = ["A", "B"]
window = 40
lags = 1
"""


def minimal_config(folder: Path, extra: str = "") -> Config:
    """A valid two-series config in `folder` (the CSV itself is not written)."""
    return load_config(write_config(folder, MINIMAL + textwrap.dedent(extra)))


def simulate_prices(T: int, *, n: int = 3, seed: int = 7, start: str = "2015-01-05") -> pl.DataFrame:
    """An invented wide price table: n series driven by a stable VAR(1) in log returns.

    Business days from `start`; columns date, S0..S{n-1}. Used only as test input.
    """
    import numpy as np
    import polars as pl

    rng = np.random.default_rng(seed)
    A = 0.25 * np.eye(n) + 0.08 * (np.ones((n, n)) - np.eye(n))  # spectral radius 0.25 + 0.08(n-1)
    chol = np.linalg.cholesky(0.5 * np.eye(n) + 0.5 * np.ones((n, n)))
    r = np.zeros((T, n))
    for t in range(1, T):
        r[t] = A @ r[t - 1] + chol @ rng.standard_normal(n)
    levels = 100.0 * np.exp(np.cumsum(r / 100.0, axis=0))
    days = pl.date_range(pl.lit(start).str.to_date(), pl.lit("2100-01-01").str.to_date(), "1d", eager=True)
    days = days.filter(days.dt.weekday() <= 5)[:T]
    return pl.DataFrame({"date": days, **{f"S{j}": np.round(levels[:, j], 6) for j in range(n)}})


def assert_frames_close(a: pl.DataFrame, b: pl.DataFrame, *, rtol: float = 1e-9, atol: float = 1e-12, what: str = "") -> None:
    """Same columns, keys and text; floats (and float lists) equal to `rtol`/`atol`.

    Used where one computation is batched differently (an incremental block vs. a full refit):
    the rolling engine centres and scales each chunk of windows, so the last bits may differ.
    `condition_number` is the engine's diagnostic of the cross-product solve "in the working
    coordinates" (arlib/_rolling.py), which depend on the chunk's centring (measured: up to 8 %
    apart between an incremental block and a full refit): only its presence is compared.
    """
    import numpy as np
    import polars as pl

    assert a.columns == b.columns, what
    assert a.height == b.height, what
    for name in a.columns:
        x, y = a[name], b[name]
        if x.dtype == pl.Float64:
            assert x.is_null().equals(y.is_null()), (what, name)
            if name == "condition_number":
                continue
            np.testing.assert_allclose(x.drop_nulls().to_numpy(), y.drop_nulls().to_numpy(), rtol=rtol, atol=atol, err_msg=f"{what}.{name}")
        elif x.dtype == pl.List(pl.Float64):
            assert x.is_null().equals(y.is_null()), (what, name)
            for u, v in zip(x.drop_nulls().to_list(), y.drop_nulls().to_list(), strict=True):
                np.testing.assert_allclose(u, v, rtol=rtol, atol=atol, err_msg=f"{what}.{name}")
        else:
            assert x.equals(y), (what, name)


class CsvHandler(BaseHTTPRequestHandler):
    """Base of the test HTTP servers: quiet, and `_send` answers with a CSV body."""

    def log_message(self, format: str, *args: object) -> None:  # quiet
        pass

    def _send(self, status: int, body: bytes, *, length: int | None = None) -> None:
        """Answer `status` with `body`; `length` may promise more bytes than sent (truncation)."""
        self.send_response(status)
        self.send_header("Content-Type", "text/csv")
        self.send_header("Content-Length", str(length if length is not None else len(body)))
        self.end_headers()
        self.wfile.write(body)


@contextlib.contextmanager
def serve_locally(handler: type[BaseHTTPRequestHandler], *, tls: ssl.SSLContext | None = None) -> Iterator[str]:
    """Serve `handler` on 127.0.0.1 (a free port) in a daemon thread; yields the base URL (https with `tls`)."""
    httpd = ThreadingHTTPServer(("127.0.0.1", 0), handler)
    httpd.daemon_threads = True
    if tls is not None:
        httpd.socket = tls.wrap_socket(httpd.socket, server_side=True)
    threading.Thread(target=httpd.serve_forever, daemon=True).start()
    try:
        yield f"{'https' if tls else 'http'}://127.0.0.1:{httpd.server_address[1]}"
    finally:
        httpd.shutdown()
        httpd.server_close()
