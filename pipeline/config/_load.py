"""Reading a config file: every declared key through `read_table`, then the rules between keys.

Every problem of the file is collected and raised at once as one :class:`ConfigError`; a rule
between keys is checked only when the keys it reads are themselves fine, so one mistake is
reported once.
"""

from __future__ import annotations

import difflib
import tomllib
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from arlib import minimum_window
from pipeline._declare import BAD, Problems, read_table, suggest
from pipeline.config._sections import (
    NO_BANDS,
    Config,
    DashboardConfig,
    ExecutionConfig,
    ExportConfig,
    ScheduleConfig,
    SeriesSpec,
    TVPSettings,
    UniverseConfig,
    WarehouseConfig,
)
from pipeline.errors import ConfigError
from pipeline.sources import DEMO_FILES, KINDS, SourceConfig, check_keys
from pipeline.sources._config import check_name
from pipeline.sources._locate import has_scheme

__all__ = ["SECTIONS", "Section", "check_series_coverage", "load_config", "load_config_text"]


@dataclass(frozen=True)
class Section:
    """One top-level section of the file: its TOML name, its declared class, how it is written."""

    name: str
    cls: type
    many: bool = False  # an array of tables ([[sources]])
    note: str = ""
    #: choices known only at run time (from a registry), by key
    choices: Mapping[str, tuple[str, ...]] | None = None

    @property
    def heading(self) -> str:
        return f"[[{self.name}]]" if self.many else f"[{self.name}]"


#: The sections, in the order the README documents them.
SECTIONS: tuple[Section, ...] = (
    Section("warehouse", WarehouseConfig),
    Section("sources", SourceConfig, many=True, note="one table per source",
            choices={"kind": tuple(KINDS), "dataset": tuple(DEMO_FILES)}),
    Section("universes", UniverseConfig, many=True, note="one table per universe"),
    Section("schedule", ScheduleConfig),
    Section("export", ExportConfig),
    Section("dashboard", DashboardConfig),
    Section("execution", ExecutionConfig),
)  # fmt: skip
_BY_NAME = {s.name: s for s in SECTIONS}


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
    """Validate TOML `text` as if read from `path` (relative paths resolve against its folder).

    Raises one ConfigError listing every problem found (``.problems``: one line each).
    """
    file = Path(path).expanduser().resolve()
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        msg = f"{file}: not valid TOML: {exc}; fix the syntax at that line"
        raise ConfigError(msg) from None
    base = file.parent
    problems = Problems(file)
    known = list(_BY_NAME)
    unknown = [k for k in data if k not in _BY_NAME]
    renamed: set[str] = set()
    for name in ("sources", "universes"):
        if name not in data:
            typo = difflib.get_close_matches(name, [k for k in unknown if k not in renamed], n=1, cutoff=0.6)
            if typo:
                renamed.add(typo[0])
                problems.add(typo[0], f"is not a known section (did you mean {name!r}?)", f"rename it to `{name}`")
            else:
                problems.add(name, "is required but missing", f"add at least one [[{name}]] table")
    for extra in unknown:
        if extra not in renamed:
            problems.add(extra, f"is not a known section{suggest(extra, known)}", f"known sections: {', '.join(sorted(known))}")

    def single(name: str, rules: Callable[[dict[str, Any], set[str], Problems], None] | None = None) -> Any:
        section = _BY_NAME[name]
        before = len(problems)
        values, given = read_table(section.cls, data.get(name, {}), name, problems, base=base, choices=section.choices)
        if rules is not None and len(problems) == before:
            rules(values, given, problems)
        return section.cls(**values) if len(problems) == before else None

    warehouse = single("warehouse", _warehouse_rules)
    sources = _many(data, "sources", problems, lambda raw, i: _load_source(raw, i, problems, base))
    universes = _many(data, "universes", problems, lambda raw, i: _load_universe(raw, i, problems, base))
    schedule = single("schedule")
    export = single("export")
    dashboard = single("dashboard", _dashboard_rules)
    execution = single("execution", _execution_rules)
    problems.raise_if_any()
    return Config(
        path=file, warehouse=warehouse, sources=sources, universes=universes, schedule=schedule,
        export=export, dashboard=dashboard, execution=execution,
    )  # fmt: skip


