"""The invented demo market (the Republic of Veloria), shipped as package data.

This folder is the project's agreed home of the demo data; it is also an importable package so that
an installed shockflow (a plain ``pip install`` of the wheel, no checkout) carries its files:
``markets_wide.csv``, ``rates_long.csv``, ``demo.toml``, ``true_parameters.json`` and README.md.
:func:`folder` finds them through :mod:`importlib.resources`, wherever the package is installed.
The data are invented (see README.md here); shockflow is a research tool, not financial advice.
"""

from __future__ import annotations

from importlib.resources import files
from pathlib import Path

__all__ = ["folder"]


def folder() -> Path:
    """The folder holding the demo files (the package's own folder on disk)."""
    root = files(__name__)
    if not isinstance(root, Path):  # a zipped install: the files have no path of their own
        msg = f"the demo data package is not on disk ({root!r}); install shockflow unzipped (pip does)"
        raise RuntimeError(msg)
    return root
