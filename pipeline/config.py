"""The one TOML configuration file: loaded, validated and frozen.

``load_config(path)`` reads the file with :mod:`tomllib`, checks every section and key, and returns
a frozen :class:`Config` (readable repr, compares by value). Every error is a :class:`ConfigError`
naming the file, the key and the fix; unknown keys get a did-you-mean suggestion. Paths are resolved
relative to the config file's folder, so a config works from any working directory.

Sections (every key is documented in the README):

- ``[warehouse]`` path, snapshot
- ``[[sources]]`` name, kind, path | url | query (+ database), layout, date_column, date_format,
  series_column, value_column, delimiter, timeout, retries, backoff, dataset (demo kind)
- ``[[universes]]`` name, series, transform, frequency, max_fill_gap, window, step, expanding,
  lags | [universes.lag_selection], trend, horizon, identification, cholesky_order (the series
  are then stored and fitted in that order, which is the Cholesky order),
  [universes.bands], granger_level, portmanteau_lags, arrays_every
- ``[schedule]`` cron, timezone
- ``[export]`` directory, formats
- ``[dashboard]`` host, port, workers, token | username + password, or the *_env names of variables holding them
- ``[execution]`` runner, address, block_windows
"""

from __future__ import annotations

import dataclasses
import difflib
import hashlib
import ipaddress
import json
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from pipeline.errors import ConfigError

__all__ = [
    "FIT_FORMAT_VERSION",
    "Bands",
    "Config",
    "DashboardConfig",
    "ExecutionConfig",
    "ExportConfig",
    "LagSelection",
    "ScheduleConfig",
    "SeriesSpec",
    "SourceConfig",
    "UniverseConfig",
    "WarehouseConfig",
    "check_series_coverage",
    "load_config",
    "load_config_text",
]

#: Bumped whenever the fit stage computes or stores results differently, so that every universe's
#: config hash changes and the next run refits everything.
FIT_FORMAT_VERSION = 2

SOURCE_KINDS = ("csv", "parquet", "http_csv", "duckdb_sql", "demo")
LAYOUTS = ("wide", "long")
FREQUENCIES = ("business_day", "weekly", "monthly")
TRENDS = ("n", "c", "ct")
IDENTIFICATIONS = ("generalized", "cholesky")
CRITERIA = ("aic", "bic", "hq", "fpe")
BAND_METHODS = ("none", "bootstrap", "asymptotic")
EXPORT_FORMATS = ("html", "csv", "parquet", "pdf")
RUNNERS = ("local", "dask")
DEMO_DATASETS = ("markets", "rates")


def _transform_names() -> tuple[str, ...]:
    # The transform table lives beside its implementations (pipeline.prepare.TRANSFORMS).
    from pipeline.prepare import TRANSFORMS

    return tuple(TRANSFORMS)


# --------------------------------------------------------------------------------------------
# Frozen config objects
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class WarehouseConfig:
    """Where the working warehouse and the served snapshot live (absolute paths)."""

    path: Path
    snapshot: Path


@dataclass(frozen=True)
class SourceConfig:
    """One `[[sources]]` entry. `path` is an absolute glob pattern (csv, parquet) or DuckDB file."""

    name: str
    kind: str
    path: str | None = None
    url: str | None = None
    query: str | None = None
    database: Path | None = None
    dataset: str | None = None
    layout: str = "wide"
    date_column: str = "date"
    date_format: str = "%Y-%m-%d"
    series_column: str = "series"
    value_column: str = "value"
    delimiter: str = ","
    timeout: float = 30.0
    retries: int = 3
    backoff: float = 1.0
    external_access: bool = False  # duckdb_sql: let the query read files/URLs besides `database`

    @property
    def where(self) -> str:
        """Human description of where the rows come from, for messages."""
        return self.path or self.url or (str(self.database) if self.database else "") or (
            f"demo dataset {self.dataset!r}"
        )


@dataclass(frozen=True)
class SeriesSpec:
    """One series of a universe with its resolved transform."""

    name: str
    transform: str


@dataclass(frozen=True)
class LagSelection:
    """Choose the lag order per window by `criterion` among 1..max_lags."""

    criterion: str
    max_lags: int


