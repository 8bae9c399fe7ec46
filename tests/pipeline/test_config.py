"""Config loading: valid files, defaults, path resolution, hashes, and every kind of bad input."""

from __future__ import annotations

import dataclasses
import re
from pathlib import Path

import pytest

from pipeline.config import check_series_coverage, load_config, load_config_text
from pipeline.errors import ConfigError
from tests.pipeline.helpers import MINIMAL, minimal_config, write_config


def test_minimal_config_defaults_and_paths(tmp_path: Path) -> None:
    cfg = minimal_config(tmp_path)
    assert cfg.warehouse.path == tmp_path / "wh.duckdb"
    assert cfg.warehouse.snapshot == tmp_path / "serving.duckdb"
    src = cfg.sources[0]
    assert src.path == str(tmp_path / "prices.csv")
    assert (src.layout, src.date_column, src.date_format) == ("wide", "date", "%Y-%m-%d")
    u = cfg.universes[0]
    assert u.names == ("A", "B")
    assert [s.transform for s in u.series] == ["log_return", "log_return"]
    assert (u.frequency, u.step, u.trend, u.horizon, u.identification) == ("business_day", 1, "c", 10, "generalized")
    assert cfg.schedule.cron == "0 22 * * 1-5"
    assert cfg.export.directory == tmp_path / "exports"
    assert cfg.dashboard.host == "127.0.0.1"
    assert cfg.execution.runner == "local"


def test_config_is_frozen_and_compares_by_value(tmp_path: Path) -> None:
    a = minimal_config(tmp_path)
    b = minimal_config(tmp_path)
    assert a == b
    assert hash(a.universes[0]) == hash(b.universes[0])
    with pytest.raises(dataclasses.FrozenInstanceError):
        a.universes[0].window = 10  # type: ignore[misc]  # frozen, written on purpose
    assert "UniverseConfig(name='pair'" in repr(a.universes[0])


def test_secrets_do_not_show_in_repr(tmp_path: Path) -> None:
    cfg = minimal_config(tmp_path, '[dashboard]\ntoken = "s3cret-value"\n')
    assert "s3cret-value" not in repr(cfg)
    assert cfg.dashboard.credentials({})["token"] == "s3cret-value"


def test_dashboard_credentials_from_named_variables(tmp_path: Path) -> None:
    cfg = minimal_config(tmp_path, '[dashboard]\nhost = "0.0.0.0"\ntoken_env = "SF_TOKEN"\n')
    assert cfg.dashboard.credentials({"SF_TOKEN": "abc"})["token"] == "abc"
    assert cfg.dashboard.credentials({})["token"] is None


def test_series_tables_with_own_transform(tmp_path: Path) -> None:
    cfg = load_config(
        write_config(
            tmp_path,
            MINIMAL.replace('series = ["A", "B"]', 'series = ["A", {name = "B", transform = "diff"}]\ntransform = "pct_change"'),
        )
    )
    assert [(s.name, s.transform) for s in cfg.universes[0].series] == [("A", "pct_change"), ("B", "diff")]


def test_config_hash_is_stable_and_tracks_fit_settings(tmp_path: Path) -> None:
    base = minimal_config(tmp_path).universes[0]
    same = minimal_config(tmp_path).universes[0]
    assert base.config_hash == same.config_hash and len(base.config_hash) == 16
    renamed = dataclasses.replace(base, name="other")
    assert renamed.config_hash == base.config_hash  # the name is not a fitting setting
    for change in ({"window": 41}, {"step": 2}, {"horizon": 5}, {"trend": "ct"}, {"granger_level": 0.1}):
        assert dataclasses.replace(base, **change).config_hash != base.config_hash, change