def _many(data: dict[str, Any], name: str, problems: Problems, load: Callable[[Any, int], Any]) -> tuple[Any, ...]:
    if name not in data:
        return ()
    raw = data[name]
    if not isinstance(raw, list):
        problems.add(name, f"must be list, got {raw!r}", f"add at least one [[{name}]] table")
        return ()
    if not raw:
        problems.add(name, "is empty", f"add at least one [[{name}]] table")
        return ()
    items = tuple(load(item, i) for i, item in enumerate(raw))
    seen: set[str] = set()
    for item in items:
        if item is None:
            continue
        if item.name in seen:
            problems.add(None, f"two {name} are named {item.name!r}", "give each a unique `name`")
        seen.add(item.name)
    return items


def _where(raw: Any, section: str, i: int) -> str:
    """`sources['name']` once the name is good, else `sources[i]`."""
    name = raw.get("name") if isinstance(raw, dict) else None
    if isinstance(name, str) and check_name(name) is None:
        return f"{section}[{name!r}]"
    return f"{section}[{i}]"


def _bad(values: dict[str, Any], *keys: str) -> bool:
    """True when any of `keys` was set in the file but had a problem (or a required one is absent)."""
    return any(k not in values for k in keys)


# --------------------------------------------------------------------------------------------
# rules between keys, per section
# --------------------------------------------------------------------------------------------


def _warehouse_rules(v: dict[str, Any], given: set[str], problems: Problems) -> None:
    if v["path"] == v["snapshot"]:
        problems.add("warehouse.snapshot", "is the same file as `warehouse.path`", "give the serving snapshot its own file name")


def _load_source(raw: Any, i: int, problems: Problems, base: Path) -> SourceConfig | None:
    where = _where(raw, "sources", i)
    before = len(problems)
    section = _BY_NAME["sources"]
    v, given = read_table(SourceConfig, raw, where, problems, base=base, choices=section.choices)
    if len(problems) > before or "kind" not in v:
        return None
    kind = v["kind"]
    for key, problem, fix in check_keys(kind, v):
        problems.add(f"{where}.{key}", problem, fix)
    if len(problems) > before:
        return None
    if v["path"] is not None and not has_scheme(v["path"]):  # an address (s3://, https://) stays as written
        v["path"] = str((base / Path(v["path"]).expanduser()).resolve())
    if kind in ("duckdb_sql", "sql") and "layout" not in given:
        v["layout"] = "long"
    if kind == "demo":
        v["layout"] = DEMO_FILES[v["dataset"]][1]
    return SourceConfig(**v)


