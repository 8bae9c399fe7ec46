"""A run's "today": the date in the schedule's time zone (imported by the flow and the schedule).

Kept apart from pipeline.schedule, which imports the flow to deploy it.
"""

from __future__ import annotations

import datetime as dt
from typing import Any
from zoneinfo import ZoneInfo

__all__ = ["schedule_today", "today_in"]


def today_in(timezone: str, *, now: dt.datetime | None = None) -> dt.date:
    """The calendar date in `timezone` (an IANA name) at `now` (default: this instant).

    A night scheduled at 22:00 in ``Asia/Tokyo`` runs at 13:00 UTC: its "today" is Tokyo's date,
    whatever the host's local time zone says. `now` without a time zone is read as UTC.
    """
    instant = now or dt.datetime.now(dt.UTC)
    if instant.tzinfo is None:
        instant = instant.replace(tzinfo=dt.UTC)
    return instant.astimezone(ZoneInfo(str(timezone))).date()


def schedule_today(config: Any, *, now: dt.datetime | None = None) -> dt.date:
    """A run's "today": the date in the config's ``[schedule] timezone`` (see :func:`today_in`).

    Sources reject rows dated after it; it follows the schedule, not the host's local date.
    """
    return today_in(config.schedule.timezone, now=now)
