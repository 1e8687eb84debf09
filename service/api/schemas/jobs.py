"""Job resources: creation, state, pages, kinds."""

from __future__ import annotations

from datetime import datetime
from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field

from .common import Page, PositiveInt, Priority

__all__ = ["JobStatus", "JobSpec", "JobCreate", "JobRead", "JobPage", "JobKindRead", "JobKindList"]

JobStatus = Literal["queued", "running", "succeeded", "failed", "cancelled"]


class JobSpec(BaseModel):
    """What to run: a kind, its params, and optionally a version (default: the newest)."""

    model_config = ConfigDict(extra="forbid", strict=True)  # JSON types as declared: 0 is no boolean

    kind: str = Field(min_length=1, max_length=40, examples=["profile"])
    version: PositiveInt | None = Field(
        default=None, description="Version number; the newest when omitted."
    )
    params: dict[str, Any] = Field(default_factory=dict, description="The kind's parameters.")


class JobCreate(JobSpec):
    priority: Priority = Field(default=0, description="Higher runs first.")


class JobRead(BaseModel):
    model_config = ConfigDict(from_attributes=True)

    id: str
    graph_id: str | None
    version: int | None
    kind: str
    params: dict[str, Any]
    status: JobStatus
    progress: float = Field(description="0..1")
    progress_message: str | None
    priority: int
    attempts: int
    max_attempts: int
    cancel_requested: bool
    error: dict[str, Any] | None = Field(description="A problem document when the job failed.")
    schedule_id: str | None
    scheduled_for: datetime | None
    created_at: datetime
    run_after: datetime
    started_at: datetime | None
    finished_at: datetime | None
    url: str
    result_url: str | None = Field(description="Set once the job has succeeded.")

    @classmethod
    def from_job(cls, job: Any) -> JobRead:
        return cls.model_validate(
            {
                **{k: getattr(job, k) for k in cls.model_fields if k not in ("url", "result_url")},
                "url": f"/v1/jobs/{job.id}",
                "result_url": f"/v1/jobs/{job.id}/result" if job.status == "succeeded" else None,
            }
        )


class JobPage(Page):
    items: list[JobRead]


class JobKindRead(BaseModel):
    name: str
    summary: str
    result_description: str
    needs_graph: bool
    params_schema: dict[str, Any] = Field(description="JSON Schema of the kind's params.")


class JobKindList(BaseModel):
    items: list[JobKindRead]