def _load_universe(raw: Any, i: int, problems: Problems, base: Path) -> UniverseConfig | None:
    where = _where(raw, "universes", i)
    before = len(problems)

    def parse_series(value: Any, key: str, v: dict[str, Any]) -> Any:
        transform = v.get("transform", "log_return")
        if not isinstance(value, list):
            problems.add(key, f"must be list, got {value!r}", "set `series` to a list of series names")
            return BAD
        series: list[SeriesSpec] = []
        ok = True
        for j, item in enumerate(value):
            if isinstance(item, str):
                series.append(SeriesSpec(item, transform))
            elif isinstance(item, dict):
                n_before = len(problems)
                named = item.get("name")
                at = f"{key}[{named!r}]" if isinstance(named, str) and named else f"{key}[{j}]"
                sv, _ = read_table(SeriesSpec, {"transform": transform, **item}, at, problems, base=base)
                if len(problems) == n_before:
                    series.append(SeriesSpec(**sv))
                else:
                    ok = False
            else:
                problems.add(f"{key}[{j}]", f"is {item!r}", "use a series name or {name = ..., transform = ..., aggregate = ...}")
                ok = False
        if not ok:
            return BAD
        names = [s.name for s in series]
        if not series:
            problems.add(key, "is empty", "list at least one series (two or more for a VAR with spillovers)")
            return BAD
        dupes = sorted({n for n in names if names.count(n) > 1})
        if dupes:
            problems.add(key, f"lists {dupes[0]!r} twice", "list each series once")
            return BAD
        return tuple(series)

    v, given = read_table(UniverseConfig, raw, where, problems, base=base, parsers={"series": parse_series})
    if not isinstance(raw, dict):
        return None

    def key(name: str) -> str:
        return f"{where}.{name}"

    lags, sel = v.get("lags"), v.get("lag_selection")
    lags_ok = not _bad(v, "lags", "lag_selection")
    if lags_ok and (lags is None) == (sel is None):
        problem = "and `lag_selection` are both set" if lags is not None else "is missing"
        problems.add(key("lags"), problem, "set either `lags = 2` or a [universes.lag_selection] table, not both")
        lags_ok = False
    order = v.get("cholesky_order")
    if order is not None and not _bad(v, "identification") and v["identification"] != "cholesky":
        problems.add(key("cholesky_order"), "is set but identification is not 'cholesky'", "remove it or set identification = 'cholesky'")
    if order is not None and not _bad(v, "series"):
        names = [s.name for s in v["series"]]
        if sorted(order) != sorted(names):
            problems.add(
                key("cholesky_order"),
                f"is {list(order)!r}, not an ordering of the universe's series {names!r}",
                "list every series of the universe exactly once",
            )
        else:
            # The column order IS the Cholesky order: series are stored in this order.
            by_name = {s.name: s for s in v["series"]}
            v["series"] = tuple(by_name[name] for name in order)
    bands = v.get("bands", NO_BANDS)
    if bands.method == "asymptotic" and not _bad(v, "identification") and v["identification"] != "cholesky":
        problems.add(f"{where}.bands.method", "is 'asymptotic', defined for Cholesky responses only", "use 'bootstrap' or identification = 'cholesky'")
    if v.get("model") == "tvp":
        lags_ok = _tvp_rules(v, given, where, problems) and lags_ok
    else:
        if "tvp" in given:
            problems.add(key("tvp"), "is set but model is not 'tvp'", 'remove the [universes.tvp] table or set model = "tvp"')
        typo = difflib.get_close_matches("window", [k for k in raw if k not in given], n=1, cutoff=0.6)
        if "window" in v and v["window"] is None and not typo:  # a misspelt window is reported as such
            problems.add(key("window"), "is required but missing", f"add `window = 250` (rows per window) to {where}, or set model = \"tvp\"")
    if v.get("estimator") == "quantile":
        lags_ok = _quantile_rules(v, given, where, problems) and lags_ok
    elif "quantile" in given:
        problems.add(key("quantile"), "is set but estimator is not 'quantile'", 'remove the [universes.quantile] table or set estimator = "quantile"')
    shrink = v.get("estimator") == "shrinkage"
    if shrink:
        lags_ok = _shrinkage_rules(v, where, problems) and lags_ok
    elif "shrinkage" in given:
        problems.add(key("shrinkage"), "is set but estimator is not 'shrinkage'", 'remove the [universes.shrinkage] table or set estimator = "shrinkage"')
    if lags_ok and v.get("model") != "tvp" and not _bad(v, "series", "window", "trend") and v["window"] is not None:
        if shrink:
            p = v["lags"]
            if v["window"] < p + 4:
                problems.add(key("window"), f"= {v['window']} leaves {v['window'] - p} observations, too few for the shrinkage prior's AR(1) scales", f"use window >= {p + 4}")
        else:
            _window_rules(v, where, problems)
    if len(problems) > before:
        return None
    return UniverseConfig(**v)


