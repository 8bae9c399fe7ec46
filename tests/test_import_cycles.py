"""No import cycles between the project's modules, and the rooms import each other one way only.

Every import counts, including those inside functions (a cycle hidden by a late import is still
a cycle: the two modules cannot be understood, tested or moved apart). The graph is built from
the source text (ast), so nothing is imported to check it.
"""

from __future__ import annotations

import ast
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
PACKAGES = ("arlib", "serving", "charts", "pipeline", "dashboard", "shockflow")

#: room -> rooms it may import (the data's one-way flow; see DEVELOPERS.md "The rooms").
ALLOWED = {
    "arlib": set(),
    "serving": {"arlib"},
    "charts": {"arlib", "serving"},
    "pipeline": {"arlib", "serving", "charts"},
    # the dashboard's settings are the [dashboard] declarations of the pipeline's config (declared
    # once); nothing else of the pipeline
    "dashboard": {"arlib", "serving", "charts", "pipeline.config"},
    "shockflow": {"arlib", "serving", "charts", "pipeline", "dashboard"},
}


def _modules() -> dict[str, Path]:
    out: dict[str, Path] = {}
    for pkg in PACKAGES:
        base = ROOT / pkg
        if not base.is_dir():
            continue
        for path in base.rglob("*.py"):
            parts = list(path.relative_to(ROOT).with_suffix("").parts)
            if parts[-1] == "__init__":
                parts = parts[:-1]
            out[".".join(parts)] = path
    return out


def _resolve(name: str, modules: dict[str, Path]) -> str | None:
    while name and name not in modules:
        name = name.rpartition(".")[0]
    return name or None


def _edges(mod: str, path: Path, modules: dict[str, Path]) -> set[str]:
    is_pkg = path.name == "__init__.py"
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    out: set[str] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            targets = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = mod.split(".") if is_pkg else mod.split(".")[:-1]
                base = base[: len(base) - (node.level - 1)]
                prefix = ".".join([*base, node.module] if node.module else base)
            else:
                prefix = node.module or ""
            # `from pkg import sub` names the submodule when there is one
            targets = [f"{prefix}.{a.name}" if f"{prefix}.{a.name}" in modules else prefix
                       for a in node.names]  # fmt: skip
        else:
            continue
        for t in targets:
            hit = _resolve(t, modules)
            if hit and hit != mod and not mod.startswith(hit + "."):
                out.add(hit)  # a module importing its own parent package is Python's own order
    return out


def _graph() -> dict[str, set[str]]:
    modules = _modules()
    return {m: _edges(m, p, modules) for m, p in modules.items()}


def _cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """Strongly connected components with more than one module (Tarjan)."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on: set[str] = set()
    out: list[list[str]] = []
    counter = [0]

    def visit(v: str) -> None:
        index[v] = low[v] = counter[0]
        counter[0] += 1
        stack.append(v)
        on.add(v)
        for w in sorted(graph.get(v, ())):
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            comp = []
            while True:
                w = stack.pop()
                on.discard(w)
                comp.append(w)
                if w == v:
                    break
            if len(comp) > 1:
                out.append(sorted(comp))

    for v in sorted(graph):
        if v not in index:
            visit(v)
    return out


def test_no_import_cycles() -> None:
    cycles = _cycles(_graph())
    assert not cycles, "import cycles (break each, e.g. move the shared part down a level): " + "; ".join(
        " <-> ".join(c) for c in cycles
    )


def test_rooms_import_one_way() -> None:
    bad = sorted(
        f"{m} imports {t}"
        for m, targets in _graph().items()
        for t in targets
        if t.split(".")[0] != m.split(".")[0]
        and not any(t == a or t.startswith(a + ".") for a in ALLOWED[m.split(".")[0]])
    )
    assert not bad, "imports against the rooms' one-way flow: " + "; ".join(bad)


def test_the_checker_finds_a_planted_cycle(tmp_path: Path) -> None:
    graph = {"a.x": {"a.y"}, "a.y": {"a.z"}, "a.z": {"a.x"}, "a.w": {"a.x"}}
    assert _cycles(graph) == [["a.x", "a.y", "a.z"]]
