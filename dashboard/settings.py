"""What the dashboard needs to know to start: where the snapshot is, where reports are, who may look.

`DashboardSettings` is a frozen value object. `DashboardSettings.from_config` reads the pipeline's
`Config` (``config.warehouse.snapshot``, ``config.export.directory``, ``config.dashboard.*``)
defensively, so a config without a ``[dashboard]`` table (or without a key, such as ``workers``)
still gives loopback-only defaults.

Credentials may come from the config itself or from environment variables; the config may name the
variables (``token_env``, ``username_env``, ``password_env``), otherwise these defaults are read:

``SHOCKFLOW_DASHBOARD_TOKEN``, ``SHOCKFLOW_DASHBOARD_USERNAME``, ``SHOCKFLOW_DASHBOARD_PASSWORD``.

Only the entry point reads the environment: the CLI passes ``environ=os.environ``; nothing in this
package looks at ``os.environ`` by itself.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from ._errors import DashboardError

__all__ = ["DEFAULT_ENV", "DEFAULT_WORKERS", "MAX_WORKERS", "DashboardSettings"]

#: Worker processes `serve` starts unless told otherwise (one per core of a small machine).
DEFAULT_WORKERS = 2
MAX_WORKERS = 64

#: Environment variables read for credentials when the config names none.
DEFAULT_ENV = {
    "token": "SHOCKFLOW_DASHBOARD_TOKEN",
    "username": "SHOCKFLOW_DASHBOARD_USERNAME",
    "password": "SHOCKFLOW_DASHBOARD_PASSWORD",
}


def _attr(obj: Any, name: str, default: Any = None) -> Any:
    """`obj.name` or `obj[name]` (config sections may be objects or plain mappings)."""
    if obj is None:
        return default
    if isinstance(obj, Mapping):
        return obj.get(name, default)
    return getattr(obj, name, default)


def _secret(value: Any) -> str | None:
    """A secret as a plain string; accepts pydantic-style SecretStr objects; empty means none."""
    if value is None:
        return None
    getter = getattr(value, "get_secret_value", None)
    text = str(getter() if callable(getter) else value)
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
    """

    snapshot: Path
    export_dir: Path | None = None
    host: str = "127.0.0.1"
    port: int = 8050
    token: str | None = dataclasses.field(default=None, repr=False)
    username: str | None = None
    password: str | None = dataclasses.field(default=None, repr=False)
    workers: int = DEFAULT_WORKERS

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
    def from_config(
        cls, config: Any, *, environ: Mapping[str, str] | None = None
    ) -> DashboardSettings:
        """Settings from the pipeline's `Config` (or anything shaped like it).

        Reads ``config.warehouse.snapshot``, ``config.export.directory`` and the optional
        ``config.dashboard`` section (host, port, workers, token, username, password, and ``*_env``
        names of environment variables holding the secrets). Secrets named by variable are looked
        up in `environ` — the entry point passes ``os.environ``; None means no environment. Values
        set in the config win over the environment.
        """
        if isinstance(config, DashboardSettings):
            return config
        env: Mapping[str, str] = {} if environ is None else environ
        warehouse = _attr(config, "warehouse")
        snapshot = _attr(warehouse, "snapshot")
        if snapshot is None:
            msg = (
                "the config gives no serving snapshot (`[warehouse] snapshot`); "
                "set it to the DuckDB file the pipeline publishes, e.g. ./shockflow-serving.duckdb"
            )
            raise DashboardError(msg)
        export = _attr(config, "export")
        export_dir = _attr(export, "directory")
        dash_cfg = _attr(config, "dashboard")
        values: dict[str, Any] = {}
        for name in ("token", "username", "password"):
            value = _secret(_attr(dash_cfg, name))
            if value is None:
                var = _attr(dash_cfg, f"{name}_env") or DEFAULT_ENV[name]
                value = _secret(env.get(str(var)))
            values[name] = value
        host = _attr(dash_cfg, "host") or "127.0.0.1"
        port = _attr(dash_cfg, "port")
        workers = _attr(dash_cfg, "workers")
        return cls(
            snapshot=Path(snapshot),
            export_dir=None if export_dir is None else Path(export_dir),
            host=str(host),
            port=8050 if port is None else port,
            workers=DEFAULT_WORKERS if workers is None else workers,
            **values,
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