@dataclass(frozen=True)
class Bands:
    """Impulse-response bands for the latest window of each run."""

    method: str = "none"
    draws: int = 200
    seed: int = 0
    coverage: float = 0.9


@dataclass(frozen=True)
class UniverseConfig:
    """One `[[universes]]` entry: a named set of series and how to fit them."""

    name: str
    series: tuple[SeriesSpec, ...]
    window: int
    transform: str = "log_return"
    frequency: str = "business_day"
    max_fill_gap: int = 3
    step: int = 1
    expanding: bool = False
    lags: int | None = None
    lag_selection: LagSelection | None = None
    trend: str = "c"
    horizon: int = 10
    identification: str = "generalized"
    cholesky_order: tuple[str, ...] | None = None
    bands: Bands = field(default_factory=Bands)
    granger_level: float = 0.05
    portmanteau_lags: int | None = None
    #: store responses and decompositions for every `arrays_every`-th window of the grid (and for
    #: the newest window of each run); 1 = every window. Other windows' arrays are derived on demand.
    arrays_every: int = 1

    @property
    def names(self) -> tuple[str, ...]:
        """Series names in column order."""
        return tuple(s.name for s in self.series)

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
        """Every setting that changes the fitted numbers, as plain JSON-able values."""
        return {
            "format": FIT_FORMAT_VERSION,
            "series": [[s.name, s.transform] for s in self.series],
            "frequency": self.frequency,
            "max_fill_gap": self.max_fill_gap,
            "window": self.window,
            "step": self.step,
            "expanding": self.expanding,
            "lags": self.lags,
            "lag_selection": dataclasses.asdict(self.lag_selection) if self.lag_selection else None,
            "trend": self.trend,
            "horizon": self.horizon,
            "identification": self.identification,
            "cholesky_order": list(self.cholesky_order) if self.cholesky_order else None,
            "bands": dataclasses.asdict(self.bands),
            "granger_level": self.granger_level,
            "portmanteau_lags": self.residual_test_lags,
            "arrays_every": self.arrays_every,
        }

    @property
    def config_hash(self) -> str:
        """sha256 of the stable JSON of :meth:`fit_settings` (name excluded): 16 hex digits."""
        text = json.dumps(self.fit_settings(), sort_keys=True, separators=(",", ":"))
        return hashlib.sha256(text.encode()).hexdigest()[:16]


@dataclass(frozen=True)
class ScheduleConfig:
    """When the nightly flow runs."""

    cron: str = "0 22 * * 1-5"
    timezone: str = "UTC"


@dataclass(frozen=True)
class ExportConfig:
    """Where reports go and in which formats."""

    directory: Path
    formats: tuple[str, ...] = ("html", "csv", "parquet")


@dataclass(frozen=True)
class DashboardConfig:
    """How the dashboard is served. Secrets may be named by environment variable instead."""

    host: str = "127.0.0.1"
    port: int = 8050
    workers: int = 2  # processes answering requests (dashboard.serve)
    token: str | None = field(default=None, repr=False)
    username: str | None = None
    password: str | None = field(default=None, repr=False)
    token_env: str | None = None
    username_env: str | None = None
    password_env: str | None = None

    @property
    def is_loopback(self) -> bool:
        """True when `host` only listens on this machine."""
        return _is_loopback(self.host)

    def credentials(self, environ: Mapping[str, str]) -> dict[str, str | None]:
        """Token / username / password, from the config or from the named variables in `environ`.

        Called at the entry point (the CLI) with ``os.environ``; nothing below it reads the
        environment.
        """

        def pick(value: str | None, env: str | None) -> str | None:
            if value:
                return value
            if env:
                return environ.get(env) or None
            return None

        return {
            "token": pick(self.token, self.token_env),
            "username": pick(self.username, self.username_env),
            "password": pick(self.password, self.password_env),
        }


@dataclass(frozen=True)
class ExecutionConfig:
    """Where fits run: in this process, or on a dask.distributed cluster."""

    runner: str = "local"
    address: str | None = None
    block_windows: int = 1000


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
        msg = f"{self.path}: no universe named {name!r}{_suggest(name, names)}; defined: {', '.join(names)}"
        raise ConfigError(msg)

    def source(self, name: str) -> SourceConfig:
        """The source called `name`."""
        for s in self.sources:
            if s.name == name:
                return s
        names = [s.name for s in self.sources]
        msg = f"{self.path}: no source named {name!r}{_suggest(name, names)}; defined: {', '.join(names)}"
        raise ConfigError(msg)


