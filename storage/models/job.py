"""Jobs (the queue), their results, and result array chunks.

Status values: ``queued``, ``running``, ``succeeded``, ``failed``, ``cancelled``.
A running job belongs to ``worker_id`` until ``lease_until``; ``attempts``
counts claims, so ``(worker_id, attempts)`` names one run of the job.
"""

from __future__ import annotations

from datetime import datetime
from typing import Any

from sqlalchemy import (
    JSON,
    Float,
    ForeignKey,
    Index,
    Integer,
    LargeBinary,
    String,
    Text,
    UniqueConstraint,
)
from sqlalchemy.orm import Mapped, mapped_column

from .base import Base, UtcDateTime, utcnow

__all__ = ["Job", "JobResult", "ResultArray", "JOB_STATUSES", "FINISHED_STATUSES"]

JOB_STATUSES = ("queued", "running", "succeeded", "failed", "cancelled")
FINISHED_STATUSES = ("succeeded", "failed", "cancelled")


class Job(Base):
    __tablename__ = "job"
    __table_args__ = (
        UniqueConstraint("tenant_id", "idempotency_key"),
        # One job per schedule slot, however many schedulers race for it.
        UniqueConstraint("schedule_id", "scheduled_for"),
        Index("ix_job_claim", "status", "priority", "run_after"),
        Index("ix_job_tenant_created", "tenant_id", "created_at"),
        Index("ix_job_status_finished", "status", "finished_at"),
    )

    id: Mapped[str] = mapped_column(String(40), primary_key=True)
    tenant_id: Mapped[str] = mapped_column(String(64), index=True)
    graph_id: Mapped[str | None] = mapped_column(
        ForeignKey("graph.id", ondelete="CASCADE"), index=True, default=None
    )
    version: Mapped[int | None] = mapped_column(Integer, default=None)
    kind: Mapped[str] = mapped_column(String(40))
    params: Mapped[dict[str, Any]] = mapped_column(JSON)
    status: Mapped[str] = mapped_column(String(16), default="queued")
    priority: Mapped[int] = mapped_column(Integer, default=0)
    attempts: Mapped[int] = mapped_column(Integer, default=0)
    max_attempts: Mapped[int] = mapped_column(Integer, default=3)
    run_after: Mapped[datetime] = mapped_column(UtcDateTime, default=utcnow)
    worker_id: Mapped[str | None] = mapped_column(String(100), default=None)
    lease_until: Mapped[datetime | None] = mapped_column(UtcDateTime, default=None)
    progress: Mapped[float] = mapped_column(Float, default=0.0)
    progress_message: Mapped[str | None] = mapped_column(String(200), default=None)
    cancel_requested: Mapped[bool] = mapped_column(default=False)
    error: Mapped[dict[str, Any] | None] = mapped_column(JSON, default=None)
    idempotency_key: Mapped[str | None] = mapped_column(String(200), default=None)
    request_hash: Mapped[str | None] = mapped_column(String(64), default=None)
    schedule_id: Mapped[str | None] = mapped_column(String(40), index=True, default=None)
    # The schedule slot (UTC) this job was created for.
    scheduled_for: Mapped[datetime | None] = mapped_column(UtcDateTime, default=None)
    created_at: Mapped[datetime] = mapped_column(UtcDateTime, default=utcnow)
    started_at: Mapped[datetime | None] = mapped_column(UtcDateTime, default=None)
    finished_at: Mapped[datetime | None] = mapped_column(UtcDateTime, default=None)


class JobResult(Base):
    """The result of a succeeded job, written in the transaction that marks it succeeded."""

    __tablename__ = "job_result"

    job_id: Mapped[str] = mapped_column(
        ForeignKey("job.id", ondelete="CASCADE"), primary_key=True
    )
    data: Mapped[dict[str, Any]] = mapped_column(JSON)
    # name -> {"dtype": ..., "length": ...} of arrays stored in ResultArray.
    manifest: Mapped[dict[str, Any]] = mapped_column(JSON, default=dict)
    etag: Mapped[str] = mapped_column(String(64))
    created_at: Mapped[datetime] = mapped_column(UtcDateTime, default=utcnow)
    note: Mapped[str | None] = mapped_column(Text, default=None)


class ResultArray(Base):
    __tablename__ = "result_array"

    job_id: Mapped[str] = mapped_column(
        ForeignKey("job_result.job_id", ondelete="CASCADE"), primary_key=True
    )
    name: Mapped[str] = mapped_column(String(64), primary_key=True)
    seq: Mapped[int] = mapped_column(Integer, primary_key=True)
    data: Mapped[bytes] = mapped_column(LargeBinary)
