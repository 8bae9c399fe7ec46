"""Run by tests/pipeline/test_wheel.py with the python of a venv the wheel was installed into (pip
resolving its dependencies): standard library only. The suite imports it only to test its rule
(`third_party_imports`) on made-up sources.

``python -I _installed_imports.py PACKAGE...`` checks, for each shipped top-level package:

1. every module imports (``__main__`` modules excepted: they run a command), from the venv, not a
   checkout; a dependency imported at module level but not installed fails here, and so does any
   module loaded from outside the venv and the standard library (another venv's site-packages);
2. every third-party name the modules (``__main__`` too) import, at module level or inside a
   function, belongs to a distribution the installed shockflow declares (Requires-Dist): the
   lazily imported ones (openpyxl, psycopg, gunicorn, ...) are not reached by 1. An import
   guarded by ``except ImportError`` is optional and skipped, and one under
   ``if TYPE_CHECKING:`` never runs. A name from a runtime extra (not `test` or `dev`) passes
   when that extra's requirement has the same name, since extras are not installed.

Prints one line per problem and exits 1 if there are any.
"""

from __future__ import annotations

import ast
import importlib
import importlib.metadata as md
import pkgutil
import re
import sys
import sysconfig
from pathlib import Path

#: extras that are development tools, not part of what an installed shockflow may import
NOT_RUNTIME_EXTRAS = {"test", "dev"}


def _norm(name: str) -> str:
    return re.sub(r"[-_.]+", "-", name).lower()


def declared() -> tuple[set[str], set[str]]:
    """(runtime requirements, runtime-extra requirements) of the installed shockflow, normalized."""
    base: set[str] = set()
    extras: set[str] = set()
    for line in md.requires("shockflow") or []:
        match = re.match(r"[A-Za-z0-9][A-Za-z0-9._-]*", line)
        if match is None:  # not a requirement line
            continue
        name = _norm(match.group(0))
        extra = re.search(r"""extra\s*==\s*["']([^"']+)["']""", line)
        if extra is None:
            base.add(name)
        elif extra.group(1) not in NOT_RUNTIME_EXTRAS:
            extras.add(name)
    return base, extras


def _optional_imports(tree: ast.AST) -> set[int]:
    """ids of the import nodes that need not succeed: in a `try` catching ImportError, or under
    `if TYPE_CHECKING:`."""
    skipped: set[int] = set()
    for node in ast.walk(tree):
        body: list[ast.stmt] = []
        if isinstance(node, ast.Try):
            caught = {
                n.id for h in node.handlers if h.type is not None
                for n in ast.walk(h.type) if isinstance(n, ast.Name)
            }  # fmt: skip
            if caught & {"ImportError", "ModuleNotFoundError", "Exception", "BaseException"}:
                body = node.body
        elif isinstance(node, ast.If) and "TYPE_CHECKING" in ast.unparse(node.test):
            body = node.body
        for stmt in body:
            skipped |= {id(n) for n in ast.walk(stmt) if isinstance(n, ast.Import | ast.ImportFrom)}
    return skipped


def third_party_imports(source: str, own: set[str]) -> list[tuple[str, int]]:
    """(top-level name, line) of each import in `source` that must succeed, of a module outside
    the standard library and the packages `own`."""
    tree = ast.parse(source)
    skipped = _optional_imports(tree)
    found = []
    for node in ast.walk(tree):
        if id(node) in skipped:
            continue
        if isinstance(node, ast.Import):
            names = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
            names = [node.module]
        else:
            continue
        for name in names:
            top = name.split(".")[0]
            if top not in sys.stdlib_module_names and top not in own:
                found.append((top, node.lineno))
    return found


def main(packages: list[str]) -> int:
    own = set(packages)
    purelib = Path(sysconfig.get_paths()["purelib"]).resolve()
    problems: list[str] = []
    files: list[Path] = []
    for package in packages:
        mod = importlib.import_module(package)
        files += sorted(Path(mod.__file__ or "").resolve().parent.rglob("*.py"))
        names = [package] + [
            info.name for info in pkgutil.walk_packages(mod.__path__, package + ".")
            if info.name.rsplit(".", 1)[-1] != "__main__"
        ]  # fmt: skip
        for name in names:
            try:
                module = importlib.import_module(name)
            except Exception as exc:  # each failure is reported, not the first only
                problems.append(f"import {name}: {type(exc).__name__}: {exc}")
                continue
            path = Path(module.__file__ or "").resolve()
            if not path.is_relative_to(purelib):
                problems.append(f"import {name}: came from {path}, not the venv's {purelib}")
    prefix, stdlib = Path(sys.prefix).resolve(), Path(sysconfig.get_paths()["stdlib"]).resolve()
    for name, module in sorted(sys.modules.items()):
        if module is sys.modules["__main__"]:  # this script (also as `__mp_main__`)
            continue
        path = Path(getattr(module, "__file__", None) or prefix).resolve()
        installed = {"site-packages", "dist-packages"} & set(path.parts)
        in_stdlib = path.is_relative_to(stdlib) and not installed
        if not (path.is_relative_to(prefix) or in_stdlib):
            problems.append(f"module {name} came from {path}, outside the venv {prefix}")
    base, extras = declared()
    providers = md.packages_distributions()
    for path in files:
        for top, line in third_party_imports(path.read_text(encoding="utf-8"), own):
            dists = {_norm(d) for d in providers.get(top, [])}
            if dists & (base | extras) or _norm(top) in extras:
                continue
            shown = path.relative_to(purelib) if path.is_relative_to(purelib) else path
            got = ", ".join(sorted(dists)) or "none installed"
            problems.append(
                f"{shown}:{line} imports {top!r} (distribution: {got}), which pyproject.toml "
                "[project] dependencies does not declare"
            )
    for p in problems:
        print(p)
    print(f"checked {len(files)} files of {', '.join(packages)}")
    return 1 if problems else 0


if __name__ == "__main__":
    raise SystemExit(main(sys.argv[1:]))
