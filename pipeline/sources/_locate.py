"""Where a file source's bytes live: a local glob, an object store (``s3://``, ``gs://``, …) or HTTPS.

Local paths are globbed with :mod:`glob` as before. An address with a scheme is never rewritten
into a local path: ``http://`` and ``https://`` addresses are downloaded with the HTTP source's
retries (:func:`pipeline.sources._http.fetch_with_retries`: headers from the environment, proxies
and certificates from the environment, ``Retry-After``, back-off with jitter); every other scheme
goes through fsspec (``s3://`` needs the s3fs package) and its bytes are parsed by polars/pyarrow.

Why fsspec and not DuckDB's httpfs: DuckDB extensions are downloaded at first use from
extensions.duckdb.org, which locked-down and offline machines cannot reach, while fsspec and s3fs
are ordinary Python packages installed with everything else; and s3fs follows the provider's own
credential chain (botocore: ``AWS_ACCESS_KEY_ID``/``AWS_SECRET_ACCESS_KEY``, ``AWS_PROFILE`` and
``~/.aws/config``, SSO, instance roles; ``AWS_ENDPOINT_URL`` for an S3-compatible server), so the
config file never holds a secret.

Hive partitions: in a dataset like ``prices/series=A/year=2024/part-0.parquet``, a ``key=value``
folder whose key is one of the source's column names (`date_column`, `series_column`) supplies
that column for every row of the files below it; other keys (``year=2024``) only organise the
files and are not read as series.
"""

from __future__ import annotations

import contextlib
import glob
import io
import re
from collections.abc import Iterator
from pathlib import Path
from typing import TYPE_CHECKING, Any, BinaryIO
from urllib.parse import unquote

from pipeline.errors import SourceError
from pipeline.sources._fetch import fetch_with_retries, request_headers

if TYPE_CHECKING:
    from pipeline.sources._config import SourceConfig

__all__ = ["files_of", "has_scheme", "hive_values", "open_file"]

_SCHEME = re.compile(r"^[a-zA-Z][a-zA-Z0-9+.-]*://")
_GLOB = re.compile(r"[*?\[]")


def has_scheme(path: str) -> bool:
    """True for an address such as ``s3://bucket/key`` or ``https://host/file`` (never a local path)."""
    return bool(_SCHEME.match(path))


def _is_http(path: str) -> bool:
    return path.lower().startswith(("http://", "https://"))


def _one_line(exc: BaseException) -> str:
    return " ".join(str(exc).split())[:200] or type(exc).__name__


def _filesystem(source: SourceConfig) -> tuple[Any, str]:
    """The fsspec filesystem and the path inside it for a `path` with a scheme (not http)."""
    assert source.path is not None
    try:
        import fsspec
    except ImportError:  # pragma: no cover - fsspec is a declared dependency
        msg = f"source {source.name!r}: path {source.path!r} needs the fsspec package; pip install fsspec"
        raise SourceError(msg) from None
    scheme = source.path.split("://", 1)[0].lower()
    options: dict[str, Any] = {}
    if scheme in ("s3", "s3a"):
        # the connection timeout and attempts follow the source's `timeout` and `retries`
        options = {
            "skip_instance_cache": True,
            "config_kwargs": {
                "connect_timeout": source.timeout,
                "read_timeout": source.timeout,
                "retries": {"max_attempts": source.retries + 1, "mode": "standard"},
            },
        }
    try:
        return fsspec.core.url_to_fs(source.path, **options)
    except ImportError as exc:
        package = {"s3": "s3fs", "s3a": "s3fs", "gs": "gcsfs", "gcs": "gcsfs", "az": "adlfs", "abfs": "adlfs"}.get(scheme)
        need = f"the {package} package (pip install {package})" if package else f"an fsspec backend for {scheme}://"
        msg = f"source {source.name!r}: path {source.path!r} needs {need}; install it into shockflow's environment"
        raise SourceError(msg) from exc
    except ValueError as exc:
        msg = f"source {source.name!r}: path {source.path!r} has a scheme fsspec does not know ({_one_line(exc)}); use s3://, gs://, https:// or a local path"
        raise SourceError(msg) from None


