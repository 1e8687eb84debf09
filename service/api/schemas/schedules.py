"""Schedule resources."""

from __future__ import annotations

from datetime import datetime
from typing import Any

from pydantic import BaseModel, ConfigDict, Field

from .common import Priority, Page
from .jobs import JobSpec

__all__ = ["ScheduleCreate", "ScheduleRead", "SchedulePage"]


class ScheduleCreate(BaseModel):
    model_config = ConfigDict(extra="forbid", strict=True)  # JSON types as declared: 0 is no boolean

    graph_id: str = Field(min_length=1, max_length=40)
    cron: str = Field(
        min_length=1, max_length=120, examples=["0 2 * * *"],
        description="5-field cron: minute hour day-of-month month day-of-week.",
    )
    timezone: str = Field(default="UTC", max_length=64, examples=["Europe/Paris"], description="IANA zone.")
    job: JobSpec
    priority: Priority = 0


class ScheduleRead(BaseModel):
    id: str
    graph_id: str
    cron: str
    timezone: str
    job: dict[str, Any] = Field(description="The job spec: kind, params, version.")
    priority: int
    active: bool
    next_run_at: datetime
    last_run_at: datetime | None
    last_job_id: str | None
    created_at: datetime
    latest_url: str

    @classmethod
    def from_schedule(cls, s: Any) -> ScheduleRead:
        return cls(
            id=s.id,
            graph_id=s.graph_id,
            cron=s.cron,
            timezone=s.timezone,
            job={"kind": s.kind, "params": s.params, "version": s.version},
            priority=s.priority,
            active=s.active,
            next_run_at=s.next_run_at,
            last_run_at=s.last_run_at,
            last_job_id=s.last_job_id,
            created_at=s.created_at,
            latest_url=f"/v1/schedules/{s.id}/latest",
        )


class SchedulePage(Page):
    items: list[ScheduleRead]