# --------------------------------------------------------------------------------------------
# Loading and validation
# --------------------------------------------------------------------------------------------

_MISSING = object()


def _suggest(word: str, choices: list[str] | tuple[str, ...]) -> str:
    close = difflib.get_close_matches(word, list(choices), n=1, cutoff=0.6)
    return f" (did you mean {close[0]!r}?)" if close else ""


def _is_loopback(host: str) -> bool:
    if host == "localhost":
        return True
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        return False


class _Table:
    """One TOML table being validated: pops known keys, reports leftovers with did-you-mean."""

    def __init__(self, data: Any, where: str, file: Path) -> None:
        self.where = where
        self.file = file
        if not isinstance(data, dict):
            self.fail(where, f"must be a table, got {type(data).__name__}", f"write it as [{where}]")
        self.data: dict[str, Any] = dict(data)
        self.known: list[str] = []

    def fail(self, key: str, problem: str, fix: str) -> None:
        msg = f"{self.file}: `{key}` {problem}; {fix}"
        raise ConfigError(msg)

    def key(self, name: str) -> str:
        return f"{self.where}.{name}" if self.where else name

    def get(self, name: str, kind: type | tuple[type, ...], default: Any = _MISSING, *, fix: str = "") -> Any:
        self.known.append(name)
        if name not in self.data:
            if default is _MISSING:
                typo = difflib.get_close_matches(name, list(self.data), n=1, cutoff=0.6)
                if typo:
                    self.fail(self.key(typo[0]), f"is not a known key (did you mean {name!r}?)", f"rename it to `{name}`")
                self.fail(self.key(name), "is required but missing", fix or f"add `{name} = ...` to {self.where}")
            return default
        value = self.data.pop(name)
        kinds = kind if isinstance(kind, tuple) else (kind,)
        ok = isinstance(value, kinds) and not (isinstance(value, bool) and bool not in kinds)
        if float in kinds and isinstance(value, int) and not isinstance(value, bool):
            ok = True
            value = float(value)
        if not ok:
            names = " or ".join(k.__name__ for k in kinds)
            self.fail(self.key(name), f"must be {names}, got {value!r}", fix or f"set `{name}` to a {names}")
        return value

    def choice(self, name: str, choices: tuple[str, ...], default: Any = _MISSING) -> Any:
        value = self.get(name, str, default)
        if value is not None and value not in choices:
            self.fail(
                self.key(name),
                f"is {value!r}{_suggest(value, choices)}",
                f"use one of: {', '.join(choices)}",
            )
        return value

    def integer(self, name: str, default: Any = _MISSING, *, minimum: int | None = None) -> Any:
        value = self.get(name, int, default)
        if value is not None and minimum is not None and value < minimum:
            self.fail(self.key(name), f"is {value}, below the minimum {minimum}", f"set `{name}` >= {minimum}")
        return value

    def finish(self) -> None:
        for extra in self.data:
            self.fail(
                self.key(extra),
                f"is not a known key{_suggest(extra, self.known)}",
                f"known keys here: {', '.join(sorted(self.known))}",
            )


def load_config(path: str | Path) -> Config:
    """Read and validate the TOML file at `path`."""
    file = Path(path).expanduser().resolve()
    try:
        raw = file.read_bytes()
    except FileNotFoundError:
        msg = f"config file {str(file)!r} does not exist; pass --config with the path of your TOML file"
        raise ConfigError(msg) from None
    except OSError as exc:
        msg = f"config file {str(file)!r} cannot be read ({exc.strerror}); check its permissions"
        raise ConfigError(msg) from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        msg = f"{file}: not UTF-8 at byte {exc.start}; save the config as UTF-8"
        raise ConfigError(msg) from None
    return load_config_text(text, file)


