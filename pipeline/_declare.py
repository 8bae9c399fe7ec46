"""Settings declared once: a dataclass field carries its default, check, documentation and fit flag.

A config section is a frozen dataclass whose fields are made with :func:`setting`::

    port: int = setting(8050, doc="where the dashboard listens", minimum=0, maximum=65535)

From these declarations alone come

- the loader (:func:`read_table`): the TOML type follows the annotation (``str``, ``int``,
  ``float``, ``bool``, ``Path`` = a path relative to the config file, ``tuple[str, ...]`` = a list,
  another declared dataclass = a sub-table, ``X | None`` = optional), then `choices`, `minimum`,
  `maximum` and `check`; unknown keys get a did-you-mean; every problem is collected, none stops
  the reading (:class:`Problems`);
- the fit hash (:func:`fit_document`): every field enters it unless declared ``fit=False``;
- the README's configuration tables (:func:`iter_rows`, rendered by ``pipeline.config.readme``).

Why dataclasses and not pydantic (installed with Prefect): the messages must name the file and
the key, show the value, suggest the fix and a did-you-mean, and cross-key rules (the window
against the lags, Cholesky order against the series) must be reported together with the per-key
ones. Doing that in pydantic means translating its error records and writing the same validators
anyway, while tying the config's behaviour to the pydantic version Prefect pins. The config
objects also stay what the rest of the code and the tests use: frozen dataclasses that
`dataclasses.replace` and `FrozenInstanceError` work with. A field and a small metadata record
are shorter and read more plainly.
"""

from __future__ import annotations

import dataclasses
import difflib
import functools
import re
import types
import typing
from collections.abc import Callable, Iterator, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from pipeline.errors import ConfigError

__all__ = [
    "BAD",
    "REQUIRED",
    "Declared",
    "Problems",
    "Setting",
    "declared",
    "fit_document",
    "iter_rows",
    "read_table",
    "setting",
    "suggest",
]

REQUIRED: Any = dataclasses.MISSING

#: a check returns None when the value is fine, else (problem, fix), e.g. ("is 'x'", "use ...").
Check = Callable[[Any], "tuple[str, str] | None"]


@dataclass(frozen=True)
class Setting:
    """What a field declares besides its name, type and default (see :func:`setting`)."""

    doc: str
    fit: bool = True
    choices: tuple[str, ...] | None = None
    minimum: float | None = None
    maximum: float | None = None
    check: Check | None = None
    default_doc: str | None = None
    fit_value: Callable[[Any], Any] | None = None
    fit_via: str | None = None
    fit_if_set: bool = False


def setting(
    default: Any = REQUIRED,
    *,
    doc: str,
    fit: bool = True,
    choices: tuple[str, ...] | None = None,
    minimum: float | None = None,
    maximum: float | None = None,
    check: Check | None = None,
    default_doc: str | None = None,
    fit_value: Callable[[Any], Any] | None = None,
    fit_via: str | None = None,
    fit_if_set: bool = False,
    secret: bool = False,
) -> Any:
    """Declare one config key as a dataclass field.

    Parameters
    ----------
    default : the value when the key is absent; omit for a required key. Must be immutable.
    doc : one line for the README table ("{choices}" is replaced by the choices, code-quoted).
    fit : whether the value changes fitted results, so that a change refits the universe
        (only meaningful inside ``[[universes]]``; default True).
    choices, minimum, maximum : the allowed values (for a list: of each element).
    check : ``value -> None | (problem, fix)`` for anything else about this one value.
    default_doc : the README's default cell when the default is computed (e.g. "max(10, p + 5)").
    fit_value : ``owner -> JSON value`` when the key enters the fit hash in another form.
    fit_via : the key through which this one's effect enters the fit hash already (it then
        does not enter by itself; the README still says that changing it refits).
    fit_if_set : enter the fit hash only when the value differs from the default — for a key
        added after warehouses exist, so that configs without it keep their hash (no refit).
    secret : kept out of the repr.
    """
    meta = {
        "setting": Setting(
            doc=doc, fit=fit, choices=choices, minimum=minimum, maximum=maximum, check=check,
            default_doc=default_doc, fit_value=fit_value, fit_via=fit_via, fit_if_set=fit_if_set,
        )
    }  # fmt: skip
    if default is REQUIRED:
        return dataclasses.field(metadata=meta, repr=not secret)
    return dataclasses.field(default=default, metadata=meta, repr=not secret)


@dataclass(frozen=True)
class Declared:
    """One declared field: its name, declaration, default, and TOML shape from the annotation."""

    name: str
    setting: Setting
    default: Any
    base: Any  # str, int, float, bool, Path, a declared dataclass, tuple for a list, (float, str)
    element: Any  # the element type of a tuple[...], else None
    optional: bool

    @property
    def required(self) -> bool:
        return self.default is REQUIRED


