"""Schedules: cron arithmetic in the schedule's time zone, and firing due schedules.

A schedule is a standard 5-field cron expression (minute, hour, day of
month, month, day of week; croniter syntax, ``@daily`` and friends too)
read in an IANA time zone, so ``0 2 * * *`` in ``Europe/Paris`` runs at 02:00
Paris time on both sides of a daylight-saving change (a time that does not
exist that night runs at the first minute after the gap).

When a schedule fires, params that name another job's result are completed then,
as :func:`service.jobs.queueing.queue_job` completes them (the kind's ``resolve``):
a schedule with ``exclude_flagged`` reads the flagging job's result at each firing,
and a rule that cannot be read (a job of another graph or a newer version, not
succeeded) makes that firing's job ``failed`` with the problem as its error.

Firing is safe with many schedulers (every worker process runs one): a slot
is taken by compare-and-set on ``next_run_at``, and jobs are unique per
``(schedule_id, scheduled_for)``. After downtime the missed slots collapse
into one run, and ``next_run_at`` moves to the first slot after now.
"""

from __future__ import annotations

import logging
from datetime import UTC, datetime
from typing import Any
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from croniter import CroniterError, croniter
from sqlalchemy.orm import Session, sessionmaker

from service.analytics.errors import AnalyticsError
from service.usecases.loading import load_version
from storage.errors import StorageError
from storage.models import Graph, Schedule
from storage.repo import graphs as graph_repo
from storage.repo import jobs as job_repo
from storage.repo import schedules as schedule_repo

from . import registry, webhooks
from .errors import InvalidSchedule, JobsError, problem_document

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
    with maker() as db:  # before the write transaction: completing the params may load the version
        version, params, error = _completed(db, schedule)
    with job_repo.write_session(maker) as db:
        if not schedule_repo.take_slot(db, schedule, due=slot, next_run_at=following, job_id=None):
            return None  # another scheduler fired it
        job, _ = job_repo.add_job(
            db,
            tenant_id=schedule.tenant_id,
            graph_id=schedule.graph_id,
            version=version,
            kind=schedule.kind,
            params=params,
            now=now,
            priority=schedule.priority,
            max_attempts=max_attempts,
            schedule_id=schedule.id,
            scheduled_for=slot,
            error=error,
        )
        if error is not None:
            webhooks.queue_job_event(db, job, now)
        s = db.get(Schedule, schedule.id)
        if s is not None:
            s.last_job_id = job.id
        db.commit()
    if error is not None:
        log.warning("schedule fired a job that cannot run: %s", error["detail"],
                    extra={"schedule_id": schedule.id, "job_id": job.id})
        return job.id
    log.info("schedule fired", extra={"schedule_id": schedule.id, "job_id": job.id, "slot": slot.isoformat()})
    return job.id


def _completed(db: Session, schedule: Schedule) -> tuple[int | None, dict[str, Any], dict[str, Any] | None]:
    """The version to run on (the schedule's, or the newest), the params to store, and the problem, if any.

    Params that name another job's result are read now, by the kind's ``resolve``
    as a job queued by hand; when that is refused the params are stored as they
    were and the problem is returned, to be the job's error.
    """
    graph = db.get(Graph, schedule.graph_id)
    version = schedule.version
    if version is None and graph is not None and graph.latest_version > 0:
        version = graph.latest_version
    try:
        kind = registry.get_kind(schedule.kind)
    except JobsError:
        return version, schedule.params, None  # the worker fails it with the kind's own problem
    if kind.resolve is None or graph is None or version is None:
        return version, schedule.params, None
    try:
        params = registry.parse_params(kind, schedule.params)
        row = graph_repo.get_version(db, graph, version)
        done = kind.resolve(params, db, schedule.tenant_id, lambda: load_version(db, row), graph_id=graph.id,
                            version=version)
    except (AnalyticsError, JobsError, StorageError) as exc:
        return version, schedule.params, problem_document(exc)
    return version, schedule.params if done is params else done.model_dump(mode="json"), None