def load_config_text(text: str, path: str | Path) -> Config:
    """Validate TOML `text` as if read from `path` (relative paths resolve against its folder)."""
    file = Path(path).expanduser().resolve()
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        msg = f"{file}: not valid TOML: {exc}; fix the syntax at that line"
        raise ConfigError(msg) from None
    base = file.parent
    top = _Table(data, "config", file)
    top.where = ""

    def section(name: str) -> _Table:
        value = top.get(name, dict, {})
        return _Table(value, name, file)

    # Known sections first, so leftovers get did-you-mean against all of them.
    warehouse = _load_warehouse(section("warehouse"), base)
    sources_raw = top.get("sources", list, fix="add at least one [[sources]] table")
    universes_raw = top.get("universes", list, fix="add at least one [[universes]] table")
    schedule = _load_schedule(section("schedule"))
    export = _load_export(section("export"), base)
    dashboard = _load_dashboard(section("dashboard"))
    execution = _load_execution(section("execution"))
    for extra in top.data:
        msg = (
            f"{file}: `{extra}` is not a known section{_suggest(extra, top.known)}; "
            f"known sections: {', '.join(sorted(top.known))}"
        )
        raise ConfigError(msg)

    sources = tuple(_load_source(_Table(s, f"sources[{i}]", file), base) for i, s in enumerate(sources_raw))
    if not sources:
        msg = f"{file}: `sources` is empty; add at least one [[sources]] table"
        raise ConfigError(msg)
    _unique(file, "sources", [s.name for s in sources])
    universes = tuple(
        _load_universe(_Table(u, f"universes[{i}]", file)) for i, u in enumerate(universes_raw)
    )
    if not universes:
        msg = f"{file}: `universes` is empty; add at least one [[universes]] table"
        raise ConfigError(msg)
    _unique(file, "universes", [u.name for u in universes])
    return Config(
        path=file,
        warehouse=warehouse,
        sources=sources,
        universes=universes,
        schedule=schedule,
        export=export,
        dashboard=dashboard,
        execution=execution,
    )


def _unique(file: Path, what: str, names: list[str]) -> None:
    seen: set[str] = set()
    for name in names:
        if name in seen:
            msg = f"{file}: two {what} are named {name!r}; give each a unique `name`"
            raise ConfigError(msg)
        seen.add(name)


def _resolve(base: Path, value: str) -> Path:
    return (base / Path(value).expanduser()).resolve()


def _name(t: _Table) -> str:
    name = t.get("name", str)
    if not name.strip() or name != name.strip() or any(c in name for c in "/\\\n\t"):
        t.fail(t.key("name"), f"is {name!r}", "use a non-empty name without slashes or surrounding spaces")
    return name


def _load_warehouse(t: _Table, base: Path) -> WarehouseConfig:
    path = _resolve(base, t.get("path", str, "./shockflow.duckdb"))
    snapshot = _resolve(base, t.get("snapshot", str, "./shockflow-serving.duckdb"))
    t.finish()
    if path == snapshot:
        t.fail("warehouse.snapshot", "is the same file as `warehouse.path`", "give the serving snapshot its own file name")
    return WarehouseConfig(path=path, snapshot=snapshot)