@pytest.mark.parametrize(
    ("old", "new", "expected"),
    [
        ('window = 40', 'windw = 40', r"`universes\['pair'\].windw` is not a known key \(did you mean 'window'\?\)"),
        ('[warehouse]', '[warehous]', r"`warehous` is not a known section \(did you mean 'warehouse'\?\)"),
        ('kind = "csv"', 'kind = "cvs"', r"`sources\['prices'\].kind` is 'cvs' \(did you mean 'csv'\?\); use one of"),
        ('lags = 1', 'lags = 1\ntrend = "linear"', r"`universes\['pair'\].trend` is 'linear'.*use one of: n, c, ct"),
        ('window = 40', 'window = "40"', r"`universes\['pair'\].window` must be int, got '40'"),
        ('window = 40', '', r"`universes\['pair'\].window` is required but missing"),
        ('lags = 1', '', r"`universes\['pair'\].lags` is missing; set either `lags = 2` or a \[universes.lag_selection\]"),
        ('lags = 1', 'lags = 1\n[universes.lag_selection]\ncriterion = "aic"\nmax_lags = 4', r"lags` and `lag_selection` are both set"),
        ('path = "prices.csv"', '', r"`sources\['prices'\].path` is required for kind = 'csv'"),
        ('series = ["A", "B"]', 'series = ["A", "A"]', r"lists 'A' twice"),
        ('lags = 1', 'lags = 1\ntransform = "logret"', r"`universes\['pair'\].transform` is 'logret'.*use one of: log_return"),
        ('lags = 1', 'lags = 1\nidentification = "cholesky"\ncholesky_order = ["A", "C"]', r"not an ordering of the universe's series"),
    ],
)
def test_bad_keys_name_key_file_and_fix(tmp_path: Path, old: str, new: str, expected: str) -> None:
    assert old in MINIMAL
    path = write_config(tmp_path, MINIMAL.replace(old, new, 1))
    with pytest.raises(ConfigError, match=expected) as info:
        load_config(path)
    assert str(path) in str(info.value)
    assert "\n" not in str(info.value)


def test_window_too_short_for_lags_times_series(tmp_path: Path) -> None:
    text = MINIMAL.replace('series = ["A", "B"]', 'series = ["A", "B", "C", "D", "E"]').replace("window = 40", "window = 20").replace("lags = 1", "lags = 4")
    # 5 series × 4 lags + intercept = 21 coefficients per equation; window 20 leaves 16 observations,
    # and the estimator needs k + n = 26 (n more for a nonsingular residual covariance).
    with pytest.raises(ConfigError, match=r"window` = 20 leaves 16 observations for 21 coefficients per equation .*fewer than the 26 needed; use window >= 30"):
        load_config_text(text, tmp_path / "c.toml")


def test_missing_sections_and_empty_lists(tmp_path: Path) -> None:
    with pytest.raises(ConfigError, match=r"`sources` is required but missing; add at least one \[\[sources\]\]"):
        load_config_text("[[universes]]\nname='u'\nseries=['A']\nwindow=30\nlags=1\n", tmp_path / "c.toml")
    with pytest.raises(ConfigError, match="not valid TOML"):
        load_config_text("[[sources]\n", tmp_path / "c.toml")
    with pytest.raises(ConfigError, match="does not exist; pass --config"):
        load_config(tmp_path / "nope.toml")


def test_not_utf8_config(tmp_path: Path) -> None:
    path = tmp_path / "c.toml"
    path.write_bytes(b"# caf\xe9\n")
    with pytest.raises(ConfigError, match="not UTF-8 at byte 5"):
        load_config(path)


@pytest.mark.parametrize(
    ("section", "expected"),
    [
        ('[schedule]\ncron = "0 25 * * *"', r"`schedule.cron` is '0 25 \* \* \*'"),
        ('[schedule]\ncron = "every night"', r"`schedule.cron` is 'every night' with 2 fields; use 5 fields"),
        ('[schedule]\ntimezone = "Mars/Olympus"', r"not a known IANA time zone"),
        ('[export]\nformats = ["html", "docx"]', r"`export.formats` contains 'docx'"),
        ('[dashboard]\nhost = "0.0.0.0"', r"reachable from other machines, with no access control"),
        ('[dashboard]\nusername = "ann"', r"`dashboard.password` is missing"),
        ('[execution]\nrunner = "dask"', r"`execution.address` is required when runner = 'dask'"),
        ('[execution]\nrunner = "dask"\naddress = "10.0.0.1:8786"', r"use 'local' or a scheduler address"),
    ],
)
def test_bad_sections(tmp_path: Path, section: str, expected: str) -> None:
    with pytest.raises(ConfigError, match=expected):
        load_config_text(MINIMAL + section + "\n", tmp_path / "c.toml")


