"""Exported reports offered for download: found under the export directory, and only there.

`latest_reports` lists report files (newest first) by their path relative to the export directory;
`resolve_report` turns a requested relative name back into a file, refusing anything that is not a
plain report file strictly inside the export directory (no ``..``, no absolute paths, no hidden
parts, no symlinks leading out, only known report suffixes).
"""

from __future__ import annotations

import os
import re
from pathlib import Path

__all__ = ["REPORT_SUFFIXES", "latest_reports", "resolve_report"]

#: What counts as a report (the export step writes HTML and PDF reports, CSV/Parquet tables).
REPORT_SUFFIXES = (".html", ".pdf", ".csv", ".parquet", ".zip")
_PART = re.compile(r"^[A-Za-z0-9_][A-Za-z0-9_.\-]{0,127}$")
_MAX_DEPTH = 4
_MAX_FILES = 2000


def _inside(root: Path, candidate: Path) -> bool:
    try:
        candidate.relative_to(root)
    except ValueError:
        return False
    return True


def resolve_report(export_dir: Path | None, name: object) -> Path | None:
    """The report file `name` (relative, ``/``-separated) inside `export_dir`, or None."""
    if export_dir is None or not isinstance(name, str) or not name or len(name) > 512:
        return None
    parts = name.split("/")
    if len(parts) > _MAX_DEPTH + 1 or not all(_PART.match(p) for p in parts):
        return None
    if any(p in {".", ".."} or ".." in p for p in parts):
        return None
    if not parts[-1].lower().endswith(REPORT_SUFFIXES):
        return None
    root = Path(export_dir).resolve()
    candidate = root.joinpath(*parts)
    try:
        real = candidate.resolve(strict=True)
    except (FileNotFoundError, RuntimeError, OSError):
        return None
    if not _inside(root, real) or not real.is_file():
        return None
    return real


def latest_reports(
    export_dir: Path | None, *, limit: int = 8, prefer: str | None = None
) -> list[tuple[str, float]]:
    """Report files under `export_dir` as (relative name, mtime), newest first, at most `limit`.

    Files of universe `prefer` (a folder or file-name prefix of that name) come first, then HTML
    and PDF reports before data tables; only names `resolve_report` would accept are listed.
    """
    if export_dir is None:
        return []
    root = Path(export_dir)
    if not root.is_dir():
        return []
    found: list[tuple[str, float, int]] = []
    seen = 0
    for dirpath, dirnames, filenames in os.walk(root, followlinks=False):
        depth = len(Path(dirpath).relative_to(root).parts)
        dirnames[:] = [d for d in dirnames if _PART.match(d) and depth < _MAX_DEPTH]
        for f in filenames:
            seen += 1
            if seen > _MAX_FILES:
                break
            rel = Path(dirpath, f).relative_to(root).as_posix()
            path = resolve_report(root, rel)
            if path is None:
                continue
            rank = 0 if f.lower().endswith((".html", ".pdf")) else 1
            parts = rel.split("/")
            if prefer and not (prefer in parts[:-1] or parts[-1].startswith(prefer)):
                rank += 2
            found.append((rel, path.stat().st_mtime, rank))
    found.sort(key=lambda x: (x[2], -x[1]))
    return [(rel, mtime) for rel, mtime, _ in found[:limit]]