def _load_source(t: _Table, base: Path) -> SourceConfig:
    name = _name(t)
    t.where = f"sources[{name!r}]"
    kind = t.choice("kind", SOURCE_KINDS)
    path = t.get("path", str, None)
    url = t.get("url", str, None)
    query = t.get("query", str, None)
    database = t.get("database", str, None)
    dataset = t.choice("dataset", DEMO_DATASETS, None)
    layout = t.choice("layout", LAYOUTS, "long" if kind == "duckdb_sql" else "wide")
    date_column = t.get("date_column", str, "date")
    date_format = t.get("date_format", str, "%Y-%m-%d")
    series_column = t.get("series_column", str, "series")
    value_column = t.get("value_column", str, "value")
    delimiter = t.get("delimiter", str, ",")
    timeout = t.get("timeout", float, 30.0)
    retries = t.integer("retries", 3, minimum=0)
    backoff = t.get("backoff", float, 1.0)
    external_access = t.get("external_access", bool, False) if kind == "duckdb_sql" else False
    t.finish()
    needs = {"csv": "path", "parquet": "path", "http_csv": "url", "duckdb_sql": "query", "demo": "dataset"}[kind]
    given = {"path": path, "url": url, "query": query, "dataset": dataset}
    if given[needs] is None:
        t.fail(t.key(needs), f"is required for kind = {kind!r}", f"add `{needs} = ...` to this source")
    for other, value in given.items():
        if other != needs and value is not None and not (kind == "duckdb_sql" and other == "path"):
            t.fail(t.key(other), f"is not used by kind = {kind!r}", f"remove it (this kind reads `{needs}`)")
    if kind == "duckdb_sql" and database is None:
        t.fail(t.key("database"), "is required for kind = 'duckdb_sql'", "set it to the DuckDB file the query reads")
    if kind != "duckdb_sql" and database is not None:
        t.fail(t.key("database"), f"is not used by kind = {kind!r}", "remove it")
    if kind == "http_csv" and url is not None and not url.startswith(("http://", "https://")):
        t.fail(t.key("url"), f"is {url!r}", "use an http:// or https:// address")
    if len(delimiter) != 1:
        t.fail(t.key("delimiter"), f"is {delimiter!r}", "use a single character such as ',' or ';'")
    if timeout <= 0:
        t.fail(t.key("timeout"), f"is {timeout}", "use a positive number of seconds")
    if backoff < 0:
        t.fail(t.key("backoff"), f"is {backoff}", "use a non-negative number of seconds")
    if "%" not in date_format:
        t.fail(t.key("date_format"), f"is {date_format!r}", "use strftime codes, e.g. '%Y-%m-%d'")
    resolved_path = str(_resolve(base, path)) if path is not None else None
    if kind == "demo":
        layout = "wide" if dataset == "markets" else "long"
    return SourceConfig(
        name=name,
        kind=kind,
        path=resolved_path,
        url=url,
        query=query,
        database=_resolve(base, database) if database is not None else None,
        dataset=dataset,
        layout=layout,
        date_column=date_column,
        date_format=date_format,
        series_column=series_column,
        value_column=value_column,
        delimiter=delimiter,
        timeout=timeout,
        retries=retries,
        backoff=backoff,
        external_access=external_access,
    )


