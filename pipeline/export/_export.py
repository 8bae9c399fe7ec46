"""The export entry points: one universe (`export_universe`) or all of them (`export_all`)."""

from __future__ import annotations

import datetime as dt
import importlib.metadata
import logging
import os
from collections.abc import Iterable, Sequence
from pathlib import Path

from pipeline.errors import ExportError
from pipeline.export._data import ReportData, gather
from pipeline.export._extracts import write_extracts
from pipeline.export._paths import remove_abandoned, safe_dir_name, temp_path, universe_dir
from pipeline.export._pdf import find_chromium, print_pdf
from pipeline.export._report import render_report
from pipeline.export._snapshot import Snapshot, open_snapshot

__all__ = ["FORMATS", "export_all", "export_universe"]

log = logging.getLogger("shockflow.export")

#: Every export format, in the order written.
FORMATS = ("html", "csv", "parquet", "pdf")


def _code_version() -> str:
    try:
        return importlib.metadata.version("shockflow")
    except importlib.metadata.PackageNotFoundError:
        return "source checkout"


def _check_formats(formats: Iterable[str]) -> tuple[str, ...]:
    if isinstance(formats, str):
        formats = (formats,)
    chosen = tuple(dict.fromkeys(str(f).lower() for f in formats))
    bad = [f for f in chosen if f not in FORMATS]
    if bad or not chosen:
        msg = (f"`formats` {tuple(formats)!r} contains unknown format(s) {bad!r}; "
               f"use some of: {', '.join(FORMATS)}" if bad else
               f"`formats` is empty; use some of: {', '.join(FORMATS)}")
        raise ExportError(msg)
    return chosen


def _check_as_of(as_of: dt.date | str | None) -> dt.date | None:
    if as_of is None or (isinstance(as_of, dt.date) and not isinstance(as_of, dt.datetime)):
        return as_of
    if isinstance(as_of, dt.datetime):
        return as_of.date()
    try:
        return dt.date.fromisoformat(str(as_of))
    except ValueError as exc:
        msg = f"`as_of` {as_of!r} is not a date; use YYYY-MM-DD, e.g. '2024-03-28'"
        raise ExportError(msg) from exc


def _write_text_atomic(path: Path, text: str) -> None:
    """Write to a temporary file beside `path`, then `os.replace` it: never a half report.

    (A plain `open(..., "x")` rather than `mkstemp`, so the file gets the usual umask mode.)
    """
    tmp = temp_path(path)
    try:
        with open(tmp, "x", encoding="utf-8") as fh:
            fh.write(text)
        os.replace(tmp, path)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise


def _write(data: ReportData, out_dir: str | Path, formats: tuple[str, ...],
           chromium_path: str | Path | None) -> list[Path]:
    directory = universe_dir(out_dir, data.report_date, data.info.name)
    directory.mkdir(parents=True, exist_ok=True)
    stem = f"{safe_dir_name(data.info.name)}-{data.report_date.isoformat()}"
    written: list[Path] = []
    html_path = directory / f"{stem}.html"
    if "html" in formats or "pdf" in formats:
        text = render_report(data, generated=dt.datetime.now().astimezone(),
                             version=_code_version())
        _write_text_atomic(html_path, text)
        if "html" in formats:
            written.append(html_path)
    written += write_extracts(data, directory, csv="csv" in formats, parquet="parquet" in formats)
    if "pdf" in formats:
        browser = find_chromium(chromium_path)
        if browser is None:
            log.warning("PDF of %r skipped: no headless Chromium found (install Debian's "
                        "`chromium` to get PDFs); the HTML report is written", data.info.name)
        else:
            written.append(print_pdf(html_path, directory / f"{stem}.pdf", browser=browser))
        if "html" not in formats:
            html_path.unlink(missing_ok=True)
    log.info("exported %s (%s) to %s", data.info.name, ", ".join(formats), directory)
    return written


def export_universe(
    snapshot_path: str | Path,
    universe: str,
    out_dir: str | Path,
    *,
    formats: Sequence[str] = FORMATS,
    as_of: dt.date | str | None = None,
    chromium_path: str | Path | None = None,
) -> list[Path]:
    """Write one universe's report and extracts under `<out_dir>/<date>/<universe>/`.

    Parameters
    ----------
    snapshot_path : the serving snapshot (DuckDB file), opened read-only.
    universe : universe name as stored in the snapshot (the directory name is a sanitised copy:
        letters, digits, `.`, `_`, `-`); the directory must resolve inside `out_dir`.
    out_dir : export root (`[export] directory`).
    formats : any of "html", "csv", "parquet", "pdf". "pdf" needs a headless Chromium; when none
        is found the PDF is skipped with a logged warning.
    as_of : report date (YYYY-MM-DD); results of windows ending after it are left out and the
        directory is named by it. Default: the universe's latest window end.
    chromium_path : the browser that prints the PDF (default: `chromium` on PATH).

    Returns
    -------
    The paths written: `<universe>-<date>.html`, one `<table>.csv` / `<table>.parquet` per
    extract table, `<universe>-<date>.pdf`.
    """
    fmts = _check_formats(formats)
    day = _check_as_of(as_of)
    if "pdf" in fmts and chromium_path is not None:
        find_chromium(chromium_path)  # a wrong browser path fails before any work
    with open_snapshot(snapshot_path) as snap:
        data = gather(snap, universe, day)
    return _write(data, out_dir, fmts, chromium_path)


def export_all(
    snapshot_path: str | Path,
    out_dir: str | Path,
    *,
    formats: Sequence[str] = FORMATS,
    universes: Iterable[str] | None = None,
    as_of: dt.date | str | None = None,
    chromium_path: str | Path | None = None,
) -> dict[str, list[Path]]:
    """Export every universe in the snapshot (or those named in `universes`).

    One universe that fails does not stop the others; after all are tried, an `ExportError`
    names each failure (its `written` attribute holds what was written). Returns universe →
    paths written.
    """
    fmts = _check_formats(formats)
    day = _check_as_of(as_of)
    if "pdf" in fmts and chromium_path is not None:
        find_chromium(chromium_path)
    for p in remove_abandoned(out_dir):
        log.info("removed %s, left by an export that was killed", p)
    written: dict[str, list[Path]] = {}
    failures: list[str] = []
    snap: Snapshot
    with open_snapshot(snapshot_path) as snap:
        names = list(universes) if universes is not None else snap.universe_names()
        seen: dict[str, str] = {}
        for name in names:
            safe = safe_dir_name(name)
            if safe in seen:
                msg = (f"universes {seen[safe]!r} and {name!r} share the export directory name "
                       f"{safe!r}; rename one of them")
                raise ExportError(msg)
            seen[safe] = name
        for name in names:
            try:
                written[name] = _write(gather(snap, name, day), out_dir, fmts, chromium_path)
            except ExportError as exc:
                log.error("export of universe %r failed: %s", name, exc)
                failures.append(f"{name!r}: {exc}")
    if failures:
        msg = f"{len(failures)} of {len(names)} universe export(s) failed: " + "; ".join(failures)
        err = ExportError(msg)
        err.written = written
        raise err
    return written
