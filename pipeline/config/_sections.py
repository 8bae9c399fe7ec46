"""Every key of the config file, declared once (the ``[[sources]]`` keys: pipeline.sources._config).

Each field is a :func:`pipeline._declare.setting`: default, check, one line of documentation and
whether it changes fitted results. Rules between keys (the window against the lags, the Cholesky
order against the series, credentials on a non-loopback host) are in ``_load.py``.
"""

from __future__ import annotations

import hashlib
import ipaddress
import itertools
import json
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from pipeline._declare import fit_document, setting, suggest
from pipeline.errors import ConfigError
from pipeline.prepare import AGGREGATIONS, CALENDARS, DEFAULT_AGGREGATION, TRANSFORMS
from pipeline.sources import SourceConfig
from pipeline.sources._config import check_name

__all__ = [
    "DEFAULT_CREDENTIAL_ENV",
    "FIT_FORMAT_VERSION",
    "FREQUENCIES",
    "Bands",
    "Config",
    "DashboardConfig",
    "ExecutionConfig",
    "ExportConfig",
    "LagSelection",
    "QuantileSettings",
    "ScheduleConfig",
    "SeriesSpec",
    "ShrinkageSettings",
    "TVPSettings",
    "UniverseConfig",
    "WarehouseConfig",
    "is_loopback",
]

#: Bumped whenever the fit stage computes or stores results differently, so that every universe's
#: config hash changes and the next run refits everything.
FIT_FORMAT_VERSION = 2

#: the calendars `pipeline.prepare` implements (the one place to add one)
FREQUENCIES = tuple(CALENDARS)
#: how a series sampled more often than its universe becomes one value per row (pipeline.prepare)
AGGREGATION_NAMES = tuple(AGGREGATIONS)
TRENDS = ("n", "c", "ct")
IDENTIFICATIONS = ("generalized", "cholesky")
CRITERIA = ("aic", "bic", "hq", "fpe")
BAND_METHODS = ("none", "bootstrap", "asymptotic")
EXPORT_FORMATS = ("html", "csv", "parquet", "pdf")
RUNNERS = ("local", "dask")
#: how a universe is estimated: windows of least squares, or the TVP-VAR filter (arlib.tvp_var)
MODELS = ("rolling", "tvp")
#: how each window's equations are estimated: least squares, or quantile regression at each τ
#: of `[universes.quantile]` (arlib.rolling_quantile_var)
#: and the natural-conjugate shrinkage VAR (arlib.rolling_shrinkage)
ESTIMATORS = ("ols", "shrinkage", "quantile")
#: the shrinkage prior's mean for each series' own first lag, by its transform: levels behave
#: like random walks, changes and returns like white noise (arlib._shrink.PRIOR_MEANS)
PRIOR_MEAN_BY_TRANSFORM = {"level": "random_walk", "log_return": "white_noise", "pct_change": "white_noise", "diff": "white_noise"}
#: the TVP filter's state covariance (arlib's COVARIANCES)
TVP_COVARIANCES = ("kronecker", "full")
#: the most worker processes the dashboard starts (dashboard.settings.MAX_WORKERS)
MAX_WORKERS = 64


def is_loopback(host: str) -> bool:
    """True only for ``localhost`` and literal loopback addresses (127.0.0.0/8, ::1, ``[::1]``).

    The one rule for "reachable from this machine only", used by the config, the dashboard and
    the execution checks; case and surrounding spaces or brackets do not matter.
    """
    text = host.strip().strip("[]").strip().lower()
    if text == "localhost":
        return True
    try:
        return ipaddress.ip_address(text).is_loopback
    except ValueError:
        return False


def _proxies(proxies: tuple[str, ...]) -> tuple[str, str] | None:
    for proxy in proxies:
        try:
            ok = proxy == "*" or bool(ipaddress.ip_network(proxy, strict=False))
        except ValueError:
            ok = False
        if not ok:
            return (
                f"contains {proxy!r}",
                'list IP addresses or networks of your reverse proxies (e.g. ["127.0.0.1"]), or "*"',
            )
    return None


