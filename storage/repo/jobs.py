"""The job queue: plain functions over a Session; the caller owns the transaction.

Every function that acts for a worker names the run it acts for by the
claimed :class:`Job` snapshot (``id``, ``worker_id``, ``attempts``) and
compares-and-sets on it, so a worker whose lease was taken over can no
longer change the job: it gets :class:`LeaseLost` instead. That is what
makes "never done twice to completion" hold on both databases.

Times are passed in (``now``) so callers can use a fake clock.

On SQLite, open write transactions with :func:`write_session`, which issues
``BEGIN IMMEDIATE``: a deferred transaction that reads and then writes can
fail at once with ``SQLITE_BUSY`` when another process wrote in between,
while an immediate one waits for the lock (busy timeout).

A failed job's ``error`` is a document the caller built (the service's
``problem_document``); storage stores it as given and writes none itself.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import Any

from numpy.typing import NDArray
from sqlalchemy import delete, func, select, tuple_, update
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from ..db import write_session
from ..errors import Conflict, LeaseLost, NotFound
from ..models import FINISHED_STATUSES, Job, new_id
from .graphs import decode_cursor, encode_cursor
from .results import add_result

__all__ = [
    "write_session",
    "add_job",
    "get_job",
    "get_by_idempotency_key",
    "get_job_any_tenant",
    "get_job_status",
    "any_due",
    "any_lease_expired",
    "QueueFigures",
    "get_queue_figures",
    "list_jobs",
    "count_queued",
    "claim_next",
    "heartbeat",
    "update_progress",
    "requeue_expired",
    "ExpiredJobs",
    "finish_success",
    "finish_failure",
    "finish_cancelled",
    "release",
    "cancel",
    "purge",
]


def add_job(
    db: Session,
    *,
    tenant_id: str,
    graph_id: str | None,
    version: int | None,
    kind: str,
    params: dict[str, Any],
    now: datetime,
    priority: int = 0,
    max_attempts: int = 3,
    idempotency_key: str | None = None,
    request_hash: str | None = None,
    schedule_id: str | None = None,
    scheduled_for: datetime | None = None,
    error: dict[str, Any] | None = None,
) -> tuple[Job, bool]:
    """Queue a job; return ``(job, created)``.

    With ``error`` (a problem document) the job is recorded ``failed`` at once, never
    run: a schedule's firing whose params could not be completed.

    With an idempotency key already used by this tenant, the existing job is
    returned (``created`` False) when ``request_hash`` matches, and
    :class:`Conflict` is raised when it does not. Two racing inserts with one
    key are settled by the unique constraint.
    """
    if idempotency_key is not None:
        existing = get_by_idempotency_key(db, tenant_id, idempotency_key, request_hash)
        if existing is not None:
            return existing, False
    job = Job(
        id=new_id("j"),
        tenant_id=tenant_id,
        graph_id=graph_id,
        version=version,
        kind=kind,
        params=params,
        status="queued" if error is None else "failed",
        error=error,
        finished_at=None if error is None else now,
        priority=priority,
        attempts=0,
        max_attempts=max_attempts,
        run_after=now,
        progress=0.0,
        cancel_requested=False,
        idempotency_key=idempotency_key,
        request_hash=request_hash,
        schedule_id=schedule_id,
        scheduled_for=scheduled_for,
        created_at=now,
    )
    try:
        with db.begin_nested():
            db.add(job)
            db.flush()
    except IntegrityError:
        if idempotency_key is None:
            raise
        existing = get_by_idempotency_key(db, tenant_id, idempotency_key, request_hash)
        if existing is None:
            raise
        return existing, False
    return job, True


def get_by_idempotency_key(db: Session, tenant_id: str, key: str, request_hash: str | None) -> Job | None:
    """The tenant's job made with ``key``; :class:`Conflict` if it was made from another request."""
    job = db.execute(
        select(Job).where(Job.tenant_id == tenant_id, Job.idempotency_key == key)
    ).scalar_one_or_none()
    if job is not None and job.request_hash != request_hash:
        raise Conflict(
            "Idempotency-Key was already used with a different request",
            field="Idempotency-Key",
            job_id=job.id,
        )
    return job


def get_job(db: Session, tenant_id: str, job_id: str) -> Job:
    """The tenant's job; another tenant's job is :class:`NotFound` too."""
    job = db.get(Job, job_id, populate_existing=True)
    if job is None or job.tenant_id != tenant_id:
        raise NotFound("job not found", resource="job", id=job_id)
    return job