def _load_universe(t: _Table) -> UniverseConfig:
    name = _name(t)
    t.where = f"universes[{name!r}]"
    transforms = _transform_names()
    transform = t.choice("transform", transforms, "log_return")
    series_raw = t.get("series", list)
    series: list[SeriesSpec] = []
    for i, item in enumerate(series_raw):
        if isinstance(item, str):
            series.append(SeriesSpec(item, transform))
        elif isinstance(item, dict):
            sub = _Table(item, f"{t.where}.series[{i}]", t.file)
            sname = sub.get("name", str)
            stransform = sub.choice("transform", transforms, transform)
            sub.finish()
            series.append(SeriesSpec(sname, stransform))
        else:
            t.fail(t.key(f"series[{i}]"), f"is {item!r}", "use a series name or {name = ..., transform = ...}")
    names = [s.name for s in series]
    if not series:
        t.fail(t.key("series"), "is empty", "list at least one series (two or more for a VAR with spillovers)")
    dupes = sorted({n for n in names if names.count(n) > 1})
    if dupes:
        t.fail(t.key("series"), f"lists {dupes[0]!r} twice", "list each series once")
    frequency = t.choice("frequency", FREQUENCIES, "business_day")
    max_fill_gap = t.integer("max_fill_gap", 3, minimum=0)
    window = t.integer("window", minimum=3)
    step = t.integer("step", 1, minimum=1)
    expanding = t.get("expanding", bool, False)
    lags = t.integer("lags", None, minimum=1)
    sel_raw = t.get("lag_selection", dict, None)
    lag_selection = None
    if sel_raw is not None:
        sub = _Table(sel_raw, f"{t.where}.lag_selection", t.file)
        lag_selection = LagSelection(
            criterion=sub.choice("criterion", CRITERIA),
            max_lags=sub.integer("max_lags", minimum=1),
        )
        sub.finish()
    trend = t.choice("trend", TRENDS, "c")
    horizon = t.integer("horizon", 10, minimum=1)
    identification = t.choice("identification", IDENTIFICATIONS, "generalized")
    order_raw = t.get("cholesky_order", list, None)
    bands_raw = t.get("bands", dict, None)
    bands = Bands()
    if bands_raw is not None:
        sub = _Table(bands_raw, f"{t.where}.bands", t.file)
        bands = Bands(
            method=sub.choice("method", BAND_METHODS, "bootstrap"),
            draws=sub.integer("draws", 200, minimum=10),
            seed=sub.integer("seed", 0, minimum=0),
            coverage=sub.get("coverage", float, 0.9),
        )
        sub.finish()
        if not 0.5 <= bands.coverage < 1:
            t.fail(f"{t.where}.bands.coverage", f"is {bands.coverage}", "use a level in [0.5, 1), e.g. 0.9")
    granger_level = t.get("granger_level", float, 0.05)
    portmanteau_lags = t.integer("portmanteau_lags", None, minimum=1)
    arrays_every = t.integer("arrays_every", 1, minimum=1)
    t.finish()

    if (lags is None) == (lag_selection is None):
        problem = "and `lag_selection` are both set" if lags is not None else "is missing"
        t.fail(t.key("lags"), problem, "set either `lags = 2` or a [universes.lag_selection] table, not both")
    cholesky_order = None
    if order_raw is not None:
        if identification != "cholesky":
            t.fail(t.key("cholesky_order"), "is set but identification is not 'cholesky'", "remove it or set identification = 'cholesky'")
        if sorted(map(str, order_raw)) != sorted(names):
            t.fail(
                t.key("cholesky_order"),
                f"is {order_raw!r}, not an ordering of the universe's series {names!r}",
                "list every series of the universe exactly once",
            )
        cholesky_order = tuple(order_raw)
        # The column order IS the Cholesky order: series are stored in this order.
        by_name = {s.name: s for s in series}
        series = [by_name[name] for name in cholesky_order]
    if not 0 < granger_level < 1:
        t.fail(t.key("granger_level"), f"is {granger_level}", "use a level in (0, 1), e.g. 0.05")
    if bands.method == "asymptotic" and identification != "cholesky":
        t.fail(f"{t.where}.bands.method", "is 'asymptotic', defined for Cholesky responses only", "use 'bootstrap' or identification = 'cholesky'")
    p = lag_selection.max_lags if lag_selection is not None else lags
    assert p is not None
    n = len(series)
    k = n * p + {"n": 0, "c": 1, "ct": 2}[trend]  # regressors per equation
    nobs = window - p
    if nobs - k < n:
        # The estimator needs k + n observations: k coefficients per equation, and n more for a
        # nonsingular n×n residual covariance (the rolling engine's rule).
        t.fail(
            t.key("window"),
            f"= {window} leaves {nobs} observations for {k} coefficients per equation "
            f"({n} series × {p} lags{' + trend' if trend != 'n' else ''}), fewer than the {k + n} needed",
            f"use window >= {p + k + n} (at least {p + 2 * k}, twice the coefficients, is common practice) or fewer lags/series",
        )
    if portmanteau_lags is not None and portmanteau_lags <= p:
        t.fail(t.key("portmanteau_lags"), f"= {portmanteau_lags} must exceed the lag order {p}", f"use portmanteau_lags >= {p + 1}")
    h = portmanteau_lags if portmanteau_lags is not None else max(10, p + 5)
    if h >= nobs:
        t.fail(
            t.key("portmanteau_lags"),
            f"= {h} is not below the {nobs} residuals of a window",
            f"set portmanteau_lags < {nobs} or use a longer window",
        )
    return UniverseConfig(
        name=name,
        series=tuple(series),
        window=window,
        transform=transform,
        frequency=frequency,
        max_fill_gap=max_fill_gap,
        step=step,
        expanding=expanding,
        lags=lags,
        lag_selection=lag_selection,
        trend=trend,
        horizon=horizon,
        identification=identification,
        cholesky_order=cholesky_order,
        bands=bands,
        granger_level=granger_level,
        portmanteau_lags=portmanteau_lags,
        arrays_every=arrays_every,
    )


