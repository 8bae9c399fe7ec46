"""A quiet night: decide, before starting Prefect, that a run has nothing to do.

A rerun with nothing new cost 13–15 s on the demo, 8.7 s of it starting Prefect's temporary
server, to find that nothing changed. :func:`quiet_night` answers the same question in-process,
read-only, in well under a second, and only when every one of these holds (any doubt: the flow
runs, and records everything as before):

1. **Sources unchanged.** Each source has a fingerprint (:func:`source_fingerprint`): its settings,
   the run's "today" (it bounds acceptable dates), and every file it reads by path, size and
   modification time in nanoseconds — the rule make and rsync use (common practice). A source
   whose content cannot be known without reading it (``http_csv``, a ``duckdb_sql`` query with
   external access, a kind this module does not know) always needs the flow. The flow records the
   fingerprint taken *before* each read in ``<warehouse>.sources.json`` beside the warehouse, with
   the id of the ingest batch that stored it (:func:`record_fingerprints`); a fingerprint counts
   only while that batch is still the source's newest in the warehouse and succeeded.
2. **Universes fitted.** Each selected universe's newest run succeeded, with the configured
   settings' hash, and started after the newest ingest batch that brought new or revised rows.
3. **No run left running** (the flow would mark it failed), **the snapshot current** (no universe's
   served results lag the warehouse), and, when exporting, **every report present** for each
   universe's newest window date, with no temporary export file of a killed run left.

The flow uses the same fingerprints for each source: one unchanged since its last stored read is
not read again (:func:`unchanged_sources`; its summary row says ``unchanged``), so a night where
one small source brought a new day does not re-read years of history. ``--full`` reads every
source and always runs the flow. The nightly flow itself (and so every scheduled run of
``shockflow schedule``) never skips: the check is the ``shockflow run`` command's.
"""

from __future__ import annotations

import glob
import hashlib
import json
import os
import time
from datetime import date
from pathlib import Path
from typing import TYPE_CHECKING, Any

from pipeline._summary import NightlySummary
from pipeline.jobs import IngestResult, UniverseResult

if TYPE_CHECKING:
    from pipeline.config import Config, SourceConfig

__all__ = [
    "FINGERPRINT_KINDS",
    "fingerprints_file",
    "quiet_night",
    "record_fingerprints",
    "source_fingerprint",
    "unchanged_sources",
]

#: source kinds whose content is known from files by path, size and modification time
FINGERPRINT_KINDS = ("csv", "parquet", "duckdb_sql", "demo")


def fingerprints_file(config: Config) -> Path:
    """``<warehouse>.sources.json``: the sources' fingerprints at their last stored read."""
    path = Path(config.warehouse.path)
    return path.with_name(path.name + ".sources.json")


def _files(source: SourceConfig) -> list[Path] | None:
    """The files `source` reads, or None when its content is not known from local files."""
    if source.kind in ("csv", "parquet"):
        if not source.path:
            return None
        return [Path(f) for f in sorted(glob.glob(source.path, recursive=True)) if Path(f).is_file()] or None
    if source.kind == "duckdb_sql":
        if source.database is None or getattr(source, "external_access", False):
            return None
        db = Path(source.database)
        return [db, db.with_name(db.name + ".wal")]
    if source.kind == "demo":
        from pipeline.sources._demo import DEMO_DIR, DEMO_FILES

        if source.dataset not in DEMO_FILES:
            return None
        return [Path(DEMO_DIR) / DEMO_FILES[source.dataset][0]]
    return None


def source_fingerprint(source: SourceConfig, *, today: date) -> str | None:
    """sha256 of the source's settings, `today` and its files' (path, size, mtime_ns); None when the
    source's content cannot be known without reading it (see the module doc)."""
    if source.kind not in FINGERPRINT_KINDS:
        return None
    files = _files(source)
    if files is None:
        return None
    stats: list[Any] = []
    for f in files:
        try:
            st = f.stat()
        except FileNotFoundError:
            stats.append([str(f), None, None])  # e.g. no .wal beside a DuckDB file
            continue
        except OSError:
            return None
        stats.append([str(f), st.st_size, st.st_mtime_ns])
    text = json.dumps({"source": repr(source), "today": today.isoformat(), "files": stats}, sort_keys=True)
    return hashlib.sha256(text.encode()).hexdigest()