#: Environment variables holding the dashboard's credentials when no ``*_env`` key names others.
DEFAULT_CREDENTIAL_ENV = {
    "token": "SHOCKFLOW_DASHBOARD_TOKEN",
    "username": "SHOCKFLOW_DASHBOARD_USERNAME",
    "password": "SHOCKFLOW_DASHBOARD_PASSWORD",
}


def _level(value: float) -> tuple[str, str] | None:
    return None if 0 < value < 1 else (f"is {value}", "use a level in (0, 1), e.g. 0.05")


def _coverage(value: float) -> tuple[str, str] | None:
    return None if 0.5 <= value < 1 else (f"is {value}", "use a level in [0.5, 1), e.g. 0.9")


def _band_edges(edges: tuple[float, ...]) -> tuple[str, str] | None:
    if not edges or list(edges) != sorted(set(edges)) or any(e == float("inf") for e in edges):
        return (f"is {list(edges)}", "list finite cycle lengths in rows, increasing, e.g. [5, 20]")
    return None


def _kappa(value: float) -> tuple[str, str] | None:
    return None if 0 < value <= 1 else (f"is {value}", "use a factor in (0, 1], e.g. 0.99 (memory about 1/(1 − κ) rows)")


def _quantile_levels(levels: tuple[float, ...]) -> tuple[str, str] | None:
    if not levels or list(levels) != sorted(set(levels)) or not all(0 < t < 1 for t in levels):
        return (f"is {list(levels)}", "list distinct levels in (0, 1), increasing, e.g. [0.05, 0.5, 0.95]")
    return None
def _tightness(value: float | str) -> tuple[str, str] | None:
    if isinstance(value, str):
        return None if value == "auto" else (f"is {value!r}", 'use "auto" (chosen per window by the marginal likelihood) or a number > 0, e.g. 0.2')
    return None if 0 < value < float("inf") else (f"is {value}", 'use "auto" or a positive number, e.g. 0.2')


def _cron(cron: str) -> tuple[str, str] | None:
    fields = cron.split()
    if len(fields) != 5:
        return (
            f"is {cron!r} with {len(fields)} fields",
            "use 5 fields: minute hour day-of-month month day-of-week, e.g. '0 22 * * 1-5'",
        )
    try:
        from cronsim import CronSim, CronSimError
    except ImportError:  # pragma: no cover - cronsim ships with prefect
        return None
    from datetime import datetime

    try:
        CronSim(cron, datetime(2000, 1, 1))
    except CronSimError as exc:
        return f"is {cron!r}: {exc}", "fix the field, e.g. '0 22 * * 1-5' for 22:00 on weekdays"
    return None


def _timezone(name: str) -> tuple[str, str] | None:
    from zoneinfo import ZoneInfo

    try:
        ZoneInfo(name)
    except Exception:
        return f"is {name!r}, not a known IANA time zone", "use a name such as 'UTC' or 'Europe/London'"
    return None


def _port(port: int) -> tuple[str, str] | None:
    return None if 0 <= port <= 65535 else (f"is {port}", "use a port in 0..65535")


# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class WarehouseConfig:
    """Where the working warehouse and the served snapshot live (absolute paths)."""

    path: Path = setting(Path("./shockflow.duckdb"), doc="the working warehouse (DuckDB file, created if missing)")
    snapshot: Path = setting(
        Path("./shockflow-serving.duckdb"), doc="the serving snapshot the dashboard and exports read"
    )


@dataclass(frozen=True)
class SeriesSpec:
    """One series of a universe with its resolved transform."""

    name: str = setting(doc="the series name")
    transform: str = setting(
        choices=tuple(TRANSFORMS), default_doc="the universe's `transform`", doc="its transform"
    )
    aggregate: str = setting(
        DEFAULT_AGGREGATION, choices=AGGREGATION_NAMES, fit_if_set=True,
        doc="when the series has several observations in one row of the universe (daily data in a "
        "monthly universe): " + "; ".join(f"`{k}` {a.doc}" for k, a in AGGREGATIONS.items())
        + f". Default `{DEFAULT_AGGREGATION}` for every transform (docs/pipeline.md says why)",
    )  # fmt: skip

    def fit_entry(self) -> list[Any]:
        """[name, transform] plus, only when set, {key: value} of the later keys (`aggregate`):
        so a series without them keeps the fit hash it had before they existed."""
        extra = {k: v for k, v in fit_document(self).items() if k not in ("name", "transform")}
        return [self.name, self.transform, extra] if extra else [self.name, self.transform]


