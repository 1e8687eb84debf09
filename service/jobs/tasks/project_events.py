"""The ``project_events`` job kind: a door over :mod:`service.usecases.event_graphs`."""

from __future__ import annotations

from service.usecases.event_graphs import ProjectEventsParams, project_stored_events
from service.usecases.event_results import ProjectEventsResult

from ..kinds import JobKind, TaskContext, TaskOutput

__all__ = ["KIND", "run"]


def run(ctx: TaskContext, params: ProjectEventsParams) -> TaskOutput:
    version = ctx.load().number  # the job's version (the newest when none was named)
    return project_stored_events(ctx.sessions, ctx.tenant_id, str(ctx.graph_id), version, params,
                                 progress=ctx.progress, job_id=ctx.job_id)


KIND = JobKind(
    result=ProjectEventsResult,
    name="project_events",
    params=ProjectEventsParams,
    run=run,
    summary="Ties from an event table: project a version's stored events onto people (count, Newman or "
    "resource allocation, with time decay and an event-size cap), keep the significant ties, and store "
    "them as the next version",
    result_description=(
        "`version_created`: the version holding the ties; `nodes`, `edges`; `projection`: the weighting, "
        "cap and time decay used and what the events held (rows, events, events dropped or down-weighted, "
        "people without ties); `backbone`: the filter, its level and the share of ties, weight and people kept."
    ),
)