def _read_fingerprints(config: Config) -> dict[str, dict[str, str]]:
    try:
        data = json.loads(fingerprints_file(config).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return {}
    return data if isinstance(data, dict) else {}


def record_fingerprints(config: Config, con: Any, taken: dict[str, str | None], stored: dict[str, bool]) -> None:
    """Record the fingerprint `taken` before each read of a source stored successfully (`stored`),
    with the id of its newest batch; forget those of sources that failed or have none.

    Written atomically (a temporary file, then a rename); a failure to write only costs the next
    quiet night its shortcut.
    """
    known = _read_fingerprints(config)
    for name, ok in stored.items():
        fingerprint = taken.get(name)
        if fingerprint is None or not ok:
            known.pop(name, None)
            continue
        row = con.execute(
            "SELECT batch_id FROM ingest_batches WHERE source = ? ORDER BY started DESC LIMIT 1", [name]
        ).fetchone()
        if row is None:
            known.pop(name, None)
            continue
        known[name] = {"fingerprint": fingerprint, "batch_id": str(row[0])}
    target = fingerprints_file(config)
    tmp = target.with_name(f".{target.name}.{os.getpid()}.tmp")
    try:
        tmp.write_text(json.dumps(known, indent=1, sort_keys=True), encoding="utf-8")
        os.replace(tmp, target)
    except OSError:
        tmp.unlink(missing_ok=True)


def unchanged_sources(config: Config, con: Any, taken: dict[str, str | None]) -> dict[str, str]:
    """Sources whose fingerprint `taken` now equals the one recorded at their newest ingest batch,
    which succeeded: name → that batch's id. The flow does not read them again."""
    known = _read_fingerprints(config)
    out: dict[str, str] = {}
    for name, fingerprint in taken.items():
        entry = known.get(name) or {}
        if fingerprint is None or entry.get("fingerprint") != fingerprint:
            continue
        row = con.execute(
            "SELECT batch_id, status FROM ingest_batches WHERE source = ? ORDER BY started DESC LIMIT 1", [name]
        ).fetchone()
        if row is not None and row[0] == entry.get("batch_id") and row[1] == "succeeded":
            out[name] = str(row[0])
    return out


class _Busy(Exception):
    """Work, or a doubt: the flow must run (the message says why)."""


def quiet_night(
    config: Config,
    *,
    universes: list[str] | None = None,
    full: bool = False,
    export: bool = True,
    today: date,
) -> tuple[NightlySummary | None, str]:
    """(a summary of a night with nothing to do, what was checked) or (None, why the flow must run).

    Read-only: opens the warehouse and the snapshot read-only and writes nothing anywhere.
    """
    t0 = time.perf_counter()
    try:
        summary = _check(config, universes=universes, full=full, export=export, today=today)
    except _Busy as busy:
        return None, str(busy)
    summary.seconds["check"] = time.perf_counter() - t0
    return summary, "nothing to do"


def _check(config: Config, *, universes: list[str] | None, full: bool, export: bool, today: date) -> NightlySummary:
    import duckdb

    if full:
        raise _Busy("--full refits every window")
    warehouse = Path(config.warehouse.path)
    if not warehouse.is_file():
        raise _Busy("no warehouse yet")
    known = _read_fingerprints(config)
    fingerprints: dict[str, str] = {}
    for source in config.sources:
        fp = source_fingerprint(source, today=today)
        if fp is None:
            raise _Busy(f"source {source.name!r} ({source.kind}) can only be checked by reading it")
        entry = known.get(source.name) or {}
        if entry.get("fingerprint") != fp:
            raise _Busy(f"source {source.name!r} changed (or was never stored with a fingerprint)")
        fingerprints[source.name] = entry["batch_id"]
    try:
        con = duckdb.connect(str(warehouse), read_only=True)
    except duckdb.Error as exc:  # e.g. another run holds it: let the flow wait and say so
        raise _Busy(f"warehouse cannot be opened read-only ({' '.join(str(exc).split())[:120]})") from None
    try:
        return _check_warehouse(con, config, fingerprints, universes=universes, export=export, today=today)
    except duckdb.Error as exc:
        raise _Busy(f"warehouse check failed ({' '.join(str(exc).split())[:120]})") from None
    finally:
        con.close()


def _check_warehouse(
    con: Any,
    config: Config,
    batches: dict[str, str],
    *,
    universes: list[str] | None,
    export: bool,
    today: date,
) -> NightlySummary:
    checked: list[str] = []
    summary = NightlySummary(orchestrated=False, today=today, checked=checked)
    for name, batch_id in batches.items():
        row = con.execute(
            "SELECT batch_id, status, rows_read FROM ingest_batches WHERE source = ? ORDER BY started DESC LIMIT 1",
            [name],
        ).fetchone()
        if row is None or row[0] != batch_id or row[1] != "succeeded":
            raise _Busy(f"source {name!r}: its newest ingest is not the one fingerprinted")
        checked.append(f"source {name}: files unchanged since ingest {batch_id} (path, size, modification time)")
        summary.ingest.append(IngestResult(name, "unchanged", message=f"unchanged since {batch_id}"))
    running = con.execute("SELECT count(*) FROM runs WHERE status = 'running'").fetchone()
    if running and running[0]:
        raise _Busy(f"{running[0]} run(s) left running by an earlier process")
    checked.append("no run left running")
    newest_change = con.execute(
        "SELECT max(coalesce(finished, started)) FROM ingest_batches WHERE rows_new > 0 OR rows_revised > 0"
    ).fetchone()
    changed_at = newest_change[0] if newest_change else None
    selected = [config.universe(n) for n in universes] if universes else list(config.universes)
    for universe in selected:
        row = con.execute(
            "SELECT run_id, status, config_hash, started FROM runs WHERE universe = ? ORDER BY started DESC LIMIT 1",
            [universe.name],
        ).fetchone()
        if row is None:
            raise _Busy(f"universe {universe.name!r} has never run")
        run_id, status, config_hash, started = row
        if status != "succeeded":
            raise _Busy(f"universe {universe.name!r}: its last run {status}")
        if config_hash != universe.config_hash:
            raise _Busy(f"universe {universe.name!r}: its settings changed")
        if changed_at is not None and started < changed_at:
            raise _Busy(f"universe {universe.name!r}: new or revised rows arrived after its last run")
        windows = con.execute("SELECT count(*) FROM window_fits WHERE universe = ?", [universe.name]).fetchone()
        n = int(windows[0]) if windows else 0
        checked.append(f"universe {universe.name}: last run {run_id} succeeded with these settings after the newest data")
        summary.universes.append(
            UniverseResult(universe.name, "unchanged", run_id, reused=n, reason="nothing changed (checked before starting Prefect)")
        )
    from pipeline.publish import stale_universes

    stale = stale_universes(con, config.warehouse.snapshot)
    if stale is None:
        raise _Busy("no readable snapshot")
    if stale:
        raise _Busy(f"snapshot lags the warehouse for {', '.join(map(repr, stale))}")
    checked.append(f"snapshot {config.warehouse.snapshot}: current")
    summary.publish_message = "nothing changed; the served snapshot is already current"
    if export and config.export.formats:
        from pipeline.jobs import missing_exports_step

        root = Path(config.export.directory)
        if root.is_dir() and any(root.glob("*/*/.*.tmp")):
            raise _Busy("temporary export files of a killed run are left")
        missing = missing_exports_step(config, [u.name for u in selected])
        if missing:
            raise _Busy(f"reports missing for {', '.join(map(repr, missing))}")
        checked.append(f"exports under {config.export.directory}: every report of the newest window date present")
    return summary