@dataclass(frozen=True)
class LagSelection:
    """Choose the lag order per window by `criterion` among 1..max_lags."""

    criterion: str = setting(choices=CRITERIA, doc="information criterion: {choices}")
    max_lags: int = setting(minimum=1, doc="the largest p tried")


@dataclass(frozen=True)
class Bands:
    """Impulse-response bands for the latest window of each run (defaults: inside the table)."""

    method: str = setting(
        "bootstrap", choices=BAND_METHODS, doc="`bootstrap`, `asymptotic` (Cholesky only) or `none`"
    )
    draws: int = setting(200, minimum=10, doc="bootstrap draws")
    seed: int = setting(0, minimum=0, doc="random seed of the draws")
    coverage: float = setting(0.9, check=_coverage, doc="band coverage, in [0.5, 1)")


#: a universe without a `[universes.bands]` table
NO_BANDS = Bands(method="none")


@dataclass(frozen=True)
class TVPSettings:
    """The TVP-VAR filter of a `model = "tvp"` universe (arlib.tvp_var; defaults: arlib's)."""

    kappa1: float = setting(
        0.99, check=_kappa, doc="κ₁, forgetting factor of the coefficients, in (0, 1]: memory about 1/(1 − κ₁) rows"
    )
    kappa2: float = setting(
        0.99, check=_kappa, doc="κ₂, decay of the error covariance Σ_t, in (0, 1]: memory about 1/(1 − κ₂) rows"
    )
    training: int | None = setting(
        None, minimum=3, default_doc="max(p + k + n, 4·k)",
        doc="first rows whose least-squares fit is the prior; dates start after them (k coefficients per equation)",
    )  # fmt: skip
    covariance: str = setting(
        "kronecker", choices=TVP_COVARIANCES,
        doc="`kronecker` (P = Σ ⊗ V: fast, per-equation forgetting) or `full` (the papers' n·k × n·k P)",
    )  # fmt: skip


#: a universe without a `[universes.tvp]` table
DEFAULT_TVP = TVPSettings()


@dataclass(frozen=True)
class QuantileSettings:
    """The quantile levels of an `estimator = "quantile"` universe (arlib.rolling_quantile_var)."""

    quantiles: tuple[float, ...] = setting(
        (0.05, 0.5, 0.95), check=_quantile_levels, default_doc="`[0.05, 0.5, 0.95]`",
        doc="τ levels in (0, 1), increasing (lower tail, median, upper tail); the tabs that show one "
        "fit per window show the level nearest 0.5",
    )  # fmt: skip


#: a universe without a `[universes.quantile]` table
DEFAULT_QUANTILE = QuantileSettings()


@dataclass(frozen=True)
class ShrinkageSettings:
    """The prior of an `estimator = "shrinkage"` universe (arlib.rolling_shrinkage)."""

    tightness: float | str = setting(
        "auto", check=_tightness,
        doc='overall tightness λ of the Minnesota prior: `"auto"` (chosen per window by maximising '
        "the marginal likelihood over [0.001, 10]) or a number > 0 (smaller shrinks harder)",
    )  # fmt: skip
    lag_decay: float = setting(
        1.0, minimum=0.0, doc="prior sd of lag-l coefficients ∝ 1/l^decay (1: variance 1/l²)"
    )


#: a universe without a `[universes.shrinkage]` table
DEFAULT_SHRINKAGE = ShrinkageSettings()