def _shrinkage_rules(v: dict[str, Any], where: str, problems: Problems) -> bool:
    """The rules of an `estimator = "shrinkage"` universe; False when `lags` cannot be used for the row rule."""
    ok = True
    if v.get("model") == "tvp":
        problems.add(f"{where}.estimator", 'is "shrinkage" but model is "tvp" (the filter has its own prior)', 'use model = "rolling" with estimator = "shrinkage"')
        ok = False
    if v.get("lag_selection") is not None:
        problems.add(f"{where}.lag_selection", "cannot choose p per window with estimator = \"shrinkage\" (the prior shrinks distant lags instead)", "set a fixed `lags = 2` instead")
        ok = False
    if v.get("trend") == "ct":
        problems.add(f"{where}.trend", 'is "ct": the shrinkage VAR has an intercept (flat prior) or none', 'use trend = "c" or "n" with estimator = "shrinkage"')
        ok = False
    if v.get("expanding"):
        problems.add(f"{where}.expanding", 'is true: the shrinkage engine fits rolling windows only', 'remove `expanding` or use estimator = "ols"')
    bands = v.get("bands", NO_BANDS)
    if bands.method != "none":
        problems.add(
            f"{where}.bands.method", f"is {bands.method!r}: response bands are least-squares bands",
            'remove the [universes.bands] table of an estimator = "shrinkage" universe',
        )
    return ok


def _tvp_rules(v: dict[str, Any], given: set[str], where: str, problems: Problems) -> bool:
    """The rules of a `model = "tvp"` universe; False when `lags` cannot be used for the row rule."""
    unused = [k for k in ("window", "step", "expanding", "arrays_every") if k in given]
    for k in unused:
        problems.add(
            f"{where}.{k}", 'is not used by a model = "tvp" universe (the filter gives one result per date, no window)',
            f"remove `{k}`; the filter's first rows are set by [universes.tvp] training",
        )
    ok = True
    if v.get("lag_selection") is not None:
        problems.add(f"{where}.lag_selection", 'cannot choose p per date in a model = "tvp" universe', "set a fixed `lags = 2` instead")
        ok = False
    if v.get("trend") == "ct":
        problems.add(f"{where}.trend", 'is "ct": a linear trend has no meaning with drifting coefficients', 'use trend = "c" or "n" with model = "tvp"')
        ok = False
    bands = v.get("bands", NO_BANDS)
    if bands.method != "none":
        problems.add(
            f"{where}.bands.method", f"is {bands.method!r}: response bands refit a window, and a filtered date has none",
            'remove the [universes.bands] table of a model = "tvp" universe',
        )
    training = v["tvp"].training if isinstance(v.get("tvp"), TVPSettings) else None
    if ok and training is not None and not _bad(v, "series", "lags", "trend") and v.get("lags") is not None:
        n, p, trend = len(v["series"]), v["lags"], v["trend"]
        need = minimum_window(n, p, trend)
        if training < need:
            problems.add(
                f"{where}.tvp.training",
                f"= {training} rows cannot give a least-squares prior for {n} series × {p} lags{' + intercept' if trend != 'n' else ''}",
                f"use training >= {need} (p + k + n), or leave it out for the default max(p + k + n, 4·k)",
            )
    return ok


def _quantile_rules(v: dict[str, Any], given: set[str], where: str, problems: Problems) -> bool:
    """The rules of an `estimator = "quantile"` universe; False when `lags` cannot be used for the row rule."""
    ok = True
    if v.get("model") == "tvp":
        problems.add(f"{where}.estimator", 'is "quantile", which fits rolling windows, but model is "tvp"', 'use model = "rolling" (the default) or estimator = "ols"')
        ok = False
    if v.get("lag_selection") is not None:
        problems.add(f"{where}.lag_selection", "cannot choose p per window for quantile fits (criteria are least-squares ones)", "set a fixed `lags = 2` instead")
        ok = False
    if v.get("trend") == "ct":
        problems.add(f"{where}.trend", 'is "ct": quantile universes take trend "c" or "n"', 'use trend = "c" with estimator = "quantile"')
        ok = False
    if v.get("expanding"):
        problems.add(f"{where}.expanding", "is true: quantile fits use rolling windows only", 'remove `expanding` or use estimator = "ols"')
    if v.get("bands", NO_BANDS).method != "none":
        problems.add(f"{where}.bands.method", f"is {v['bands'].method!r}: response bands are least-squares ones, not defined for quantile fits", 'remove the [universes.bands] table of an estimator = "quantile" universe')
    for k, what in (("frequency_bands", "frequency-band connectedness"), ("joint", "joint connectedness")):
        if k in given and v.get(k):
            problems.add(f"{where}.{k}", f"is set, but {what} is not computed for quantile fits", f'remove `{k}` or use estimator = "ols"')
    return ok