def test_series_no_source_provides(tmp_path: Path) -> None:
    cfg = minimal_config(tmp_path)
    check_series_coverage(cfg, {"prices": {"A", "B", "C"}})
    with pytest.raises(ConfigError, match=r"universe 'pair' lists series 'B', which no source provides \(did you mean 'BB'\?\)"):
        check_series_coverage(cfg, {"prices": {"A", "BB"}})


def test_universe_lookup_did_you_mean(tmp_path: Path) -> None:
    cfg = minimal_config(tmp_path)
    assert cfg.universe("pair").name == "pair"
    with pytest.raises(ConfigError, match=r"no universe named 'pari' \(did you mean 'pair'\?\)"):
        cfg.universe("pari")


def test_cholesky_order_sets_the_column_order(tmp_path: Path) -> None:
    text = MINIMAL.replace("lags = 1", 'lags = 1\nidentification = "cholesky"\ncholesky_order = ["B", "A"]')
    u = load_config_text(text, tmp_path / "c.toml").universes[0]
    assert u.names == ("B", "A") and u.cholesky_order == ("B", "A")


# Fit hashes of unchanged configs: a changed hash makes every warehouse refit every window. The
# literal values were computed by the code at commit fab1d34 (the config module before settings were
# declared once) on these very texts; a refactor of the loader must reproduce them exactly.
_DEMO = Path(__file__).resolve().parents[2] / "data_samples" / "demo.toml"
_PINNED_EXTRA = """
[[universes]]
name = "chol"
series = ["A", {name = "B", transform = "diff"}, "C"]
transform = "pct_change"
frequency = "monthly"
max_fill_gap = 0
window = 60
step = 3
lags = 2
trend = "ct"
horizon = 12
identification = "cholesky"
cholesky_order = ["C", "A", "B"]
granger_level = 0.1
portmanteau_lags = 7
arrays_every = 5
[universes.bands]
method = "asymptotic"
coverage = 0.95

[[universes]]
name = "sel"
series = ["A", "B"]
window = 80
expanding = true
trend = "n"
[universes.lag_selection]
criterion = "aic"
max_lags = 6
[universes.bands]
"""


def test_fit_hash_of_existing_configs_is_unchanged(tmp_path: Path) -> None:
    demo = {u.name: u.config_hash for u in load_config(_DEMO).universes}
    # all_markets' settings changed on purpose (frequency_bands and joint added to the demo in
    # c4fe67c: 2724928f8ce9058f before); all_markets_tvp, equities_tails (estimator = "quantile")
    # and sector_40 (estimator = "shrinkage") are new. The other two are pinned as before.
    assert demo == {"all_markets": "20ecf2e082d41a14", "all_markets_tvp": "f09a68e721b06780",
                    "equities_tails": "71b898ce53856459", "sector_40": "650ff836cd2186d7",
                    "rates_fx": "641ce7f2e387a726", "equities_weekly": "942c05c6b427c4f9"}  # fmt: skip
    other = {u.name: u.config_hash for u in load_config_text(MINIMAL + _PINNED_EXTRA, tmp_path / "c.toml").universes}
    assert other == {"pair": "648e2940618b97be", "chol": "2e44e2d08d7be155", "sel": "2b37c38e3c458c29"}
    # the stored `config_json` (warehouse table `universes`) is the same document as before
    sel = load_config_text(MINIMAL + _PINNED_EXTRA, tmp_path / "c.toml").universe("sel").fit_settings()
    assert sel == {
        "arrays_every": 1, "bands": {"coverage": 0.9, "draws": 200, "method": "bootstrap", "seed": 0},
        "cholesky_order": None, "expanding": True, "format": 2, "frequency": "business_day",
        "granger_level": 0.05, "horizon": 10, "identification": "generalized",
        "lag_selection": {"criterion": "aic", "max_lags": 6}, "lags": None, "max_fill_gap": 3,
        "portmanteau_lags": 11, "series": [["A", "log_return"], ["B", "log_return"]], "step": 1,
        "trend": "n", "window": 80,
    }  # fmt: skip


