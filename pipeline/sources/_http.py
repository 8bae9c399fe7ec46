"""CSV over HTTP(S): retries with exponential back-off and a timeout on every attempt."""

from __future__ import annotations

import logging
import time
from collections.abc import Callable
from datetime import date
from typing import TYPE_CHECKING

import httpx

from pipeline.errors import SourceError
from pipeline.sources._csv import parse_csv_bytes
from pipeline.sources._frame import SourceFrame

if TYPE_CHECKING:
    from pipeline.sources._config import SourceConfig

__all__ = ["fetch_with_retries", "read_http_csv"]

log = logging.getLogger("shockflow.sources")

#: Status codes worth another attempt (server trouble, rate limits); others fail at once.
RETRY_STATUS = frozenset({408, 425, 429, 500, 502, 503, 504})


def fetch_with_retries(
    url: str,
    *,
    timeout: float,
    retries: int,
    backoff: float,
    sleep: Callable[[float], None] = time.sleep,
) -> bytes:
    """GET `url`; on a timeout, a dropped or truncated body, or a 5xx/429, wait and retry.

    Attempt k (0-based) that fails waits ``backoff · 2**k`` seconds before attempt k + 1; at most
    ``retries + 1`` attempts. Each attempt has `timeout` seconds for connect, each read, and write.
    """
    last = ""
    for attempt in range(retries + 1):
        try:
            with httpx.Client(timeout=timeout, follow_redirects=True, trust_env=False) as client:
                response = client.get(url)
                status = response.status_code
                if status < 400:
                    return response.content
                last = f"HTTP {status} {response.reason_phrase}"
                if status not in RETRY_STATUS:
                    msg = f"{url}: {last}; check the address and access rights (not retried)"
                    raise SourceError(msg)
        except httpx.TimeoutException:
            last = f"no answer within the {timeout:g} s timeout"
        except httpx.TransportError as exc:
            last = f"{type(exc).__name__}: {' '.join(str(exc).split())[:200]}"
        if attempt < retries:
            wait = backoff * 2**attempt
            log.warning("%s: attempt %d of %d failed (%s); retrying in %.2f s", url, attempt + 1, retries + 1, last, wait)
            sleep(wait)
    msg = f"{url}: failed after {retries + 1} attempts, last: {last}; check the server or raise `retries`/`timeout`"
    raise SourceError(msg)


def read_http_csv(source: SourceConfig, *, today: date, sleep: Callable[[float], None] = time.sleep) -> SourceFrame:
    """Download the CSV at `url` and validate it like a local file."""
    assert source.url is not None
    data = fetch_with_retries(
        source.url, timeout=source.timeout, retries=source.retries, backoff=source.backoff, sleep=sleep
    )
    frame = parse_csv_bytes(data, origin=source.url, source=source, today=today)
    return SourceFrame(source=source.name, frame=frame, origins=(source.url,))
