"""The installed package, not the checkout: the wheel carries the command, the demo data and no
dashboard import inside pipeline/ (issue 11 item 6).

The wheel is built from a copy of the sources (pip writes build folders into what it builds), with
pip's usual isolated build environment. The demo test puts it into a fresh venv with
``--no-deps``; the shared venv's site-packages are added as a plain path (a .pth line), so the
dependencies come from there, offline, while shockflow's own modules come only from the wheel
(the shared venv's editable install of the checkout is not activated by a plain path line).

The dependency test installs it into another fresh venv letting pip resolve every dependency from
its configured index (PIP_INDEX_URL, PIP_EXTRA_INDEX_URL, pip.conf, proxies: all from the
environment, and pip's cache too), with nothing shared: a package shockflow imports but
pyproject.toml does not declare fails there, as it would for anyone running `pip install shockflow`.
"""

from __future__ import annotations

import ast
import os
import re
import shutil
import site
import subprocess
import sys
import tomllib
import venv
import zipfile
from pathlib import Path

import pytest

from tests.bad_inputs.night import REPO, subprocess_env
from tests.pipeline._installed_imports import third_party_imports


def _packages() -> tuple[str, ...]:
    """The top-level packages pyproject.toml ships (its `packages.find` include patterns)."""
    with open(REPO / "pyproject.toml", "rb") as f:
        include = tomllib.load(f)["tool"]["setuptools"]["packages"]["find"]["include"]
    return tuple(p.rstrip("*") for p in include)


def pip_sources(env: dict[str, str] | None = None) -> str:
    """Where pip looks for packages, as configured (pip.conf files and PIP_* variables of `env`,
    else of this process), for messages; any credentials in an address are masked."""
    listed = subprocess.run(
        [sys.executable, "-m", "pip", "config", "list"],
        env=env, capture_output=True, text=True, timeout=120, check=False,
    ).stdout  # fmt: skip
    found: dict[str, str] = {}
    for line in listed.splitlines():  # e.g. `global.index-url='…'`, `:env:.extra-index-url='…'`
        key, sep, value = line.partition("=")
        name = key.rsplit(".", 1)[-1]
        value = value.strip().strip("'\"")
        if sep and name in {"index-url", "extra-index-url", "find-links", "no-index"}:
            found[name] = value  # later lines (the environment) win; "" unsets
    text = "index " + (found.get("index-url") or "https://pypi.org/simple (pip's default)")
    if found.get("extra-index-url"):
        text += f", extra index(es) {found['extra-index-url']}"
    if found.get("find-links"):
        text += f", links {found['find-links']}"
    if found.get("no-index", "").lower() in {"1", "true", "yes", "on"}:
        text += " (no-index is set: indexes are not consulted)"
    return re.sub(r"://[^/@\s]*@", "://***@", text)


def run_pip(
    args: list[str], what: str, *, timeout: float, env: dict[str, str] | None = None
) -> None:
    """`python -m pip *args`; fails naming where pip looked (a network failure reads as such)."""
    try:
        proc = subprocess.run(
            [sys.executable, "-m", "pip", *args],
            env=env, capture_output=True, text=True, timeout=timeout, check=False,
        )  # fmt: skip
    except subprocess.TimeoutExpired:
        pytest.fail(f"pip did not finish {what} in {timeout:.0f} s; it looks in {pip_sources(env)}")
    if proc.returncode != 0:
        pytest.fail(
            f"pip failed {what}; it looks in {pip_sources(env)} (no network? a proxy, "
            "PIP_INDEX_URL or PIP_EXTRA_INDEX_URL to set? or no version fits the requirements):\n"
            + proc.stderr[-4000:]
        )


SOURCES = ("pyproject.toml", "README.md", *_packages())
DEMO_FILES = ("demo.toml", "markets_wide.csv", "rates_long.csv", "true_parameters.json", "README.md")