# --------------------------------------------------------------------------------------------
# settings declared once
# --------------------------------------------------------------------------------------------

_README = Path(__file__).resolve().parents[2] / "README.md"


def test_readme_configuration_tables_match_the_declarations() -> None:
    from pipeline.config.readme import render, update

    text = _README.read_text(encoding="utf-8")
    assert update(text) == text, "README's configuration tables are stale: run `python -m pipeline.config.readme`"
    # every declared key has its row, and a README that lost or changed a row is caught
    block = render()
    for row in ("| `window` | required (rolling) | yes |", "| `transform` | `log_return` | yes (via `series`) |",
                "| `name` | required | no |", "| `kind` | required | `csv`, `parquet`, `excel`, `http_csv`, `sql`, `duckdb_sql`, `demo` |",
                "| `workers` | 2 |", "| `bands.draws` | 200 | yes |"):  # fmt: skip
        assert row in block, row
    stale = text.replace("| `step` | 1 | yes | rows between window ends |\n", "")
    assert stale != text and update(stale) != stale


def test_every_problem_of_a_file_is_reported_at_once(tmp_path: Path) -> None:
    text = (
        MINIMAL.replace('kind = "csv"', 'kind = "cvs"')
        .replace("window = 40", "windw = 40")
        .replace("lags = 1", 'lags = 1\ntrend = "linear"')
        + '\n[[universes]]\nname = "short"\nseries = ["A", "B", "C"]\nwindow = 6\nlags = 1\n'
        + '\n[schedule]\ncron = "0 25 * * *"\n[dashboard]\nport = 70000\nworkrs = 2\n[exprt]\n'
    )
    path = write_config(tmp_path, text)
    with pytest.raises(ConfigError) as info:
        load_config(path)
    expected = [
        r"`exprt` is not a known section \(did you mean 'export'\?\); known sections: .*",
        r"`sources\['prices'\]\.kind` is 'cvs' \(did you mean 'csv'\?\); use one of: csv, parquet, excel, http_csv, sql, duckdb_sql, demo",
        r"`universes\['pair'\]\.trend` is 'linear'; use one of: n, c, ct",
        # `window` is optional (a tvp universe has none), so a misspelling reads as an unknown key
        r"`universes\['pair'\]\.windw` is not a known key \(did you mean 'window'\?\); rename it to `window`",
        r"`universes\['short'\]\.window` = 6 leaves 5 observations for 4 coefficients per equation .*use window >= 8 .*",
        r"`schedule\.cron` is '0 25 \* \* \*': .*; fix the field, .*",
        r"`dashboard\.port` is 70000; use a port in 0\.\.65535",
        r"`dashboard\.workrs` is not a known key \(did you mean 'workers'\?\); rename it to `workers`",
    ]
    problems = info.value.problems
    assert len(problems) == len(expected), problems
    for line, pattern in zip(problems, expected, strict=True):
        assert re.fullmatch(re.escape(f"{path}: ") + pattern, line), line
    # the message lists them one a line under one heading naming the file
    message = str(info.value).splitlines()
    assert message[0] == f"{path}: {len(expected)} problems, each to fix:"
    assert [m.removeprefix("  - ") for m in message[1:]] == [p.removeprefix(f"{path}: ") for p in problems]


def test_a_rule_between_keys_is_skipped_when_its_keys_are_wrong(tmp_path: Path) -> None:
    # `window` is not a number: one problem, not a second one from the window-vs-lags rule
    with pytest.raises(ConfigError) as info:
        load_config_text(MINIMAL.replace("window = 40", 'window = "40"'), tmp_path / "c.toml")
    assert len(info.value.problems) == 1 and "\n" not in str(info.value)