@dataclass(frozen=True)
class UniverseConfig:
    """One `[[universes]]` entry: a named set of series and how to fit them."""

    name: str = setting(doc="unique name", fit=False, check=check_name)
    series: tuple[SeriesSpec, ...] = setting(
        doc='list of series names, each either `"NAME"` or a table `{ name = "NAME", transform = "diff", '
        'aggregate = "sum" }` (its keys: `series[].…` below)',
        fit_value=lambda u: [s.fit_entry() for s in u.series],
    )
    window: int | None = setting(
        None, minimum=3, default_doc="required (rolling)",
        doc="rows per window (rolling), or rows of the first window (expanding); must leave at least "
        "k + n observations (k coefficients per equation) — the error suggests a window. Not used "
        "by a `tvp` universe (nor `step`, `expanding`, `arrays_every`)",
    )  # fmt: skip
    transform: str = setting(
        "log_return", fit_via="series", choices=tuple(TRANSFORMS),  # each series carries its own
        doc="default transform: `log_return` (ln x_t − ln x_{t−1}, needs x > 0), `pct_change` "
        "(x_t/x_{t−1} − 1), `diff` (x_t − x_{t−1}), `level`",
    )  # fmt: skip
    frequency: str = setting(
        "business_day", choices=FREQUENCIES,
        doc="calendar: " + ", ".join(f"`{k}` ({c.doc})" for k, c in CALENDARS.items())
        + "; a row holds each series' observations in it, aggregated by the series' `aggregate`",
    )  # fmt: skip
    max_fill_gap: int = setting(
        3, minimum=0, doc="longest run of missing rows forward-filled per series; longer gaps stay missing"
    )
    step: int = setting(1, minimum=1, doc="rows between window ends")
    expanding: bool = setting(False, doc="windows grow from the first row instead of rolling")
    lags: int | None = setting(None, minimum=1, doc="the VAR order p (or, instead, a `lag_selection` table)")
    lag_selection: LagSelection | None = setting(None, doc="a table choosing p per window, instead of `lags`")
    trend: str = setting("c", choices=TRENDS, doc="`n` none, `c` intercept, `ct` intercept and linear trend")
    horizon: int = setting(10, minimum=1, doc="H: responses 0..H, H-step decompositions and connectedness")
    identification: str = setting(
        "generalized", choices=IDENTIFICATIONS,
        doc="`generalized` (Pesaran–Shin) or `cholesky` for the stored responses and decompositions "
        "(connectedness always uses the generalized decomposition, Diebold–Yilmaz 2012)",
    )  # fmt: skip
    cholesky_order: tuple[str, ...] | None = setting(
        None, default_doc="series order",
        doc="with `cholesky`: the ordering; the universe's columns are stored in this order",
    )  # fmt: skip
    bands: Bands = setting(NO_BANDS, default_doc="none", doc="a table: response bands for the newest window of each run")
    granger_level: float = setting(0.05, check=_level, doc="significance level shown for Granger tests")
    portmanteau_lags: int | None = setting(
        None, minimum=1, default_doc="max(10, p + 5)", fit_value=lambda u: u.residual_test_lags,
        doc="h of the residual portmanteau test per window (h > p)",
    )  # fmt: skip
    #: store responses and decompositions for every `arrays_every`-th window of the grid (and for
    #: the newest window of each run); 1 = every window. Other windows' arrays are derived on demand.
    arrays_every: int = setting(
        1, minimum=1, doc="store responses/decompositions for every N-th window (and the newest); see docs/warehouse.md"
    )
    frequency_bands: tuple[float, ...] | None = setting(
        None, minimum=2, check=_band_edges, fit_if_set=True, default_doc="none",
        doc="connectedness by cycle length (Baruník–Křehlík 2018): the periods in rows where bands "
        "split, e.g. `[5, 20]` for daily data (cycles up to a week, a week to a month, longer), "
        "`[4, 12]` for quarterly data (within a year, one to three years, longer)",
    )  # fmt: skip
    band_truncation: int = setting(
        100, minimum=10, fit_if_set=True,
        doc="MA terms behind the frequency bands; the bands add up to connectedness at this horizon",
    )  # fmt: skip
    joint: bool = setting(
        False, fit_if_set=True,
        doc="also joint connectedness (Lastrapes–Wiesen 2021): each series' share due to all "
        "other shocks together",
    )  # fmt: skip
    model: str = setting(
        "rolling", choices=MODELS, fit_if_set=True,
        doc="`rolling` (least squares per window) or `tvp` (a time-varying-parameter VAR filtered "
        "with forgetting factors, one result per date, no window; needs fixed `lags`, trend `n`/`c`)",
    )  # fmt: skip
    tvp: TVPSettings = setting(
        DEFAULT_TVP, fit_if_set=True, default_doc="arlib's defaults",
        doc="a table: the TVP filter's settings (`model = \"tvp\"` only)",
    )  # fmt: skip
    estimator: str = setting(
        "ols", choices=ESTIMATORS, fit_if_set=True,
        doc="per window: `ols` (least squares); `shrinkage` (natural-conjugate Minnesota prior, "
        "posterior mean; prior mean random walk for `level` series, white noise for changes and "
        "returns; needs fixed `lags`, trend `n`/`c`, rolling windows; no Granger tests); or `quantile` "
        "(each equation by quantile regression at every τ of `[universes.quantile]`: tail connectedness, "
        "Ando–Greenwood-Nimmo–Shin 2022; rolling windows, fixed `lags`, trend `n`/`c`, no Granger tests, "
        "bands, `frequency_bands` or `joint`)",
    )  # fmt: skip
    quantile: QuantileSettings = setting(
        DEFAULT_QUANTILE, fit_if_set=True, default_doc="τ = 0.05, 0.5, 0.95",
        doc="a table: the quantile levels (`estimator = \"quantile\"` only)",
    )  # fmt: skip
    shrinkage: ShrinkageSettings = setting(
        DEFAULT_SHRINKAGE, fit_if_set=True, default_doc="λ auto, decay 1",
        doc='a table: the shrinkage prior (`estimator = "shrinkage"` only)',
    )  # fmt: skip

    @property
    def names(self) -> tuple[str, ...]:
        """Series names in column order."""
        return tuple(s.name for s in self.series)

    @property
    def prior_means(self) -> tuple[str, ...]:
        """The shrinkage prior mean rule of each series, from its transform (`PRIOR_MEAN_BY_TRANSFORM`)."""
        return tuple(PRIOR_MEAN_BY_TRANSFORM.get(s.transform, "white_noise") for s in self.series)

    @property
    def band_periods(self) -> tuple[tuple[float, float], ...] | None:
        """The frequency bands as (shortest, longest] cycle lengths: (1, e₁], (e₁, e₂], …, (e_k, ∞)."""
        if self.frequency_bands is None:
            return None
        edges = (1.0, *(float(e) for e in self.frequency_bands), float("inf"))
        return tuple(itertools.pairwise(edges))

    @property
    def central_quantile(self) -> float:
        """The τ of a quantile universe whose fit fills the one-fit-per-window tables: nearest 0.5."""
        return min(self.quantile.quantiles, key=lambda t: (abs(t - 0.5), t))

    @property
    def window_rows(self) -> int:
        """`window` of a rolling universe (the loader requires it there)."""
        if self.window is None:
            msg = f"universe {self.name!r} has no `window` (model = {self.model!r})"
            raise ValueError(msg)
        return self.window

    @property
    def max_lag(self) -> int:
        """The largest lag order any window may use."""
        if self.lag_selection is not None:
            return self.lag_selection.max_lags
        assert self.lags is not None
        return self.lags

    @property
    def residual_test_lags(self) -> int:
        """Lags h of the portmanteau test (must exceed the lag order: df = n²(h − p))."""
        if self.portmanteau_lags is not None:
            return self.portmanteau_lags
        return max(10, self.max_lag + 5)

    def fit_settings(self) -> dict[str, Any]:
        """Every setting that changes the fitted numbers, as plain JSON-able values.

        Every declared field enters unless declared ``fit=False`` (the name; the default transform,
        which `series` carries resolved), plus the fit format version.
        """
        return {"format": FIT_FORMAT_VERSION, **fit_document(self)}

    @property
    def config_hash(self) -> str:
        """sha256 of the stable JSON of :meth:`fit_settings` (name excluded): 16 hex digits."""
        text = json.dumps(self.fit_settings(), sort_keys=True, separators=(",", ":"))
        return hashlib.sha256(text.encode()).hexdigest()[:16]


