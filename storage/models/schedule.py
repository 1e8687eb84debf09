"""Schedules: a cron expression in a time zone that enqueues one job spec when due."""

from __future__ import annotations

from datetime import datetime
from typing import Any

from sqlalchemy import JSON, Boolean, ForeignKey, Index, Integer, String
from sqlalchemy.orm import Mapped, mapped_column

from .base import Base, UtcDateTime, utcnow

__all__ = ["Schedule"]


class Schedule(Base):
    """``next_run_at`` is the next due slot (UTC); firing compares and sets it."""

    __tablename__ = "schedule"
    __table_args__ = (Index("ix_schedule_due", "active", "next_run_at"),)

    id: Mapped[str] = mapped_column(String(40), primary_key=True)
    tenant_id: Mapped[str] = mapped_column(String(64), index=True)
    graph_id: Mapped[str] = mapped_column(ForeignKey("graph.id", ondelete="CASCADE"), index=True)
    cron: Mapped[str] = mapped_column(String(120))
    timezone: Mapped[str] = mapped_column(String(64))
    kind: Mapped[str] = mapped_column(String(40))
    params: Mapped[dict[str, Any]] = mapped_column(JSON)
    # None: the graph's newest version at each run.
    version: Mapped[int | None] = mapped_column(Integer, default=None)
    priority: Mapped[int] = mapped_column(Integer, default=0)
    active: Mapped[bool] = mapped_column(Boolean, default=True)
    next_run_at: Mapped[datetime] = mapped_column(UtcDateTime)
    last_run_at: Mapped[datetime | None] = mapped_column(UtcDateTime, default=None)
    last_job_id: Mapped[str | None] = mapped_column(String(40), default=None)
    created_at: Mapped[datetime] = mapped_column(UtcDateTime, default=utcnow)