def test_a_new_declared_key_enters_the_fit_hash_unless_marked(tmp_path: Path) -> None:
    from dataclasses import dataclass

    from pipeline._declare import Problems, read_table, setting
    from pipeline.config import UniverseConfig

    @dataclass(frozen=True)
    class Extended(UniverseConfig):  # a synthetic declaration, as a contributor would add one
        ridge: float = setting(0.0, doc="synthetic: changes the estimates")
        caption: str = setting("", doc="synthetic: display only", fit=False)

    base = minimal_config(tmp_path).universes[0]
    fields = {f.name: getattr(base, f.name) for f in dataclasses.fields(base)}
    ext = Extended(**fields)
    assert ext.fit_settings() == {**base.fit_settings(), "ridge": 0.0}
    assert dataclasses.replace(ext, ridge=0.5).config_hash != ext.config_hash
    assert dataclasses.replace(ext, caption="for the board").config_hash == ext.config_hash
    # the loader reads the new key by its declaration, with its type check
    problems = Problems(tmp_path / "c.toml")
    values, given = read_table(Extended, {"ridge": 1, "caption": 3}, "universes['u']", problems, base=tmp_path)
    assert values["ridge"] == 1.0 and given == {"ridge", "caption"}
    assert [p for p in problems.items if "required but missing" not in p] == [
        f"{tmp_path / 'c.toml'}: `universes['u'].caption` must be str, got 3; set `caption` to a str"
    ]
    # ... and the README table gets its row, saying whether a change refits
    from pipeline.config import Section
    from pipeline.config.readme import _table

    rows = _table(Section("universes", Extended, many=True))
    assert "| `ridge` | 0.0 | yes | synthetic: changes the estimates |" in rows
    assert "| `caption` | `` | no | synthetic: display only |" in rows


@pytest.mark.parametrize(("n", "lags", "trend"), [(2, 1, "c"), (3, 4, "ct"), (5, 2, "n")])
def test_minimum_window_is_the_rolling_engines_rule(tmp_path: Path, n: int, lags: int, trend: str) -> None:
    import numpy as np

    from arlib import InvalidInputError, minimum_window, rolling_var

    need = minimum_window(n, lags, trend)
    assert need == lags + (len(trend.replace("n", "")) + n * lags) + n  # p + k + n, k = d + n·p
    names = [f"S{i}" for i in range(n)]
    text = MINIMAL.replace('series = ["A", "B"]', f"series = {names!r}\ntrend = {trend!r}").replace("lags = 1", f"lags = {lags}\nportmanteau_lags = {lags + 1}")
    assert load_config_text(text.replace("window = 40", f"window = {need}"), tmp_path / "c.toml").universes[0].window == need
    with pytest.raises(ConfigError, match=rf"use window >= {need} "):
        load_config_text(text.replace("window = 40", f"window = {need - 1}"), tmp_path / "c.toml")
    y = np.random.default_rng(0).standard_normal((need + 3, n))
    assert len(rolling_var(y, need, lags, horizon=2, trend=trend, step=1)) == 4
    with pytest.raises(InvalidInputError, match=rf"use window >= {need} "):
        rolling_var(y, need - 1, lags, horizon=2, trend=trend)


def test_config_names_come_from_the_registries(tmp_path: Path) -> None:
    from pipeline.config import FREQUENCIES
    from pipeline.prepare import CALENDARS
    from pipeline.sources import KINDS, READERS

    assert FREQUENCIES == tuple(CALENDARS) and tuple(READERS) == tuple(KINDS)
    # each kind's location key comes from the registry: a demo source names a dataset, not a path
    text = MINIMAL.replace('kind = "csv"\npath = "prices.csv"', 'kind = "demo"\npath = "prices.csv"')
    with pytest.raises(ConfigError) as info:
        load_config_text(text, tmp_path / "c.toml")
    assert [p.split(": ", 1)[1] for p in info.value.problems] == [
        "`sources['prices'].dataset` is required for kind = 'demo'; add `dataset = ...` to this source",
        "`sources['prices'].path` is not used by kind = 'demo'; remove it (this kind reads `dataset`)",
    ]