@functools.cache
def declared(cls: type) -> tuple[Declared, ...]:
    """The declared fields of section class `cls`, in declaration order."""
    hints = typing.get_type_hints(cls)
    out = []
    for f in dataclasses.fields(cls):
        s = f.metadata.get("setting")
        if s is None:
            continue
        base, optional = _strip_none(hints[f.name])
        element = None
        if typing.get_origin(base) is tuple:
            element = typing.get_args(base)[0]
            base = tuple
        out.append(Declared(f.name, s, f.default, base, element, optional))
    return tuple(out)


def _strip_none(tp: Any) -> tuple[Any, bool]:
    if isinstance(tp, types.UnionType) or typing.get_origin(tp) is typing.Union:
        args = [a for a in typing.get_args(tp) if a is not type(None)]
        if set(args) == {float, str}:  # a number or a word, e.g. tightness = 0.2 or "auto"
            return (float, str), len(args) < len(typing.get_args(tp))
        return args[0], len(args) < len(typing.get_args(tp))
    return tp, False


def suggest(word: str, choices: Any) -> str:
    """" (did you mean 'x'?)" for the closest of `choices`, or ""."""
    close = difflib.get_close_matches(str(word), [str(c) for c in choices], n=1, cutoff=0.6)
    return f" (did you mean {close[0]!r}?)" if close else ""


class Problems:
    """Every problem of one config file, collected so that all are reported at once."""

    def __init__(self, file: Path) -> None:
        self.file = file
        self.items: list[str] = []

    def add(self, key: str | None, problem: str, fix: str) -> None:
        """Record "`key` problem; fix" (key None: "problem; fix")."""
        head = f"`{key}` {problem}" if key else problem
        self.items.append(f"{self.file}: {head}; {fix}")

    def __len__(self) -> int:
        return len(self.items)

    def raise_if_any(self) -> None:
        """Raise one ConfigError listing every problem (a single problem stays one line)."""
        if not self.items:
            return
        if len(self.items) == 1:
            msg = self.items[0]
        else:
            prefix = f"{self.file}: "
            lines = [item.removeprefix(prefix) for item in self.items]
            msg = f"{self.file}: {len(lines)} problems, each to fix:\n" + "\n".join(f"  - {ln}" for ln in lines)
        raise ConfigError(msg, problems=tuple(self.items))


#: what a parser returns for a value it reported a problem with
BAD: Any = object()


def _kind_name(d: Declared) -> str:
    if d.base is tuple:
        return "list"
    if dataclasses.is_dataclass(d.base):
        return "table"
    if d.base == (float, str):
        return "number or str"
    return d.base.__name__ if d.base is not Path else "str"


def read_table(
    cls: type,
    raw: Any,
    where: str,
    problems: Problems,
    *,
    base: Path,
    choices: Mapping[str, tuple[str, ...]] | None = None,
    parsers: dict[str, Callable[[Any, str, dict[str, Any]], Any]] | None = None,
) -> tuple[dict[str, Any], set[str]]:
    """Read TOML table `raw` against the declarations of `cls`.

    Returns (values, given): values of the keys read without a problem (absent keys take their
    default; keys with a problem are left out), and the names of the keys the file set. Every
    problem is added to `problems`. `choices` supplies run-time choices (e.g. source kinds from
    the reader registry); `parsers` maps a key to ``(raw value, key path, values so far) -> value``
    for keys whose shape is not a plain type (read after the others).
    """
    choices = choices or {}
    parsers = parsers or {}
    if not isinstance(raw, dict):
        header = re.sub(r"\[[^\]]*\]", "", where)  # universes['x'].bands -> universes.bands
        problems.add(where, f"must be a table, got {raw!r}", f"write it as a [{header}] table")
        return {}, set()
    data = dict(raw)
    decl = declared(cls)
    known = [d.name for d in decl]
    unknown = [k for k in data if k not in known]
    values: dict[str, Any] = {}
    given: set[str] = set()
    renamed: set[str] = set()
    ordered = [d for d in decl if d.name not in parsers] + [d for d in decl if d.name in parsers]
    for d in ordered:
        key = f"{where}.{d.name}" if where else d.name
        if d.name not in data:
            if d.required:
                typo = difflib.get_close_matches(d.name, [k for k in unknown if k not in renamed], n=1, cutoff=0.6)
                if typo:
                    renamed.add(typo[0])
                    problems.add(f"{where}.{typo[0]}", f"is not a known key (did you mean {d.name!r}?)", f"rename it to `{d.name}`")
                else:
                    problems.add(key, "is required but missing", f"add `{d.name} = ...` to {where}")
            elif d.base is Path and d.default is not None:
                values[d.name] = (base / d.default).resolve()  # defaults are relative to the file too
            else:
                values[d.name] = d.default
            continue
        given.add(d.name)
        value = data[d.name]
        if d.name in parsers:
            value = parsers[d.name](value, key, values)
        else:
            value = _convert(d, value, key, problems, base=base, choices=choices.get(d.name, d.setting.choices))
        if value is not BAD:
            values[d.name] = value
    for extra in unknown:
        if extra not in renamed:
            close = difflib.get_close_matches(extra, [k for k in known if k not in data], n=1, cutoff=0.6)
            fix = f"rename it to `{close[0]}`" if close else f"known keys here: {', '.join(sorted(known))}"
            problems.add(f"{where}.{extra}" if where else extra, f"is not a known key{suggest(extra, known)}", fix)
    return values, given