def get_job_status(db: Session, tenant_id: str, job_id: str) -> str | None:
    """One job's status (one primary-key read), or None when the tenant has no such job."""
    status: str | None = db.execute(
        select(Job.status).where(Job.id == job_id, Job.tenant_id == tenant_id)
    ).scalar_one_or_none()
    return status


@dataclass(frozen=True)
class QueueFigures:
    """The queue as every worker and host sees it, read at one moment."""

    jobs: list[tuple[str, str, int]]  # (kind, status, count)
    due: list[tuple[str, int]]  # (kind, queued jobs whose run time has come)
    oldest_due: datetime | None  # run_after of the oldest due queued job
    busy_workers: int  # distinct worker ids running a job
    expired_leases: int  # running jobs whose lease has run out
    oldest_lease: datetime | None  # the stalest running job's lease end


def get_queue_figures(db: Session, now: datetime) -> QueueFigures:
    """Counts by kind and status, due jobs, busy workers and leases (four aggregate queries)."""
    jobs = [(k, s, int(n)) for k, s, n in db.execute(
        select(Job.kind, Job.status, func.count()).group_by(Job.kind, Job.status))]
    due = [(k, int(n)) for k, n in db.execute(
        select(Job.kind, func.count()).where(Job.status == "queued", Job.run_after <= now).group_by(Job.kind))]
    oldest = db.execute(
        select(func.min(Job.run_after)).where(Job.status == "queued", Job.run_after <= now)
    ).scalar_one()
    busy, expired, oldest_lease = db.execute(
        select(
            func.count(func.distinct(Job.worker_id)),
            func.count().filter(Job.lease_until < now),
            func.min(Job.lease_until),
        ).where(Job.status == "running")
    ).one()
    return QueueFigures(jobs, due, oldest, int(busy), int(expired), oldest_lease)


def any_due(db: Session, now: datetime) -> bool:
    """Whether a queued job's run time has come (a cheap read before the write transaction of a claim)."""
    return db.execute(select(Job.id).where(Job.status == "queued", Job.run_after <= now).limit(1)).first() is not None


def any_lease_expired(db: Session, now: datetime) -> bool:
    """Whether a running job's lease has run out (read before the write transaction of a requeue)."""
    return db.execute(
        select(Job.id).where(Job.status == "running", Job.lease_until < now).limit(1)
    ).first() is not None


def get_job_any_tenant(db: Session, job_id: str) -> Job:
    """For workers, which serve every tenant."""
    job = db.get(Job, job_id, populate_existing=True)
    if job is None:
        raise NotFound("job not found", resource="job", id=job_id)
    return job


def list_jobs(
    db: Session,
    tenant_id: str,
    *,
    limit: int,
    cursor: str | None = None,
    graph_id: str | None = None,
    status: str | None = None,
    kind: str | None = None,
    schedule_id: str | None = None,
) -> tuple[list[Job], str | None]:
    """Newest first; the cursor continues after the last job returned (ValueError if forged)."""
    q = select(Job).where(Job.tenant_id == tenant_id)
    if graph_id is not None:
        q = q.where(Job.graph_id == graph_id)
    if status is not None:
        q = q.where(Job.status == status)
    if kind is not None:
        q = q.where(Job.kind == kind)
    if schedule_id is not None:
        q = q.where(Job.schedule_id == schedule_id)
    if cursor:
        when, ident = decode_cursor(cursor)
        q = q.where(tuple_(Job.created_at, Job.id) < tuple_(when, ident))
    q = q.order_by(Job.created_at.desc(), Job.id.desc()).limit(limit + 1)
    rows = list(db.execute(q, execution_options={"populate_existing": True}).scalars())
    nxt = encode_cursor(rows[limit - 1].created_at, rows[limit - 1].id) if len(rows) > limit else None
    return rows[:limit], nxt


def count_queued(db: Session, tenant_id: str) -> int:
    q = select(func.count()).select_from(Job).where(Job.tenant_id == tenant_id, Job.status == "queued")
    return int(db.execute(q).scalar_one())


