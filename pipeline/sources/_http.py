"""CSV over HTTP(S): the download follows :mod:`pipeline.sources._fetch` (headers from the
environment, proxies and certificates from the environment, ``Retry-After``, jittered back-off)."""

from __future__ import annotations

import time
from collections.abc import Callable
from datetime import date
from typing import TYPE_CHECKING

from pipeline.sources._csv import parse_csv_bytes
from pipeline.sources._fetch import fetch_with_retries, request_headers
from pipeline.sources._frame import SourceFrame

if TYPE_CHECKING:
    from pipeline.sources._config import SourceConfig

__all__ = ["fetch_with_retries", "read_http_csv"]


def read_http_csv(source: SourceConfig, *, today: date, sleep: Callable[[float], None] = time.sleep) -> SourceFrame:
    """Download the CSV at `url` and validate it like a local file."""
    assert source.url is not None
    data = fetch_with_retries(
        source.url, timeout=source.timeout, retries=source.retries, backoff=source.backoff,
        headers=request_headers(source.headers, source=source.name), sleep=sleep,
    )  # fmt: skip
    frame = parse_csv_bytes(data, origin=source.url, source=source, today=today)
    return SourceFrame(source=source.name, frame=frame, origins=(source.url,))