def _convert(d: Declared, value: Any, key: str, problems: Problems, *, base: Path, choices: tuple[str, ...] | None) -> Any:
    s = d.setting
    if dataclasses.is_dataclass(d.base):
        cls: Any = d.base  # a declared dataclass
        sub, _ = read_table(cls, value, key, problems, base=base)
        try:
            return cls(**sub)
        except TypeError:  # a required sub-key was missing: already reported
            return BAD
    if d.base is tuple:
        if not isinstance(value, list):
            problems.add(key, f"must be list, got {value!r}", f"set `{d.name}` to a list such as [\"a\", \"b\"]")
            return BAD
        if d.element is float:  # TOML writes 5 for 5.0
            value = [float(v) if _is(v, int) else v for v in value]
        for item in value:
            if not _is(item, d.element):
                problems.add(key, f"contains {item!r}, not a {d.element.__name__}", f"list {d.element.__name__} values only")
                return BAD
            if choices is not None and item not in choices:
                problems.add(key, f"contains {item!r}{suggest(item, choices)}", f"use some of: {', '.join(choices)}")
                return BAD
            if s.minimum is not None and item < s.minimum:
                problems.add(key, f"contains {item}, below the minimum {s.minimum}", f"list values >= {s.minimum}")
                return BAD
            if s.maximum is not None and item > s.maximum:
                problems.add(key, f"contains {item}, above the maximum {s.maximum}", f"list values <= {s.maximum}")
                return BAD
        items = tuple(dict.fromkeys(value)) if choices is not None else tuple(value)
        wrong = s.check(items) if s.check is not None else None
        if wrong is not None:
            problems.add(key, *wrong)
            return BAD
        return items
    want = str if d.base is Path else d.base
    if (want is float or want == (float, str)) and _is(value, int):
        value = float(value)
    if not _is(value, want):
        name = _kind_name(d)
        problems.add(key, f"must be {name}, got {value!r}", f"set `{d.name}` to a {name}")
        return BAD
    if choices is not None and value not in choices:
        problems.add(key, f"is {value!r}{suggest(value, choices)}", f"use one of: {', '.join(choices)}")
        return BAD
    if s.minimum is not None and value < s.minimum:
        problems.add(key, f"is {value}, below the minimum {s.minimum}", f"set `{d.name}` >= {s.minimum}")
        return BAD
    if s.maximum is not None and value > s.maximum:
        problems.add(key, f"is {value}, above the maximum {s.maximum}", f"set `{d.name}` <= {s.maximum}")
        return BAD
    if s.check is not None:
        wrong = s.check(value)
        if wrong is not None:
            problems.add(key, *wrong)
            return BAD
    if d.base is Path:
        return (base / Path(value).expanduser()).resolve()
    return value


def _is(value: Any, kind: type | tuple[type, ...]) -> bool:
    if isinstance(value, bool):
        return kind is bool
    return isinstance(value, kind)


def fit_document(obj: Any) -> dict[str, Any]:
    """Every field of declared dataclass `obj` that affects fitted results, as plain JSON values.

    A field enters unless declared ``fit=False``; ``fit_value`` gives its form when not the value
    itself. Nested declared dataclasses become objects, tuples lists, paths strings.
    """
    out: dict[str, Any] = {}
    for f in dataclasses.fields(obj):
        s = f.metadata.get("setting")
        if s is None or not s.fit or s.fit_via is not None:
            continue
        if s.fit_if_set and getattr(obj, f.name) == f.default:
            continue
        value = s.fit_value(obj) if s.fit_value is not None else getattr(obj, f.name)
        out[f.name] = _json(value)
    return out


def _json(value: Any) -> Any:
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return fit_document(value)
    if isinstance(value, tuple | list):
        return [_json(v) for v in value]
    if isinstance(value, Path):
        return str(value)
    return value


def iter_rows(cls: type, prefix: str = "") -> Iterator[tuple[str, Declared]]:
    """(key path, declaration) of every key of `cls`, sub-tables' keys after the table's own row
    (the keys of a list of tables as ``key[].sub``)."""
    for d in declared(cls):
        yield prefix + d.name, d
        if isinstance(d.base, type) and dataclasses.is_dataclass(d.base):
            yield from iter_rows(d.base, f"{prefix}{d.name}.")
        elif isinstance(d.element, type) and dataclasses.is_dataclass(d.element):
            yield from iter_rows(d.element, f"{prefix}{d.name}[].")
