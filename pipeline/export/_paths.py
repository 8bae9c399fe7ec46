"""Where export files go: `<out_dir>/<date>/<universe>/`, never outside `out_dir`.

Universe names come from configuration (and so, ultimately, from people); they are turned into one
safe directory name each, and the final directory is resolved and checked to lie inside the
resolved `out_dir` before anything is written.
"""

from __future__ import annotations

import datetime as dt
import re
from pathlib import Path

from pipeline.errors import ExportError

__all__ = ["safe_dir_name", "universe_dir"]

# Anything outside this set becomes "_": path separators, "..", spaces, shell and URL characters.
_UNSAFE = re.compile(r"[^A-Za-z0-9._-]+")
_MAX_NAME = 120


def safe_dir_name(name: str) -> str:
    """One directory name for a universe: letters, digits, `.`, `_`, `-`; no leading dot.

    >>> safe_dir_name("rates & fx/EM")
    'rates_fx_EM'
    >>> safe_dir_name("../../etc")
    'etc'
    """
    if not isinstance(name, str):
        msg = f"universe name must be a string, got {type(name).__name__} {name!r}"
        raise ExportError(msg)
    cleaned = _UNSAFE.sub("_", name)
    cleaned = re.sub(r"\.{2,}", "_", cleaned)  # no ".." runs anywhere
    cleaned = re.sub(r"_{2,}", "_", cleaned).strip("._-")[:_MAX_NAME]
    if not cleaned:
        msg = (
            f"universe name {name!r} leaves nothing usable as a directory name; "
            "rename the universe with letters or digits (e.g. `rates_fx`)"
        )
        raise ExportError(msg)
    return cleaned


def universe_dir(out_dir: str | Path, date: dt.date, universe: str) -> Path:
    """`<out_dir>/<YYYY-MM-DD>/<safe universe>/`, resolved and checked to lie inside `out_dir`.

    Nothing is created here; the caller makes the directory once the check has passed.
    """
    root = Path(out_dir).expanduser().resolve()
    target = (root / date.isoformat() / safe_dir_name(universe)).resolve()
    if not target.is_relative_to(root) or target == root:
        msg = (
            f"export directory {target} for universe {universe!r} lies outside `out_dir` {root}; "
            "refusing to write there"
        )
        raise ExportError(msg)
    return target
