"""Schedules: cron arithmetic in the schedule's time zone, and firing due schedules.

A schedule is a standard 5-field cron expression (minute, hour, day of
month, month, day of week; croniter syntax, ``@daily`` and friends too)
read in an IANA time zone, so ``0 2 * * *`` in ``Europe/Paris`` runs at 02:00
Paris time on both sides of a daylight-saving change (a time that does not
exist that night runs at the first minute after the gap).

Firing is safe with many schedulers (every worker process runs one): a slot
is taken by compare-and-set on ``next_run_at``, and jobs are unique per
``(schedule_id, scheduled_for)``. After downtime the missed slots collapse
into one run, and ``next_run_at`` moves to the first slot after now.
"""

from __future__ import annotations

import logging
from datetime import UTC, datetime
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from croniter import CroniterError, croniter
from sqlalchemy.orm import Session, sessionmaker

from storage.models import Graph, Schedule
from storage.repo import jobs as job_repo
from storage.repo import schedules as schedule_repo

from .errors import InvalidSchedule

__all__ = ["check_schedule", "next_run_after", "fire_due"]

log = logging.getLogger("bellwether.schedules")


def check_schedule(cron: str, timezone: str) -> ZoneInfo:
    """Validate a 5-field cron expression and an IANA zone; return the zone."""
    fields = cron.split()
    if not (len(fields) == 5 or (len(fields) == 1 and fields[0].startswith("@"))):
        raise InvalidSchedule(
            f"cron must have 5 fields (minute hour day month weekday), found {len(fields)}",
            field="cron",
            value=cron,
        )
    if not croniter.is_valid(" ".join(fields)):
        raise InvalidSchedule("cron expression is not valid", field="cron", value=cron)
    try:
        return ZoneInfo(timezone)
    except (ZoneInfoNotFoundError, ValueError) as exc:
        raise InvalidSchedule(
            "timezone must be an IANA time zone name such as Europe/Paris or UTC",
            field="timezone",
            value=timezone,
        ) from exc


def next_run_after(cron: str, timezone: str, after: datetime) -> datetime:
    """The first slot strictly after ``after``, in UTC."""
    zone = check_schedule(cron, timezone)
    try:
        nxt = croniter(" ".join(cron.split()), after.astimezone(zone)).get_next(datetime)
    except CroniterError as exc:
        raise InvalidSchedule("cron expression has no future run", field="cron", value=cron) from exc
    assert isinstance(nxt, datetime)
    return nxt.astimezone(UTC)


def fire_due(maker: sessionmaker[Session], now: datetime, *, max_attempts: int, limit: int = 100) -> list[str]:
    """Queue one job for every due schedule; return the ids of the jobs queued here."""
    with maker() as db:
        due = schedule_repo.list_due(db, now, limit)
    queued = []
    for schedule in due:
        job_id = _fire_one(maker, schedule, now, max_attempts)
        if job_id is not None:
            queued.append(job_id)
    return queued


def _fire_one(maker: sessionmaker[Session], schedule: Schedule, now: datetime, max_attempts: int) -> str | None:
    slot = schedule.next_run_at
    try:
        following = next_run_after(schedule.cron, schedule.timezone, now)
    except InvalidSchedule:
        log.exception("schedule %s has an invalid cron expression; deactivated", schedule.id)
        with job_repo.write_session(maker) as db:
            s = db.get(Schedule, schedule.id)
            if s is not None:
                s.active = False
            db.commit()
        return None
    with job_repo.write_session(maker) as db:
        if not schedule_repo.take_slot(db, schedule, due=slot, next_run_at=following, job_id=None):
            return None  # another scheduler fired it
        graph = db.get(Graph, schedule.graph_id)
        version = schedule.version
        if version is None and graph is not None and graph.latest_version > 0:
            version = graph.latest_version
        job, _ = job_repo.add_job(
            db,
            tenant_id=schedule.tenant_id,
            graph_id=schedule.graph_id,
            version=version,
            kind=schedule.kind,
            params=schedule.params,
            now=now,
            priority=schedule.priority,
            max_attempts=max_attempts,
            schedule_id=schedule.id,
            scheduled_for=slot,
        )
        s = db.get(Schedule, schedule.id)
        if s is not None:
            s.last_job_id = job.id
        db.commit()
    log.info("schedule fired", extra={"schedule_id": schedule.id, "job_id": job.id, "slot": slot.isoformat()})
    return job.id
