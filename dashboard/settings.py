"""What the dashboard needs to know to start: where the snapshot is, where reports are, who may look.

`DashboardSettings` is a frozen value object. `DashboardSettings.from_config` takes its values from
the pipeline's loaded `Config` — ``config.warehouse.snapshot``, ``config.export.directory`` and
``config.dashboard`` (`pipeline.config.DashboardConfig`, which declares the ``[dashboard]`` keys,
their defaults and their checks once); nothing here re-reads the TOML. The defaults of a
`DashboardSettings` built directly are that declaration's defaults.

Credentials may come from the config itself or from environment variables; the config may name the
variables (``token_env``, ``username_env``, ``password_env``), otherwise these defaults are read
(`DEFAULT_ENV`, which is `pipeline.config.DEFAULT_CREDENTIAL_ENV`):

``SHOCKFLOW_DASHBOARD_TOKEN``, ``SHOCKFLOW_DASHBOARD_USERNAME``, ``SHOCKFLOW_DASHBOARD_PASSWORD``.

A trailing newline (``\\n`` or ``\\r\\n``, as ``echo`` or a secrets file leaves it) is stripped
from each secret. Only the entry point reads the environment: the CLI passes
``environ=os.environ``; nothing in this package looks at ``os.environ`` by itself.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping
from pathlib import Path
from typing import TYPE_CHECKING, Any

from pipeline.config import DEFAULT_CREDENTIAL_ENV, DashboardConfig

from ._errors import DashboardError

if TYPE_CHECKING:
    from pipeline.config import Config

__all__ = ["DEFAULT_ENV", "DEFAULT_WORKERS", "MAX_WORKERS", "DashboardSettings"]

_DEFAULTS = DashboardConfig()
#: Worker processes `serve` starts unless told otherwise (one per core of a small machine).
DEFAULT_WORKERS = _DEFAULTS.workers
MAX_WORKERS = 64

#: Environment variables read for credentials when the config names none.
DEFAULT_ENV = DEFAULT_CREDENTIAL_ENV


def _secret(value: Any) -> str | None:
    """A secret as a plain string without a trailing newline; accepts pydantic-style SecretStr
    objects; empty means none."""
    if value is None:
        return None
    getter = getattr(value, "get_secret_value", None)
    text = str(getter() if callable(getter) else value).rstrip("\r\n")
    return text if text.strip() else None


@dataclasses.dataclass(frozen=True)
class DashboardSettings:
    """Where the dashboard reads from and how it listens.

    Parameters
    ----------
    snapshot : Path
        The serving snapshot DuckDB file (opened read-only; never the working warehouse).
    export_dir : Path or None
        Folder of exported reports offered for download; nothing outside it is ever served.
    host, port : where `serve` listens (loopback by default).
    token : access token (``Authorization: Bearer``, or ``?token=`` once, which sets a cookie).
    username, password : HTTP basic-auth credentials (both or neither).
    workers : processes `serve` answers requests with (Python runs one thread at a time per
        process, so one process per core lets every core work).
    trusted_proxies : addresses or networks (or ``"*"``) of reverse proxies whose
        ``X-Forwarded-Proto: https`` is believed (the session cookie is then marked ``Secure``);
        empty (the default): the header is ignored, from anyone.
    """

    snapshot: Path
    export_dir: Path | None = None
    host: str = _DEFAULTS.host
    port: int = _DEFAULTS.port
    token: str | None = dataclasses.field(default=None, repr=False)
    username: str | None = None
    password: str | None = dataclasses.field(default=None, repr=False)
    workers: int = DEFAULT_WORKERS
    trusted_proxies: tuple[str, ...] = _DEFAULTS.trusted_proxies

    def __post_init__(self) -> None:
        object.__setattr__(self, "snapshot", Path(self.snapshot).expanduser().resolve())
        if self.export_dir is not None:
            object.__setattr__(self, "export_dir", Path(self.export_dir).expanduser().resolve())
        if isinstance(self.port, bool) or not isinstance(self.port, int) or not 0 <= self.port <= 65535:
            msg = f"`port` must be an integer in 0..65535, got {self.port!r}; set [dashboard] port"
            raise DashboardError(msg)
        if (
            isinstance(self.workers, bool)
            or not isinstance(self.workers, int)
            or not 1 <= self.workers <= MAX_WORKERS
        ):
            msg = (
                f"`workers` must be a whole number from 1 to {MAX_WORKERS}, got {self.workers!r}; "
                "set [dashboard] workers or --workers (one per core is a good start)"
            )
            raise DashboardError(msg)
        if not isinstance(self.host, str) or not self.host.strip():
            msg = f"`host` must be a host name or address, got {self.host!r}; e.g. host = \"127.0.0.1\""
            raise DashboardError(msg)
        for name in ("token", "username", "password"):
            object.__setattr__(self, name, _secret(getattr(self, name)))
        object.__setattr__(self, "trusted_proxies", tuple(self.trusted_proxies))
        if (self.username is None) != (self.password is None):
            msg = (
                "basic auth needs both `username` and `password` "
                f"(got only {'username' if self.username else 'password'}); set both, or use a token"
            )
            raise DashboardError(msg)

    @property
    def has_credentials(self) -> bool:
        """True when a token or a username/password pair protects the app."""
        return self.token is not None or self.username is not None

    @classmethod
    def from_config(cls, config: Config, *, environ: Mapping[str, str] | None = None) -> DashboardSettings:
        """Settings from the pipeline's loaded `Config` (its values, already checked there).

        Secrets named by variable (or the `DEFAULT_ENV` ones) are looked up in `environ` — the
        entry point passes ``os.environ``; None means no environment. Values set in the config
        win over the environment.
        """
        if isinstance(config, DashboardSettings):
            return config
        dash = config.dashboard
        return cls(
            snapshot=config.warehouse.snapshot,
            export_dir=config.export.directory,
            host=dash.host,
            port=dash.port,
            workers=dash.workers,
            trusted_proxies=dash.trusted_proxies,
            **dash.credentials({} if environ is None else environ),
        )

    def with_address(
        self, host: str | None = None, port: int | None = None, *, workers: int | None = None
    ) -> DashboardSettings:
        """A copy listening elsewhere or with other workers (the CLI's options win over the config)."""
        changes: dict[str, Any] = {}
        if host is not None:
            changes["host"] = host
        if port is not None:
            changes["port"] = port
        if workers is not None:
            changes["workers"] = workers
        return dataclasses.replace(self, **changes) if changes else self