def test_prepare_and_the_sources_do_not_import_the_config() -> None:
    # config imports them (for transform, calendar and kind names); the reverse would be a cycle,
    # even as a typing-only or in-function import
    import ast

    root = Path(__file__).resolve().parents[2] / "pipeline"
    files = [root / "prepare.py", *sorted((root / "sources").glob("*.py"))]
    for file in files:
        for node in ast.walk(ast.parse(file.read_text(encoding="utf-8"))):
            names = (
                [node.module or ""] if isinstance(node, ast.ImportFrom)
                else [a.name for a in node.names] if isinstance(node, ast.Import) else []
            )  # fmt: skip
            assert not any(n == "pipeline.config" or n.startswith("pipeline.config.") for n in names), file


def test_new_connectedness_keys_refit_only_when_set(tmp_path: Path) -> None:
    """frequency_bands / band_truncation / joint: absent keeps an existing universe's hash (no
    refit of a warehouse made before the keys existed); set, they change it."""
    base = minimal_config(tmp_path).universes[0]
    assert "frequency_bands" not in base.fit_settings() and "joint" not in base.fit_settings()
    bands = dataclasses.replace(base, frequency_bands=(5.0, 20.0))
    assert bands.config_hash != base.config_hash
    assert bands.band_periods == ((1.0, 5.0), (5.0, 20.0), (20.0, float("inf")))
    assert dataclasses.replace(bands, band_truncation=200).config_hash != bands.config_hash
    assert dataclasses.replace(base, joint=True).config_hash != base.config_hash
    loaded = load_config(write_config(tmp_path, MINIMAL + "frequency_bands = [5, 20]\njoint = true\n"))
    assert loaded.universes[0].band_periods == bands.band_periods and loaded.universes[0].joint


@pytest.mark.parametrize("edges", ["[20, 5]", "[5, 5]", "[1.5, 5]", "[]", "[5, inf]"])
def test_bad_frequency_bands_name_the_key_and_fix(tmp_path: Path, edges: str) -> None:
    with pytest.raises(ConfigError, match=r"universes\['pair'\]\.frequency_bands.*(increasing|>= 2)"):
        load_config(write_config(tmp_path, MINIMAL + f"frequency_bands = {edges}\n"))


def test_series_aggregate_is_read_and_refits_only_when_set(tmp_path: Path) -> None:
    """Issue 14: a per-series `aggregate`; absent (or `last`, its default) keeps a universe's hash
    (no refit of a warehouse made before the key existed), set it changes the hash."""
    base = minimal_config(tmp_path).universes[0]
    assert [s.aggregate for s in base.series] == ["last", "last"]
    text = MINIMAL.replace('series = ["A", "B"]', 'series = ["A", {name = "B", aggregate = "sum"}]\nfrequency = "quarterly"')
    u = load_config(write_config(tmp_path, text)).universes[0]
    assert [(s.name, s.transform, s.aggregate) for s in u.series] == [("A", "log_return", "last"), ("B", "log_return", "sum")]
    assert u.frequency == "quarterly"
    same = dataclasses.replace(u, series=tuple(dataclasses.replace(s, aggregate="last") for s in u.series), frequency=base.frequency)
    assert same.config_hash == base.config_hash
    assert dataclasses.replace(u, frequency=base.frequency).config_hash != base.config_hash
    explicit = MINIMAL.replace('series = ["A", "B"]', 'series = ["A", {name = "B", aggregate = "last"}]')
    assert load_config(write_config(tmp_path, explicit)).universes[0].config_hash == base.config_hash


def test_unknown_aggregate_or_frequency_is_one_line_naming_universe_series_and_fix(tmp_path: Path) -> None:
    text = MINIMAL.replace('series = ["A", "B"]', 'series = ["A", {name = "B", aggregate = "median"}]')
    with pytest.raises(ConfigError) as err:
        load_config(write_config(tmp_path, text))
    (line,) = str(err.value).splitlines()
    assert line.endswith(
        "`universes['pair'].series['B'].aggregate` is 'median' (did you mean 'mean'?); use one of: last, first, mean, sum"
    ), line
    with pytest.raises(ConfigError, match=r"`universes\['pair'\].frequency` is 'quartely' \(did you mean 'quarterly'\?\); "
                       r"use one of: business_day, weekly, monthly, quarterly, annual"):  # fmt: skip
        load_config(write_config(tmp_path, MINIMAL + 'frequency = "quartely"\n'))