@dataclass(frozen=True)
class ScheduleConfig:
    """When the nightly flow runs."""

    cron: str = setting("0 22 * * 1-5", check=_cron, doc="five-field cron of the nightly run")
    timezone: str = setting("UTC", check=_timezone, doc="IANA time zone of the cron and of a run's \"today\" (sources refuse rows dated after it)")


@dataclass(frozen=True)
class ExportConfig:
    """Where reports go and in which formats."""

    directory: Path = setting(Path("./exports"), doc="reports go to `<directory>/<date>/<universe>/`")
    formats: tuple[str, ...] = setting(
        ("html", "csv", "parquet"), choices=EXPORT_FORMATS,
        doc="any of {choices} (PDF needs Debian's `chromium`)",
    )  # fmt: skip


@dataclass(frozen=True)
class DashboardConfig:
    """How the dashboard is served. Secrets may be named by environment variable instead."""

    host: str = setting("127.0.0.1", doc="where the dashboard listens; a non-loopback host requires credentials")
    port: int = setting(8050, check=_port, doc="the port it listens on")
    workers: int = setting(
        2, minimum=1, maximum=MAX_WORKERS, doc="processes answering dashboard requests (about one per core; at most 64)"
    )
    token: str | None = setting(None, secret=True, doc="an access token")
    username: str | None = setting(None, doc="basic-auth user name (with `password`)")
    password: str | None = setting(None, secret=True, doc="basic-auth password (with `username`)")
    token_env: str | None = setting(None, doc="the environment variable holding the token")
    username_env: str | None = setting(None, doc="the environment variable holding the user name")
    password_env: str | None = setting(None, doc="the environment variable holding the password")
    trusted_proxies: tuple[str, ...] = setting(
        (), check=_proxies, default_doc="none",
        doc="reverse proxies (addresses, networks or `\"*\"`) whose `X-Forwarded-Proto` is believed",
    )  # fmt: skip

    @property
    def is_loopback(self) -> bool:
        """True when `host` only listens on this machine."""
        return is_loopback(self.host)

    def credentials(self, environ: Mapping[str, str]) -> dict[str, str | None]:
        """Token / username / password, from the config or from the named variables in `environ`.

        Called at the entry point (the CLI) with ``os.environ``; nothing below it reads the
        environment.
        """

        def pick(value: str | None, env: str | None, name: str) -> str | None:
            if value:
                return value
            return environ.get(env or DEFAULT_CREDENTIAL_ENV[name]) or None

        return {
            "token": pick(self.token, self.token_env, "token"),
            "username": pick(self.username, self.username_env, "username"),
            "password": pick(self.password, self.password_env, "password"),
        }