def _window_rules(v: dict[str, Any], where: str, problems: Problems) -> None:
    p = v["lag_selection"].max_lags if v["lag_selection"] is not None else v["lags"]
    n, trend, window = len(v["series"]), v["trend"], v["window"]
    need = minimum_window(n, p, trend)  # p + k + n: arlib's rule, the one the rolling engine applies
    k = need - p - n  # regressors per equation
    nobs = window - p
    if window < need:
        problems.add(
            f"{where}.window",
            f"= {window} leaves {nobs} observations for {k} coefficients per equation "
            f"({n} series × {p} lags{' + trend' if trend != 'n' else ''}), fewer than the {k + n} needed",
            f"use window >= {need} (at least {p + 2 * k}, twice the coefficients, is common practice) or fewer lags/series",
        )
        return
    h = v.get("portmanteau_lags")
    if h is not None and h <= p:
        problems.add(f"{where}.portmanteau_lags", f"= {h} must exceed the lag order {p}", f"use portmanteau_lags >= {p + 1}")
        return
    h = h if h is not None else max(10, p + 5)
    if h >= nobs:
        problems.add(
            f"{where}.portmanteau_lags",
            f"= {h} is not below the {nobs} residuals of a window",
            f"set portmanteau_lags < {nobs} or use a longer window",
        )


def _dashboard_rules(v: dict[str, Any], given: set[str], problems: Problems) -> None:
    d = DashboardConfig(**v)
    has_user = bool(d.username or d.username_env)
    has_password = bool(d.password or d.password_env)
    if has_user != has_password:
        missing = "dashboard.password" if has_user else "dashboard.username"
        problems.add(missing, "is missing", "basic auth needs both a username and a password")
    elif not d.is_loopback and not (d.token or d.token_env or has_user):
        problems.add(
            "dashboard.host",
            f"is {d.host!r}, reachable from other machines, with no access control",
            "set `token_env` (or `username_env` + `password_env`) or keep host = '127.0.0.1'",
        )


def _execution_rules(v: dict[str, Any], given: set[str], problems: Problems) -> None:
    runner, address = v["runner"], v["address"]
    if runner == "dask" and address is None:
        problems.add("execution.address", "is required when runner = 'dask'", "use 'local' for an in-process cluster or 'tcp://host:8786'")
    elif runner == "local" and address is not None:
        problems.add("execution.address", "is only used when runner = 'dask'", "remove it or set runner = 'dask'")
    elif address is not None and address != "local" and not address.startswith(("tcp://", "tls://")):
        problems.add("execution.address", f"is {address!r}", "use 'local' or a scheduler address such as 'tcp://127.0.0.1:8786'")


def check_series_coverage(config: Config, available: Mapping[str, set[str]]) -> None:
    """Raise ConfigError naming the first universe series no source provides.

    `available` maps each source name to the set of series it returned (as `shockflow check` reads
    them). One line, so `shockflow check` can add which unread sources might provide it.
    """
    provided: set[str] = set().union(*available.values()) if available else set()
    for u in config.universes:
        for s in u.series:
            if s.name not in provided:
                msg = (
                    f"{config.path}: universe {u.name!r} lists series {s.name!r}, which no source "
                    f"provides{suggest(s.name, sorted(provided))}; fix the name or add a source that has it"
                )
                raise ConfigError(msg)
