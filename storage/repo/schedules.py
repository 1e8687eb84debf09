"""Schedules: plain functions over a Session; the caller owns the transaction.

The cron arithmetic lives in ``service.jobs.schedules``; here a slot is
taken by compare-and-set on ``next_run_at`` (:func:`take_slot`), so of
several schedulers looking at one due schedule exactly one wins; the unique
``(schedule_id, scheduled_for)`` on jobs backs it up.
"""

from __future__ import annotations

from datetime import datetime
from typing import Any

from sqlalchemy import select, tuple_, update
from sqlalchemy.orm import Session

from ..errors import NotFound
from ..models import Schedule, new_id
from .graphs import decode_cursor, encode_cursor

__all__ = [
    "add_schedule",
    "get_schedule",
    "list_schedules",
    "delete_schedule",
    "list_due",
    "take_slot",
]


def add_schedule(
    db: Session,
    *,
    tenant_id: str,
    graph_id: str,
    cron: str,
    timezone: str,
    kind: str,
    params: dict[str, Any],
    version: int | None,
    next_run_at: datetime,
    now: datetime,
    priority: int = 0,
) -> Schedule:
    schedule = Schedule(
        id=new_id("s"),
        tenant_id=tenant_id,
        graph_id=graph_id,
        cron=cron,
        timezone=timezone,
        kind=kind,
        params=params,
        version=version,
        priority=priority,
        active=True,
        next_run_at=next_run_at,
        created_at=now,
    )
    db.add(schedule)
    db.flush()
    return schedule


def get_schedule(db: Session, tenant_id: str, schedule_id: str) -> Schedule:
    schedule = db.get(Schedule, schedule_id, populate_existing=True)
    if schedule is None or schedule.tenant_id != tenant_id:
        raise NotFound("schedule not found", resource="schedule", id=schedule_id)
    return schedule


def list_schedules(
    db: Session, tenant_id: str, *, limit: int, cursor: str | None = None, graph_id: str | None = None
) -> tuple[list[Schedule], str | None]:
    """Newest first, cursor-paginated (ValueError on a forged cursor)."""
    q = select(Schedule).where(Schedule.tenant_id == tenant_id)
    if graph_id is not None:
        q = q.where(Schedule.graph_id == graph_id)
    if cursor:
        when, ident = decode_cursor(cursor)
        q = q.where(tuple_(Schedule.created_at, Schedule.id) < tuple_(when, ident))
    q = q.order_by(Schedule.created_at.desc(), Schedule.id.desc()).limit(limit + 1)
    rows = list(db.execute(q, execution_options={"populate_existing": True}).scalars())
    nxt = encode_cursor(rows[limit - 1].created_at, rows[limit - 1].id) if len(rows) > limit else None
    return rows[:limit], nxt


def delete_schedule(db: Session, schedule: Schedule) -> None:
    """Delete the schedule; its past jobs stay (and age out with retention)."""
    db.delete(schedule)
    db.flush()


def list_due(db: Session, now: datetime, limit: int = 100) -> list[Schedule]:
    q = (
        select(Schedule)
        .where(Schedule.active.is_(True), Schedule.next_run_at <= now)
        .order_by(Schedule.next_run_at)
        .limit(limit)
    )
    return list(db.execute(q).scalars())


def take_slot(
    db: Session, schedule: Schedule, *, due: datetime, next_run_at: datetime, job_id: str | None
) -> bool:
    """Move ``next_run_at`` from ``due`` to ``next_run_at``; False if another scheduler did first."""
    res = db.execute(
        update(Schedule)
        .where(Schedule.id == schedule.id, Schedule.next_run_at == due)
        .values(next_run_at=next_run_at, last_run_at=due, last_job_id=job_id)
        .execution_options(synchronize_session=False)
    )
    return bool(res.rowcount == 1)  # type: ignore[attr-defined]
