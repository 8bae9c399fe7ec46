"""The installed package, not the checkout: the wheel carries the command, the demo data and no
dashboard import inside pipeline/ (issue 11 item 6).

The wheel is built from a copy of the sources (pip writes build folders into what it builds), with
pip's usual isolated build environment. The install test puts it into a fresh venv with
``--no-deps``; the shared venv's site-packages are added as a plain path (a .pth line), so the
dependencies come from there, offline, while shockflow's own modules come only from the wheel
(the shared venv's editable install of the checkout is not activated by a plain path line).
"""

from __future__ import annotations

import ast
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


def _packages() -> tuple[str, ...]:
    """The top-level packages pyproject.toml ships (its `packages.find` include patterns)."""
    with open(REPO / "pyproject.toml", "rb") as f:
        include = tomllib.load(f)["tool"]["setuptools"]["packages"]["find"]["include"]
    return tuple(p.rstrip("*") for p in include)


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
    proc = subprocess.run(
        [sys.executable, "-m", "pip", "wheel", "--no-deps", "--quiet", str(src), "-w", str(root / "dist")],
        capture_output=True, text=True, timeout=600, check=False,
    )  # fmt: skip
    assert proc.returncode == 0, proc.stderr
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