def remote_error(source: SourceConfig, exc: BaseException, *, what: str) -> SourceError:
    """An object-store failure → one line naming the source, what failed and the fix."""
    name = type(exc).__name__
    text = _one_line(exc)
    where = f"source {source.name!r}: {what}"
    if isinstance(exc, FileNotFoundError) and "bucket" in text.lower():
        bucket = (source.path or "").split("://", 1)[-1].split("/", 1)[0]
        return SourceError(
            f"{where}: bucket {bucket!r} does not exist ({text}); check the bucket name in `path` "
            "and the endpoint (AWS_ENDPOINT_URL) and region (AWS_DEFAULT_REGION) in the environment"
        )
    if isinstance(exc, PermissionError) or name in ("NoCredentialsError", "PartialCredentialsError"):
        return SourceError(
            f"{where}: the object store refused the credentials ({name}: {text}); set valid credentials in "
            "the environment (AWS_ACCESS_KEY_ID and AWS_SECRET_ACCESS_KEY, or AWS_PROFILE) — never in the config file"
        )
    if name in ("EndpointConnectionError", "ConnectTimeoutError", "ConnectionClosedError", "ReadTimeoutError") or isinstance(
        exc, ConnectionError | TimeoutError
    ):
        return SourceError(
            f"{where}: cannot reach the object store ({name}: {text}); check the network and the endpoint "
            "(AWS_ENDPOINT_URL) or raise `timeout`/`retries`"
        )
    return SourceError(f"{where}: {name}: {text}; check `path` and the credentials in the environment")


def _base(pattern: str) -> str:
    """The folder part of `pattern` before its first glob character (where hive folders start)."""
    m = _GLOB.search(pattern)
    head = pattern[: m.start()] if m else pattern
    return head.rsplit("/", 1)[0] if m or not head.endswith("/") else head.rstrip("/")


def files_of(source: SourceConfig, *, suffix: str = "") -> tuple[list[str], str]:
    """Files the source's `path` names, sorted, and the folder hive partitions are read below.

    A folder (local or remote) stands for every ``*suffix`` file under it (``**`` deep); a glob
    matching nothing is an error naming the path (and, for an object store, the missing bucket).
    """
    assert source.path is not None
    path = source.path
    if _is_http(path):
        if _GLOB.search(path.split("?", 1)[0]):
            msg = f"source {source.name!r}: path {path!r} is an http(s) address with a wildcard; an HTTP server cannot be listed — name one file"
            raise SourceError(msg)
        return [path], path.rsplit("/", 1)[0]
    if not has_scheme(path):
        pattern = path
        if suffix and Path(path).is_dir():
            pattern = str(Path(path) / "**" / f"*{suffix}")
        files = sorted(f for f in glob.glob(pattern, recursive=True) if Path(f).is_file())
        if not files:
            msg = (
                f"source {source.name!r}: no file matches path {source.path!r}; check the path "
                "(relative paths start at the config file's folder)"
            )
            raise SourceError(msg)
        return files, _base(pattern if pattern != path else path)
    fs, inner = _filesystem(source)
    protocol = path.split("://", 1)[0]
    try:
        pattern = inner
        if not _GLOB.search(inner) and fs.isdir(inner):
            pattern = inner.rstrip("/") + f"/**/*{suffix}"
        found = sorted(f for f in fs.glob(pattern) if not fs.isdir(f)) if _GLOB.search(pattern) else (
            [inner] if fs.exists(inner) else []
        )  # fmt: skip
        if not found:
            bucket = inner.split("/", 1)[0]
            if protocol in ("s3", "s3a", "gs", "gcs") and not fs.exists(bucket):
                raise FileNotFoundError(f"bucket {bucket!r}: The specified bucket does not exist")
    except SourceError:
        raise
    except Exception as exc:  # fsspec backends raise their own types (botocore, aiohttp, …)
        raise remote_error(source, exc, what=f"listing {path!r}") from None
    if not found:
        msg = f"source {source.name!r}: no file matches path {path!r} (the bucket exists); check the key or glob in `path`"
        raise SourceError(msg)
    return [f"{protocol}://{f}" for f in found], f"{protocol}://{_base(pattern)}"


@contextlib.contextmanager
def open_file(source: SourceConfig, file: str) -> Iterator[BinaryIO]:
    """A binary stream over one file of the source (local, object store or HTTP download)."""
    if _is_http(file):
        data = fetch_with_retries(
            file, timeout=source.timeout, retries=source.retries, backoff=source.backoff,
            headers=request_headers(source.headers, source=source.name),
        )  # fmt: skip
        yield io.BytesIO(data)
        return
    if not has_scheme(file):
        try:
            stream = Path(file).open("rb")  # closed by the with below
        except OSError as exc:
            msg = f"{file}: cannot be read ({exc.strerror}); check permissions"
            raise SourceError(msg) from None
        with stream:
            yield stream
        return
    fs, _ = _filesystem(source)
    try:
        stream = fs.open(file.split("://", 1)[1], "rb")
    except Exception as exc:
        raise remote_error(source, exc, what=f"opening {file!r}") from None
    with stream:
        yield stream


def hive_values(file: str, base: str, columns: tuple[str, ...]) -> dict[str, str]:
    """``key=value`` folders between `base` and `file` whose key is one of `columns`."""
    rest = file[len(base) :] if file.startswith(base) else file
    out: dict[str, str] = {}
    for part in rest.strip("/").split("/")[:-1]:
        key, sep, value = part.partition("=")
        if sep and key in columns:
            out[key] = unquote(value)
    return out
