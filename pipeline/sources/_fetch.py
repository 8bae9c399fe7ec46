"""Downloads over HTTP(S) (`http_csv` sources, http(s) paths): headers from the environment, proxies and certificates from the environment,
retries with jittered exponential back-off that honours ``Retry-After``, a timeout on every attempt.

Headers: a source lists ``headers = ["Authorization: Bearer ${MARKETS_TOKEN}"]``; each ``${NAME}``
is replaced by the environment variable NAME when the request is made, so the config file names
the variable and never holds the secret. A credential-bearing header (``Authorization``,
``Proxy-Authorization``, ``Cookie``, or a name containing ``key``, ``token`` or ``secret``) must
take its value from a variable (checked when the config is read).

Environment honoured (httpx with ``trust_env``): ``HTTP_PROXY``, ``HTTPS_PROXY``, ``ALL_PROXY``,
``NO_PROXY``; ``SSL_CERT_FILE`` / ``SSL_CERT_DIR`` (also ``REQUESTS_CA_BUNDLE`` / ``CURL_CA_BUNDLE``
when ``SSL_CERT_FILE`` is not set) for a private certificate authority.
"""

from __future__ import annotations

import email.utils
import logging
import os
import random
import re
import ssl
import time
from collections.abc import Callable, Mapping
from datetime import UTC, datetime

import httpx

from pipeline.errors import SourceError

__all__ = ["MAX_RETRY_AFTER", "check_header", "fetch_with_retries", "request_headers", "retry_after"]

log = logging.getLogger("shockflow.sources")

#: Status codes worth another attempt (server trouble, rate limits); others fail at once.
RETRY_STATUS = frozenset({408, 425, 429, 500, 502, 503, 504})

#: The longest `Retry-After` wait honoured (seconds); a server asking for more fails the source at once.
MAX_RETRY_AFTER = 300.0

_VAR = re.compile(r"\$\{([A-Za-z_][A-Za-z0-9_]*)\}")
_SECRET_HEADER = re.compile(r"^(authorization|proxy-authorization|cookie)$|key|token|secret", re.IGNORECASE)


def check_header(entry: str) -> tuple[str, str] | None:
    """One `headers` entry: ``Name: value``; a credential header takes its value from ``${VAR}``."""
    name, sep, value = entry.partition(":")
    name = name.strip()
    if not sep or not name or not re.fullmatch(r"[A-Za-z0-9!#$%&'*+.^_`|~-]+", name):
        return f"has entry {entry!r}", "write each header as 'Name: value', e.g. 'Accept: text/csv'"
    if _SECRET_HEADER.search(name) and not _VAR.search(value):
        return (
            f"gives header {name!r} a literal value",
            f"name the environment variable that holds it, e.g. '{name}: Bearer ${{MY_TOKEN}}' — never the secret itself",
        )
    return None


def request_headers(headers: tuple[str, ...], *, source: str) -> dict[str, str]:
    """Source `source`'s `headers` with every ``${VAR}`` taken from the environment; a missing variable is an error."""
    out: dict[str, str] = {}
    for entry in headers:
        name, _, value = entry.partition(":")
        missing = [v for v in _VAR.findall(value) if v not in os.environ]
        if missing:
            msg = (
                f"source {source!r}: header {name.strip()!r} needs the environment variable "
                f"{missing[0]}, which is not set; export it before the run"
            )
            raise SourceError(msg)
        out[name.strip()] = _VAR.sub(lambda m: os.environ[m.group(1)], value).strip()
    return out


def _verify() -> ssl.SSLContext | bool:
    """Certificates: httpx reads SSL_CERT_FILE/SSL_CERT_DIR itself; the requests/curl names are a fallback."""
    if os.environ.get("SSL_CERT_FILE") or os.environ.get("SSL_CERT_DIR"):
        return True
    for name in ("REQUESTS_CA_BUNDLE", "CURL_CA_BUNDLE"):
        if bundle := os.environ.get(name):
            return ssl.create_default_context(cafile=bundle)
    return True


def retry_after(value: str | None, *, now: datetime | None = None) -> float | None:
    """Seconds a ``Retry-After`` header asks for (delta-seconds or an HTTP date), None when absent or unreadable."""
    if not value:
        return None
    value = value.strip()
    if value.isdigit():
        return float(value)
    try:
        when = email.utils.parsedate_to_datetime(value)
    except (TypeError, ValueError):
        return None
    if when.tzinfo is None:
        when = when.replace(tzinfo=UTC)
    return max((when - (now or datetime.now(UTC))).total_seconds(), 0.0)


def _hint(exc: httpx.TransportError) -> str:
    text = str(exc)
    if "CERTIFICATE_VERIFY_FAILED" in text or "certificate verify failed" in text:
        return " (the server's certificate is not trusted: set SSL_CERT_FILE to your certificate authority's bundle)"
    if isinstance(exc, httpx.ProxyError):
        return " (check HTTP_PROXY/HTTPS_PROXY/NO_PROXY)"
    return ""


def fetch_with_retries(
    url: str,
    *,
    timeout: float,
    retries: int,
    backoff: float,
    headers: Mapping[str, str] | None = None,
    sleep: Callable[[float], None] = time.sleep,
    jitter: Callable[[], float] = random.random,
) -> bytes:
    """GET `url`; on a timeout, a dropped or truncated body, or a 5xx/429, wait and retry.

    Attempt k (0-based) that fails waits ``backoff · 2**k · (1 + u/2)`` seconds, u uniform on
    [0, 1) (`jitter`): never less than the plain back-off, and many clients failing together do
    not retry in step; when the answer
    carries ``Retry-After``, the wait is at least that (a request for more than
    ``MAX_RETRY_AFTER`` seconds fails at once). At most ``retries + 1`` attempts; each has
    `timeout` seconds for connect, each read, and write. Proxies and certificates follow the
    environment (module docstring).
    """
    at = url
    last = ""
    for attempt in range(retries + 1):
        asked: float | None = None
        try:
            with httpx.Client(timeout=timeout, follow_redirects=True, trust_env=True, verify=_verify()) as client:
                response = client.get(url, headers=dict(headers or {}))
                status = response.status_code
                if status < 400:
                    return response.content
                last = f"HTTP {status} {response.reason_phrase}"
                if status not in RETRY_STATUS:
                    fix = "check the credentials in the environment variables its `headers` name" if status in (401, 403) else "check the address and access rights"
                    msg = f"{at}: {last}; {fix} (not retried)"
                    raise SourceError(msg)
                asked = retry_after(response.headers.get("Retry-After"))
        except httpx.TimeoutException:
            last = f"no answer within the {timeout:g} s timeout"
        except httpx.TransportError as exc:
            last = f"{type(exc).__name__}: {' '.join(str(exc).split())[:200]}{_hint(exc)}"
        if attempt < retries:
            wait = backoff * 2**attempt * (1 + jitter() / 2)
            if asked is not None:
                if asked > MAX_RETRY_AFTER:
                    msg = (
                        f"{at}: {last} with Retry-After {asked:g} s, longer than the {MAX_RETRY_AFTER:g} s a "
                        "run waits; run again later"
                    )
                    raise SourceError(msg)
                wait = max(wait, asked)
            log.warning("%s: attempt %d of %d failed (%s); retrying in %.2f s", url, attempt + 1, retries + 1, last, wait)
            sleep(wait)
    msg = f"{at}: failed after {retries + 1} attempts, last: {last}; check the server or raise `retries`/`timeout`"
    raise SourceError(msg)