def claim_next(db: Session, worker_id: str, lease_seconds: float, now: datetime) -> Job | None:
    """Take the oldest eligible queued job for ``worker_id``; None when there is none.

    Eligible: ``queued`` with ``run_after <= now``; highest priority first,
    then oldest. One statement, ``UPDATE job ... WHERE id = (SELECT ...
    LIMIT 1 FOR UPDATE SKIP LOCKED) RETURNING``: on PostgreSQL the row lock
    lets concurrent workers skip each other's pick; on SQLite (no row
    locks, ``FOR UPDATE`` is not rendered) the statement runs under the
    database write lock, taken up front by :func:`write_session`.
    """
    pick = (
        select(Job.id)
        .where(Job.status == "queued", Job.run_after <= now)
        .order_by(Job.priority.desc(), Job.created_at, Job.id)
        .limit(1)
        .with_for_update(skip_locked=True)
        .scalar_subquery()
    )
    stmt = (
        update(Job)
        .where(Job.id == pick, Job.status == "queued")
        .values(
            status="running",
            worker_id=worker_id,
            attempts=Job.attempts + 1,
            lease_until=now + timedelta(seconds=lease_seconds),
            started_at=now,
            cancel_requested=False,
        )
        .returning(Job)
        .execution_options(synchronize_session=False)
    )
    job = db.execute(stmt).scalars().one_or_none()
    if job is not None:
        db.refresh(job)
    return job


def _ours(job: Job, owner: str) -> Any:
    return (
        (Job.id == job.id)
        & (Job.status == "running")
        & (Job.worker_id == owner)
        & (Job.attempts == job.attempts)
    )


def _update_ours(db: Session, job: Job, owner: str, **values: Any) -> None:
    """Update the run ``(job.id, owner, job.attempts)`` if it is still running; else LeaseLost."""
    res = db.execute(
        update(Job).where(_ours(job, owner)).values(**values).execution_options(synchronize_session=False)
    )
    if res.rowcount != 1:  # type: ignore[attr-defined]
        raise LeaseLost(job_id=job.id, worker_id=owner)


def heartbeat(db: Session, job: Job, worker_id: str, lease_seconds: float, now: datetime) -> bool:
    """Extend the lease; return whether cancellation was requested. :class:`LeaseLost` if not ours."""
    _update_ours(db, job, worker_id, lease_until=now + timedelta(seconds=lease_seconds))
    return bool(db.execute(select(Job.cancel_requested).where(Job.id == job.id)).scalar_one())


def update_progress(
    db: Session,
    job: Job,
    worker_id: str,
    fraction: float,
    message: str | None,
    *,
    lease_seconds: float,
    now: datetime,
) -> bool:
    """Record progress (clamped to 0..1) and extend the lease; return cancel_requested."""
    _update_ours(
        db,
        job,
        worker_id,
        progress=min(max(float(fraction), 0.0), 1.0),
        progress_message=None if message is None else message[:200],
        lease_until=now + timedelta(seconds=lease_seconds),
    )
    return bool(db.execute(select(Job.cancel_requested).where(Job.id == job.id)).scalar_one())


@dataclass(frozen=True)
class ExpiredJobs:
    """What :func:`requeue_expired` did: job ids put back, and jobs it ended."""

    requeued: list[str]
    failed: list[Job]
    cancelled: list[Job]


def requeue_expired(db: Session, now: datetime, *, lost_error: Callable[[Job], dict[str, Any]]) -> ExpiredJobs:
    """Return running jobs whose lease ran out to the queue, or end them.

    A job that had cancellation requested ends ``cancelled``; one that has
    used all its attempts ends ``failed`` with ``lost_error(job)`` as its error
    (the caller builds that document; storage only stores it).
    """
    base = (Job.status == "running") & (Job.lease_until < now)
    cancelled = list(
        db.execute(
            update(Job)
            .where(base & Job.cancel_requested.is_(True))
            .values(status="cancelled", finished_at=now, worker_id=None, lease_until=None)
            .returning(Job)
            .execution_options(synchronize_session=False)
        ).scalars()
    )
    expired = list(
        db.execute(
            select(Job).where(base & (Job.attempts >= Job.max_attempts)).with_for_update(skip_locked=True)
        ).scalars()
    )
    failed: list[Job] = []
    for job in expired:
        res = db.execute(
            update(Job)
            .where(Job.id == job.id, base)
            .values(status="failed", finished_at=now, worker_id=None, lease_until=None, error=lost_error(job))
            .execution_options(synchronize_session=False)
        )
        if res.rowcount == 1:  # type: ignore[attr-defined]
            db.refresh(job)
            failed.append(job)
    requeued = list(
        db.execute(
            update(Job)
            .where(base & (Job.attempts < Job.max_attempts))
            .values(status="queued", run_after=now, worker_id=None, lease_until=None)
            .returning(Job.id)
            .execution_options(synchronize_session=False)
        ).scalars()
    )
    for j in cancelled:
        db.refresh(j)
    return ExpiredJobs(requeued=requeued, failed=failed, cancelled=cancelled)


