"""Where export files go: `<out_dir>/<date>/<universe>/`, never outside `out_dir`.

Universe names come from configuration (and so, ultimately, from people); they are turned into one
safe directory name each (different names, different folders: see :func:`safe_dir_name`), and the final directory is resolved and checked to lie inside the
resolved `out_dir` before anything is written.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import os
import re
import shutil
import tempfile
import time
import uuid
from pathlib import Path

from pipeline.errors import ExportError

__all__ = ["chromium_profile_prefix", "remove_abandoned", "safe_dir_name", "temp_path", "universe_dir"]

# Anything outside this set becomes "_": path separators, "..", spaces, shell and URL characters.
_UNSAFE = re.compile(r"[^A-Za-z0-9._-]+")
_MAX_NAME = 120
#: What a sanitised name's hash suffix looks like (see safe_dir_name).
_SUFFIX = re.compile(r"-[0-9a-f]{8}$")


def safe_dir_name(name: str) -> str:
    """One directory name per universe: letters, digits, `.`, `_`, `-`; no leading dot; injective.

    A name that is already safe is kept as it is. A name that sanitising changes gets the first 8
    hex digits of its SHA-256 as a suffix, so two names that sanitise alike ("rates fx" and
    "rates&fx") never share a folder, even when exported by different runs; so does a safe name
    that ends like such a suffix, so no kept name can equal a suffixed one.

    >>> safe_dir_name("rates_fx")
    'rates_fx'
    >>> safe_dir_name("rates & fx/EM")
    'rates_fx_EM-deb5a278'
    >>> safe_dir_name("../../etc")
    'etc-74ccf3c5'
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
    if cleaned != name or _SUFFIX.search(cleaned):
        digest = hashlib.sha256(name.encode("utf-8", "surrogatepass")).hexdigest()[:8]
        cleaned = f"{cleaned}-{digest}"
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


# -- temporary files ---------------------------------------------------------------------------------
# A report is written to a temporary file beside its final name, then renamed over it; a PDF is
# printed by a Chromium with a throw-away profile folder. Both names carry the writer's pid, so a
# later run can tell the leftovers of a killed writer (4 MB of HTML per universe) from a live one's.

_TEMP_FILE = re.compile(r"^\..+\.(\d+)\.[0-9a-f]{32}\.tmp$")
_PROFILE = re.compile(r"^shockflow-chromium-(\d+)-")
#: A leftover whose pid now belongs to another live process is removed after this many seconds.
ABANDONED_AFTER = 24 * 3600.0


def temp_path(path: Path) -> Path:
    """The temporary name a writer of `path` uses: ``.<name>.<pid>.<random>.tmp`` beside it."""
    return path.with_name(f".{path.name}.{os.getpid()}.{uuid.uuid4().hex}.tmp")


def chromium_profile_prefix() -> str:
    """Prefix of a PDF printer's temporary profile folder (in the system temp folder)."""
    return f"shockflow-chromium-{os.getpid()}-"


def _abandoned(pid: int, path: Path, now: float) -> bool:
    if pid == os.getpid():
        return False  # this process's own writer
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return True  # its writer is gone
    except PermissionError:
        pass  # alive, another user's
    try:
        return now - path.lstat().st_mtime > ABANDONED_AFTER  # the pid was reused long since
    except OSError:
        return False


def remove_abandoned(out_dir: str | Path, temp_dir: str | Path | None = None) -> list[Path]:
    """Delete what killed export writers left: temporary report files under
    ``<out_dir>/<date>/<universe>/`` and Chromium profile folders in `temp_dir` (default: the
    system temp folder). A live writer's files are left alone. Returns what was removed."""
    now = time.time()
    removed: list[Path] = []
    root = Path(out_dir)
    if root.is_dir():
        for p in root.glob("*/*/.*.tmp"):
            m = _TEMP_FILE.match(p.name)
            if m and _abandoned(int(m.group(1)), p, now):
                try:
                    p.unlink()
                    removed.append(p)
                except OSError:
                    pass
    temp = Path(temp_dir) if temp_dir is not None else Path(tempfile.gettempdir())
    try:
        profiles = list(temp.glob("shockflow-chromium-*"))
    except OSError:
        profiles = []
    for p in profiles:
        m = _PROFILE.match(p.name)
        if m and p.is_dir() and not p.is_symlink() and _abandoned(int(m.group(1)), p, now):
            shutil.rmtree(p, ignore_errors=True)
            removed.append(p)
    return removed