@pytest.fixture(scope="module")
def wheel(tmp_path_factory: pytest.TempPathFactory) -> Path:
    root = tmp_path_factory.mktemp("wheel")
    src = root / "src"
    src.mkdir()
    for name in SOURCES:
        path = REPO / name
        if path.is_dir():
            shutil.copytree(path, src / name, ignore=shutil.ignore_patterns("__pycache__", "*.pyc"))
        else:
            shutil.copy2(path, src / name)
    # the isolated build environment's setuptools come from pip's index too
    build = ["wheel", "--no-deps", "--quiet", str(src), "-w", str(root / "dist")]
    run_pip(build, "building the wheel", timeout=600)
    (whl,) = (root / "dist").glob("shockflow-*.whl")
    return whl


def test_the_wheel_carries_the_command_and_the_demo_data(wheel: Path) -> None:
    with zipfile.ZipFile(wheel) as zf:
        names = set(zf.namelist())
        entry = next(n for n in names if n.endswith(".dist-info/entry_points.txt"))
        scripts = zf.read(entry).decode()
    assert {f"data_samples/{f}" for f in DEMO_FILES} <= names
    assert {"shockflow/__init__.py", "shockflow/__main__.py", "shockflow/cli.py", "data_samples/__init__.py"} <= names
    assert "shockflow = shockflow.cli:main" in scripts
    assert not any(n.startswith("tests/") for n in names)


def test_the_wheel_carries_every_report_template(wheel: Path) -> None:
    """The report renders from templates/report.html, macros.html and sections/*.html, read as
    package resources: each must be package data (a `templates/*` pattern missed sections/)."""
    folder = REPO / "pipeline" / "export" / "templates"
    wanted = {p.relative_to(REPO).as_posix() for p in folder.rglob("*") if p.is_file()}
    assert {"pipeline/export/templates/report.html", "pipeline/export/templates/sections/glance.html"} <= wanted
    with zipfile.ZipFile(wheel) as zf:
        assert wanted <= set(zf.namelist())


def test_pipeline_never_imports_the_dashboard() -> None:
    """The command (shockflow/) assembles both; pipeline/ itself names no dashboard module."""
    offenders = []
    for path in sorted((REPO / "pipeline").rglob("*.py")):
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            names = []
            if isinstance(node, ast.Import):
                names = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
                names = [node.module]
            offenders += [f"{path.relative_to(REPO)}:{node.lineno} {n}" for n in names if n.split(".")[0] in {"dashboard", "shockflow"}]
    assert not offenders, offenders


@pytest.mark.prefect
def test_the_demo_runs_from_a_plain_install_of_the_wheel(wheel: Path, prefect_api: str, tmp_path: Path) -> None:
    """`shockflow demo` from an installed wheel, run outside the checkout (it found its data
    through parents[2] of a checkout before)."""
    env_dir = tmp_path / "venv"
    venv.create(env_dir, with_pip=False)
    python = env_dir / "bin" / "python"
    own = Path(subprocess.check_output([python, "-c", "import sysconfig; print(sysconfig.get_paths()['purelib'])"], text=True).strip())
    shared = [p for p in site.getsitepackages() if Path(p).is_dir()]
    (own / "shared-venv.pth").write_text("\n".join(shared) + "\n")
    install = subprocess.run(
        [sys.executable, "-m", "pip", "--python", str(python), "install", "--no-deps", "--quiet", str(wheel)],
        capture_output=True, text=True, timeout=600, check=False,
    )  # fmt: skip
    assert install.returncode == 0, install.stderr
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    env = subprocess_env(prefect_api)
    env.pop("PYTHONPATH", None)
    where = subprocess.run(
        [python, "-c", "import shockflow, pipeline, dashboard, arlib, data_samples as d; "
         "print('\\n'.join(m.__file__ for m in (shockflow, pipeline, dashboard, arlib, d)))"],
        cwd=elsewhere, env=env, capture_output=True, text=True, check=False,
    )  # fmt: skip
    assert where.returncode == 0, where.stderr
    assert all(Path(f).is_relative_to(own) for f in where.stdout.split()), where.stdout  # the wheel's, not the checkout's

    demo = subprocess.run(
        [env_dir / "bin" / "shockflow", "demo", "--no-serve"],
        cwd=elsewhere, env=env, capture_output=True, text=True, timeout=1200, check=False,
    )  # fmt: skip
    assert demo.returncode == 0, demo.stdout + demo.stderr
    out = elsewhere / "demo_output"
    assert (out / "shockflow.duckdb").is_file() and (out / "shockflow-serving.duckdb").is_file()
    demo_toml = tomllib.loads((Path(__file__).parents[2] / "data_samples" / "demo.toml").read_text(encoding="utf-8"))
    demo_universes = [u["name"] for u in demo_toml["universes"]]
    assert sorted(p.parent.name for p in out.glob("exports/*/*/*.html")) == sorted(demo_universes)
    assert "invented market" in demo.stdout
    assert not any(p.name == "demo_output" for p in own.parent.rglob("demo_output"))  # nothing written into the install