@dataclass(frozen=True)
class ExecutionConfig:
    """Where fits run: in this process, or on a dask.distributed cluster."""

    runner: str = setting("local", choices=RUNNERS, doc="`local` (threads in this process) or `dask`")
    address: str | None = setting(
        None, doc="with `dask`: `local` (an in-process LocalCluster on 127.0.0.1) or `tcp://host:8786`"
    )
    block_windows: int = setting(1000, minimum=1, doc="windows per fit task (a large universe is split into blocks)")


@dataclass(frozen=True)
class Config:
    """The whole validated configuration. `path` is the file it came from (absolute)."""

    path: Path
    warehouse: WarehouseConfig
    sources: tuple[SourceConfig, ...]
    universes: tuple[UniverseConfig, ...]
    schedule: ScheduleConfig
    export: ExportConfig
    dashboard: DashboardConfig
    execution: ExecutionConfig

    def universe(self, name: str) -> UniverseConfig:
        """The universe called `name`; ConfigError with did-you-mean otherwise."""
        for u in self.universes:
            if u.name == name:
                return u
        names = [u.name for u in self.universes]
        msg = f"{self.path}: no universe named {name!r}{suggest(name, names)}; defined: {', '.join(names)}"
        raise ConfigError(msg)

    def source(self, name: str) -> SourceConfig:
        """The source called `name`."""
        for s in self.sources:
            if s.name == name:
                return s
        names = [s.name for s in self.sources]
        msg = f"{self.path}: no source named {name!r}{suggest(name, names)}; defined: {', '.join(names)}"
        raise ConfigError(msg)