def _load_schedule(t: _Table) -> ScheduleConfig:
    cron = t.get("cron", str, "0 22 * * 1-5")
    timezone = t.get("timezone", str, "UTC")
    t.finish()
    _check_cron(t, cron)
    try:
        from zoneinfo import ZoneInfo

        ZoneInfo(timezone)
    except Exception:
        t.fail("schedule.timezone", f"is {timezone!r}, not a known IANA time zone", "use a name such as 'UTC' or 'Europe/London'")
    return ScheduleConfig(cron=cron, timezone=timezone)


def _check_cron(t: _Table, cron: str) -> None:
    fields = cron.split()
    if len(fields) != 5:
        t.fail("schedule.cron", f"is {cron!r} with {len(fields)} fields", "use 5 fields: minute hour day-of-month month day-of-week, e.g. '0 22 * * 1-5'")
    try:
        from cronsim import CronSim, CronSimError
    except ImportError:  # pragma: no cover - cronsim ships with prefect
        return
    from datetime import datetime

    try:
        CronSim(cron, datetime(2000, 1, 1))
    except CronSimError as exc:
        t.fail("schedule.cron", f"is {cron!r}: {exc}", "fix the field, e.g. '0 22 * * 1-5' for 22:00 on weekdays")


def _load_export(t: _Table, base: Path) -> ExportConfig:
    directory = _resolve(base, t.get("directory", str, "./exports"))
    formats_raw = t.get("formats", list, ["html", "csv", "parquet"])
    t.finish()
    for f in formats_raw:
        if f not in EXPORT_FORMATS:
            t.fail("export.formats", f"contains {f!r}{_suggest(str(f), EXPORT_FORMATS)}", f"use some of: {', '.join(EXPORT_FORMATS)}")
    return ExportConfig(directory=directory, formats=tuple(dict.fromkeys(formats_raw)))


def _load_dashboard(t: _Table) -> DashboardConfig:
    d = DashboardConfig(
        host=t.get("host", str, "127.0.0.1"),
        port=t.integer("port", 8050, minimum=0),
        workers=t.integer("workers", 2, minimum=1),
        token=t.get("token", str, None),
        username=t.get("username", str, None),
        password=t.get("password", str, None),
        token_env=t.get("token_env", str, None),
        username_env=t.get("username_env", str, None),
        password_env=t.get("password_env", str, None),
    )
    t.finish()
    if d.port > 65535:
        t.fail("dashboard.port", f"is {d.port}", "use a port in 0..65535")
    has_user = bool(d.username or d.username_env)
    has_password = bool(d.password or d.password_env)
    if has_user != has_password:
        t.fail("dashboard.password" if has_user else "dashboard.username", "is missing", "basic auth needs both a username and a password")
    if not d.is_loopback and not (d.token or d.token_env or has_user):
        t.fail(
            "dashboard.host",
            f"is {d.host!r}, reachable from other machines, with no access control",
            "set `token_env` (or `username_env` + `password_env`) or keep host = '127.0.0.1'",
        )
    return d


def _load_execution(t: _Table) -> ExecutionConfig:
    runner = t.choice("runner", RUNNERS, "local")
    address = t.get("address", str, None)
    block_windows = t.integer("block_windows", 1000, minimum=1)
    t.finish()
    if runner == "dask" and address is None:
        t.fail("execution.address", "is required when runner = 'dask'", "use 'local' for an in-process cluster or 'tcp://host:8786'")
    if runner == "local" and address is not None:
        t.fail("execution.address", "is only used when runner = 'dask'", "remove it or set runner = 'dask'")
    if address is not None and address != "local" and not address.startswith(("tcp://", "tls://")):
        t.fail("execution.address", f"is {address!r}", "use 'local' or a scheduler address such as 'tcp://127.0.0.1:8786'")
    return ExecutionConfig(runner=runner, address=address, block_windows=block_windows)


def check_series_coverage(config: Config, available: Mapping[str, set[str]]) -> None:
    """Raise ConfigError naming the first universe series no source provides.

    `available` maps each source name to the set of series it returned (as `shockflow check` reads them).
    """
    provided: set[str] = set().union(*available.values()) if available else set()
    for u in config.universes:
        for s in u.series:
            if s.name not in provided:
                msg = (
                    f"{config.path}: universe {u.name!r} lists series {s.name!r}, which no source "
                    f"provides{_suggest(s.name, sorted(provided))}; fix the name or add a source that has it"
                )
                raise ConfigError(msg)