def test_the_dependency_rule_reads_lazy_and_optional_imports() -> None:
    """`_installed_imports` flags a third-party import anywhere (a function body too), and skips
    the standard library, shockflow's own packages, ImportError guards and TYPE_CHECKING blocks."""
    source = (
        "import os\nimport numpy as np\nfrom pipeline import jobs\n"
        "from typing import TYPE_CHECKING\nif TYPE_CHECKING:\n    import pandas\n"
        "def read():\n    import openpyxl\n    try:\n        import pandas\n"
        "    except ImportError:\n        pass\n"
    )
    assert third_party_imports(source, {"pipeline"}) == [("numpy", 2), ("openpyxl", 8)]


def test_the_wheel_installs_with_only_its_declared_dependencies(
    wheel: Path, tmp_path: Path
) -> None:
    """pip installs the wheel into a brand-new venv resolving the dependencies itself (no
    `--no-deps`, no shared site-packages); there the command starts, a real command runs, and every
    module of every shipped package imports, using only declared dependencies
    (tests/pipeline/_installed_imports.py). A network failure fails, naming the index."""
    env_dir = tmp_path / "venv"
    venv.create(env_dir, with_pip=False)  # no system site-packages; the suite's pip, via --python
    bin_dir = env_dir / "bin"
    env = {
        k: v for k, v in os.environ.items()
        if k not in {"PYTHONPATH", "PYTHONHOME", "PYTHONSTARTUP"}
        and not k.startswith(("PREFECT_", "PYTEST_"))
    }  # fmt: skip
    env.update({"DO_NOT_TRACK": "1", "PREFECT_SERVER_ANALYTICS_ENABLED": "false", "COLUMNS": "200"})
    # pip's configuration, proxies and cache all come from the environment (nothing is overridden)
    run_pip(
        ["--python", str(bin_dir / "python"), "install", "--progress-bar", "off", str(wheel)],
        "installing the wheel with its dependencies into a new venv", timeout=1800, env=env,
    )  # fmt: skip

    elsewhere = tmp_path / "elsewhere"  # not the checkout: `python -c` would import from the folder
    elsewhere.mkdir()

    def run(*args: str | Path) -> subprocess.CompletedProcess[str]:
        return subprocess.run(
            [str(a) for a in args],
            cwd=elsewhere, env=env, capture_output=True, text=True, timeout=600, check=False,
        )  # fmt: skip

    shockflow, python = bin_dir / "shockflow", bin_dir / "python"
    project = tomllib.loads((REPO / "pyproject.toml").read_text(encoding="utf-8"))["project"]
    version = run(shockflow, "--version")
    assert version.returncode == 0, version.stderr
    assert version.stdout.strip() == f"shockflow {project['version']}"  # no git stamp: no checkout
    usage = run(shockflow, "--help")
    assert usage.returncode == 0, usage.stderr
    for command in ("run", "check", "export", "schedule", "dashboard", "demo"):
        assert re.search(rf"^\W*{command}\s", usage.stdout, re.MULTILINE), usage.stdout

    imports = run(python, "-I", Path(__file__).with_name("_installed_imports.py"), *_packages())
    assert imports.returncode == 0, imports.stdout + imports.stderr

    # a real command: the packaged demo config (its data files beside it in the install), checked
    # from the sources through the config and every universe's window; it writes nothing
    write = "import pathlib, shockflow.cli as c; print(c.demo_config(pathlib.Path('demo')))"
    written = run(python, "-I", "-c", write)
    assert written.returncode == 0, written.stderr
    check = run(shockflow, "check", "--config", written.stdout.strip())
    assert check.returncode == 0, check.stdout + check.stderr
    assert "config ok: 3 source(s)" in check.stdout, check.stdout
