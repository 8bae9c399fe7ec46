"""What a nightly run did (`NightlySummary`), importable without Prefect.

pipeline.flows fills it as the flow runs; pipeline.quiet fills it when a check before starting
Prefect finds nothing to do. The `shockflow` command prints it as tables or as JSON.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import date
from typing import Any

from pipeline import jobs
from pipeline.jobs import IngestResult, UniverseResult

__all__ = ["OK_STATUSES", "NightlySummary", "summary_rows"]

#: statuses of a source or universe that are not failures: done now, or checked and unchanged
OK_STATUSES = ("succeeded", "unchanged")


@dataclass
class NightlySummary:
    """What a nightly run did; `exit_code` 0 ok, 2 partial, 1 nothing ran (see jobs.exit_code)."""

    ingest: list[IngestResult] = field(default_factory=list)
    universes: list[UniverseResult] = field(default_factory=list)
    published: bool = False
    publish_message: str | None = None
    publish_failed: bool = False
    exported: dict[str, list[str]] = field(default_factory=dict)
    export_message: str | None = None
    interrupted_marked: int = 0
    #: temporary export files and folders of a killed run, removed at the start of this one
    abandoned_removed: int = 0
    seconds: dict[str, float] = field(default_factory=dict)
    #: Prefect flow run ids: the nightly flow's, then its work subflow's (where the logs are)
    flow_run_ids: list[str] = field(default_factory=list)
    #: False when a check before starting Prefect found nothing to do (pipeline.quiet): no flow ran
    orchestrated: bool = True
    #: what that check looked at, one line each (empty when the flow ran)
    checked: list[str] = field(default_factory=list)
    #: the run's "today" (the date in [schedule] timezone): sources reject rows dated after it
    today: date | None = None

    @property
    def failures(self) -> list[str]:
        """One line per failure, each naming what failed once ("source 'x': ...")."""
        out = [_prefixed(f"source {r.source!r}", r.message) for r in self.ingest if r.status not in OK_STATUSES]
        out += [_prefixed(f"universe {r.universe!r}", r.message) for r in self.universes if r.status not in OK_STATUSES]
        if self.publish_message and not self.published and self.publish_failed:
            out.append(_prefixed("publish", self.publish_message))
        if self.export_message:
            out.append(_prefixed("export", self.export_message))
        return out

    @property
    def exit_code(self) -> int:
        ok = sum(r.status in OK_STATUSES for r in self.ingest) + sum(r.status in OK_STATUSES for r in self.universes)
        return jobs.exit_code(len(self.failures), ok)

    @property
    def revisions(self) -> int:
        return sum(r.rows_revised for r in self.ingest)


def _prefixed(prefix: str, message: str | None) -> str:
    """`prefix: message`, unless the message already starts with that prefix (errors raised by a
    step often name their source or universe themselves)."""
    text = message or "failed (no reason recorded)"
    return text if text.startswith(f"{prefix}:") else f"{prefix}: {text}"


def summary_rows(summary: NightlySummary) -> list[dict[str, Any]]:
    """The run summary as table rows (one per source and universe, then publish and export)."""
    rows: list[dict[str, Any]] = [
        {
            "kind": "source", "name": r.source, "status": r.status, "rows read": r.rows_read, "new": r.rows_new,
            "revised": r.rows_revised, "fitted": None, "skipped": None, "reused": None, "seconds": round(r.seconds, 2),
            "note": r.message or "",
        }
        for r in summary.ingest
    ]
    rows += [
        {
            "kind": "universe", "name": r.universe, "status": r.status, "rows read": None, "new": None,
            "revised": None, "fitted": r.fitted, "skipped": r.skipped, "reused": r.reused,
            "seconds": round(sum(r.seconds.values()), 2), "note": r.message or r.reason,
        }
        for r in summary.universes
    ]
    publish = "succeeded" if summary.published else ("failed" if summary.publish_failed else "skipped")
    rows.append({"kind": "publish", "name": "snapshot", "status": publish, "note": summary.publish_message or ""})
    n_files = sum(len(v) for v in summary.exported.values())
    rows.append({
        "kind": "export", "name": f"{len(summary.exported)} universe(s), {n_files} file(s)",
        "status": "failed" if summary.export_message else ("succeeded" if n_files else "skipped"),
        "note": summary.export_message or "",
    })
    return rows