def finish_success(
    db: Session,
    job: Job,
    worker_id: str,
    data: dict[str, Any],
    arrays: dict[str, NDArray[Any]],
    now: datetime,
) -> str:
    """Mark the job succeeded and store its result in this transaction; return the ETag.

    :class:`LeaseLost` (and nothing written) when the run is no longer ours.
    """
    _update_ours(
        db,
        job,
        worker_id,
        status="succeeded",
        progress=1.0,
        finished_at=now,
        lease_until=None,
        error=None,
        version=job.version,
    )
    return add_result(db, job.id, data, arrays, now)


def finish_failure(
    db: Session,
    job: Job,
    worker_id: str,
    error: dict[str, Any],
    now: datetime,
    retry_at: datetime | None = None,
) -> str:
    """Record a failed run: back to the queue at ``retry_at``, or ``failed``; return the status."""
    if retry_at is not None and job.attempts < job.max_attempts:
        _update_ours(
            db, job, worker_id, status="queued", run_after=retry_at, worker_id=None, lease_until=None, error=error
        )
        return "queued"
    _update_ours(db, job, worker_id, status="failed", finished_at=now, lease_until=None, error=error)
    return "failed"


def finish_cancelled(db: Session, job: Job, worker_id: str, now: datetime) -> None:
    _update_ours(
        db, job, worker_id, status="cancelled", finished_at=now, lease_until=None, progress_message="cancelled"
    )


def release(db: Session, job: Job, worker_id: str, now: datetime) -> None:
    """Give a running job back unfinished (worker shutting down); the attempt is not counted."""
    _update_ours(
        db,
        job,
        worker_id,
        status="queued",
        run_after=now,
        worker_id=None,
        lease_until=None,
        attempts=Job.attempts - 1,
    )


def cancel(db: Session, tenant_id: str, job_id: str, now: datetime) -> tuple[Job, bool]:
    """Cancel a queued job at once, or ask a running one to stop; return ``(job, ended_now)``.

    Cancelling a cancelled job is a no-op; a succeeded or failed job is a :class:`Conflict`.
    """
    job = get_job(db, tenant_id, job_id)
    res = db.execute(
        update(Job)
        .where(Job.id == job_id, Job.status == "queued")
        .values(status="cancelled", finished_at=now, cancel_requested=True)
        .execution_options(synchronize_session=False)
    )
    if res.rowcount == 1:  # type: ignore[attr-defined]
        db.refresh(job)
        return job, True
    db.execute(
        update(Job)
        .where(Job.id == job_id, Job.status == "running")
        .values(cancel_requested=True)
        .execution_options(synchronize_session=False)
    )
    db.refresh(job)
    if job.status in ("succeeded", "failed"):
        raise Conflict(f"job already {job.status}; it cannot be cancelled", job_id=job.id, job_status=job.status)
    return job, False


def purge(db: Session, older_than: datetime) -> int:
    """Delete finished jobs (results cascade) finished before ``older_than``; return the count.

    The newest succeeded job of each schedule is kept, whatever its age, so
    ``/schedules/{id}/latest`` keeps answering.
    """
    ranked = (
        select(
            Job.id,
            func.row_number()
            .over(partition_by=Job.schedule_id, order_by=(Job.finished_at.desc(), Job.id.desc()))
            .label("rank"),
        )
        .where(Job.schedule_id.is_not(None), Job.status == "succeeded")
        .subquery()
    )
    keep = select(ranked.c.id).where(ranked.c.rank == 1)
    res = db.execute(
        delete(Job)
        .where(Job.status.in_(FINISHED_STATUSES), Job.finished_at < older_than, Job.id.not_in(keep))
        .execution_options(synchronize_session=False)
    )
    return int(res.rowcount)  # type: ignore[attr-defined]
