"""The type-checking policy: mypy covers every package, and every ignore says why on its line.

`make lint` (and so CI) runs mypy with the `[tool.mypy]` settings of pyproject.toml. A package left
out of `files` is not checked at all, and a bare `# type: ignore[code]` hides an error without
saying why it is safe; both are caught here from the source text (nothing is imported or run).
The reason rule also covers tests/ and bench/: mypy does not check them in `make lint`, but an
ignore there hides an error from whoever runs mypy on them, so it says why as well.
"""

from __future__ import annotations

import io
import re
import tokenize
import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]

#: Top-level folders that are packages but are not installed (development only).
NOT_SHIPPED = {"tests", "bench"}

#: An ignore comment with its codes, then on the same comment `# <reason>` (a word at least).
EXPLAINED = re.compile(r"#\s*type:\s*ignore\[[a-z0-9-]+(?:,\s*[a-z0-9-]+)*\]\s+#\s*\w.*$")


def _mypy() -> dict:
    return tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))["tool"]["mypy"]


def _top_level_packages() -> set[str]:
    return {
        p.parent.name for p in ROOT.glob("*/__init__.py")
        if p.parent.name not in NOT_SHIPPED and not p.parent.name.startswith(".")
    }  # fmt: skip


def unexplained_ignores(source: str, name: str = "<text>") -> list[str]:
    """`file:line: comment` for each `type: ignore` comment without a code and a reason after it."""
    out = []
    for tok in tokenize.generate_tokens(io.StringIO(source).readline):
        if tok.type == tokenize.COMMENT and re.search(r"type:\s*ignore", tok.string):
            if not EXPLAINED.search(tok.string):
                out.append(f"{name}:{tok.start[0]}: {tok.string}")
    return out


def ignore_rule_folders() -> list[str]:
    """The folders whose ignores must say why: the type-checked packages, tests/ and bench/."""
    return [*_mypy()["files"], *sorted(NOT_SHIPPED)]


def unexplained_ignores_under(folders: list[str], root: Path = ROOT) -> list[str]:
    """`unexplained_ignores` of every `.py` file under `root / folder` for each folder."""
    bad: list[str] = []
    for folder in folders:
        for path in sorted((root / folder).rglob("*.py")):
            name = str(path.relative_to(root))
            bad += unexplained_ignores(path.read_text(encoding="utf-8"), name)
    return bad


def test_the_rule_reads_comments_as_intended():
    # the two forms the rule refuses, and the one it accepts (examples written for this test)
    assert unexplained_ignores("x = f()  # type: ignore[arg-type]\n")
    assert unexplained_ignores("x = f()  # type: ignore\n")
    assert unexplained_ignores("x = f()  # type: ignore[arg-type]  #\n")
    assert not unexplained_ignores("x = f()  # type: ignore[arg-type]  # polars says int | None\n")
    assert not unexplained_ignores('s = "# type: ignore[misc]"\n')  # text in a string is no comment


def test_the_rule_reads_tests_and_bench(tmp_path: Path):
    # a made-up tree: one unexplained and one explained ignore in each of tests/ and bench/
    for folder in ("tests", "bench"):
        (tmp_path / folder / "sub").mkdir(parents=True)
        (tmp_path / folder / "sub" / "bare.py").write_text("x = f()  # type: ignore[misc]\n")
        (tmp_path / folder / "said.py").write_text("x = f()  # type: ignore[misc]  # on purpose\n")
    assert {"tests", "bench"} <= set(ignore_rule_folders())
    assert unexplained_ignores_under(ignore_rule_folders(), tmp_path) == [
        "bench/sub/bare.py:1: # type: ignore[misc]",
        "tests/sub/bare.py:1: # type: ignore[misc]",
    ]


def test_mypy_covers_every_top_level_package():
    files = set(_mypy()["files"])
    packages = _top_level_packages()
    assert packages, f"no packages found under {ROOT}"
    missing = sorted(packages - files)
    assert not missing, (
        f"pyproject.toml [tool.mypy] files lacks {missing}; add them so `make lint` type-checks them"
    )


def test_installed_packages_are_the_checked_ones():
    project = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))
    include = project["tool"]["setuptools"]["packages"]["find"]["include"]
    installed = {pattern.rstrip("*") for pattern in include}
    assert installed <= set(_mypy()["files"]), (
        f"installed packages {sorted(installed - set(_mypy()['files']))} are not in [tool.mypy] files"
    )


def test_mypy_settings_keep_ignores_honest():
    # an ignore mypy no longer needs is itself an error, so explained ignores cannot go stale
    assert _mypy()["warn_unused_ignores"] is True
    assert _mypy()["ignore_missing_imports"] is True


def test_every_type_ignore_in_packages_tests_and_bench_says_why():
    bad = unexplained_ignores_under(ignore_rule_folders())
    assert not bad, (
        "each `# type: ignore[code]` needs a reason on its line, e.g. "
        "`# type: ignore[attr-defined]  # Dash sets this attribute at runtime` (or fix the type):\n"
        + "\n".join(bad)
    )


def test_ci_runs_lint_before_the_tests():
    steps = [line.strip() for line in (ROOT / ".ci" / "run").read_text(encoding="utf-8").splitlines()]
    assert "make lint" in steps, ".ci/run must run `make lint` (ruff and mypy)"
    assert "make test" in steps, ".ci/run must run `make test`"
    assert steps.index("make lint") < steps.index("make test")
    makefile = (ROOT / "Makefile").read_text(encoding="utf-8")
    lint = makefile.split("\nlint:", 1)[1].split("\n\n", 1)[0]
    assert "ruff check" in lint and "mypy" in lint, "`make lint` must run ruff and mypy"
