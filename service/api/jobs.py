"""Jobs: create on a graph, read (long-poll), cancel, list, results, kinds."""

from __future__ import annotations

import asyncio
import hashlib
import json
import time
from typing import Annotated, Any

from fastapi import APIRouter, Depends, Header, Query, Request, Response, status
from fastapi.concurrency import run_in_threadpool
from fastapi.responses import JSONResponse
from sqlalchemy.orm import Session, sessionmaker

from service.jobs import queueing, registry
from service.jobs.clock import Clock, SystemClock
from storage.models import FINISHED_STATUSES, Job
from storage.repo import jobs as job_repo

from service.settings import Settings

from .deps import DbDep, SettingsDep, TenantDep, require_graph
from .errors import InvalidParams
from .rendering import result_response
from .schemas.common import PROBLEM_RESPONSES
from .schemas.results import JobResult as JobResultDocument
from .schemas.jobs import JobCreate, JobKindList, JobKindRead, JobPage, JobRead, JobStatus

__all__ = ["router", "clock_of", "maker_of", "queue_limits"]

router = APIRouter(tags=["jobs"], responses=PROBLEM_RESPONSES)

IdemKey = Annotated[str | None, Header(alias="Idempotency-Key", min_length=1, max_length=200)]
IfNoneMatch = Annotated[str | None, Header(alias="If-None-Match")]

RESULT_RESPONSES: dict[int | str, dict[str, Any]] = {
    200: {
        "description": "The result document: `job_id`, `kind`, `graph_id`, `version`, `params`, "
        "`random_seed`, `created_at`, `arrays` (stored arrays: dtype and length) and the kind's fields.",
        "model": JobResultDocument,
    },
    304: {"description": "Not modified (If-None-Match matched the ETag)."},
}


def clock_of(request: Request) -> Clock:
    """The app's clock (tests may set ``app.state.clock``)."""
    clock: Clock | None = getattr(request.app.state, "clock", None)
    return clock or SystemClock()


def queue_limits(settings: Settings) -> queueing.QueueLimits:
    return queueing.QueueLimits(settings.job_max_queued_per_tenant, settings.job_max_attempts,
                                settings.job_memory_limit(), settings.thread_count())


def maker_of(request: Request) -> sessionmaker[Session]:
    maker: sessionmaker[Session] = request.app.state.sessionmaker
    return maker


def _request_hash(*parts: object) -> str:
    return hashlib.sha256(json.dumps(parts, sort_keys=True, default=str).encode()).hexdigest()


@router.post(
    "/v1/graphs/{graph_id}/jobs",
    dependencies=[Depends(require_graph)],
    status_code=status.HTTP_202_ACCEPTED,
    summary="Queue a job on a graph version",
    response_model=JobRead,
    responses={200: {"description": "Replay of an earlier request with the same Idempotency-Key", "model": JobRead}},
)
def create_job(
    graph_id: str,
    body: JobCreate,
    request: Request,
    tenant: TenantDep,
    settings: SettingsDep,
    idempotency_key: IdemKey = None,
) -> JSONResponse:
    registry.import_kind_modules(settings.job_kind_modules)
    digest = _request_hash("POST /v1/graphs/{graph_id}/jobs", graph_id, body.model_dump(mode="json"))
    maker = maker_of(request)
    job, created = queueing.queue_job(
        maker, lambda: job_repo.write_session(maker), tenant, graph_id,
        queueing.JobOrder(body.kind, body.params, body.version, body.priority),
        now=clock_of(request).now(), limits=queue_limits(settings),
        idempotency_key=idempotency_key, request_hash=digest if idempotency_key else None,
    )
    return _job_response(job, status.HTTP_202_ACCEPTED if created else status.HTTP_200_OK)


def _job_response(job: Job, code: int) -> JSONResponse:
    return JSONResponse(
        JobRead.from_job(job).model_dump(mode="json"),
        status_code=code,
        headers={"Location": f"/v1/jobs/{job.id}"},
    )


@router.get("/v1/jobs", summary="List jobs, newest first")
def list_jobs(
    db: DbDep,
    tenant: TenantDep,
    settings: SettingsDep,
    graph_id: str | None = None,
    status_: Annotated[JobStatus | None, Query(alias="status")] = None,
    kind: str | None = None,
    schedule_id: str | None = None,
    limit: Annotated[int, Query(ge=1)] = 50,
    cursor: str | None = None,
) -> JobPage:
    limit = min(limit, settings.page_limit_max)
    try:
        rows, nxt = job_repo.list_jobs(
            db, tenant, limit=limit, cursor=cursor, graph_id=graph_id, status=status_, kind=kind,
            schedule_id=schedule_id,
        )
    except ValueError as exc:
        raise InvalidParams(str(exc), field="cursor") from exc
    return JobPage(items=[JobRead.from_job(j) for j in rows], next_cursor=nxt)


@router.get("/v1/job-kinds", summary="List the job kinds and their params schemas")
def list_job_kinds(settings: SettingsDep) -> JobKindList:
    registry.import_kind_modules(settings.job_kind_modules)
    return JobKindList(
        items=[
            JobKindRead(
                name=k.name,
                summary=k.summary,
                result_description=k.result_description,
                needs_graph=k.needs_graph,
                params_schema=k.params.model_json_schema(),
            )
            for k in sorted(registry.REGISTRY.values(), key=lambda k: k.name)
        ]
    )


@router.get("/v1/jobs/{job_id}", summary="Read a job's state and progress (wait=SECONDS long-polls)")
async def read_job(
    job_id: str,
    request: Request,
    tenant: TenantDep,
    settings: SettingsDep,
    wait: Annotated[float, Query(ge=0, description="Seconds to wait for the job to finish.")] = 0,
) -> JobRead:
    maker = maker_of(request)

    def fetch() -> Job:
        with maker() as db:
            return job_repo.get_job(db, tenant, job_id)

    def status_of() -> str | None:
        with maker() as db:
            return job_repo.get_job_status(db, tenant, job_id)

    job = await run_in_threadpool(fetch)
    deadline = time.monotonic() + min(wait, settings.wait_max_seconds)
    delay = 0.02
    while job.status not in FINISHED_STATUSES and time.monotonic() < deadline:
        await asyncio.sleep(min(delay, max(deadline - time.monotonic(), 0)))
        delay = min(delay * 1.5, 0.1)  # one primary-key read a poll: cheap, and short jobs answer fast
        if await run_in_threadpool(status_of) in FINISHED_STATUSES or time.monotonic() >= deadline:
            job = await run_in_threadpool(fetch)
            break
    return JobRead.from_job(job)


@router.post(
    "/v1/jobs/{job_id}/cancel",
    summary="Cancel a job (queued: at once; running: at its next progress point)",
    responses={202: {"description": "Cancellation requested; the running job stops at its next progress point"}},
)
def cancel_job(job_id: str, request: Request, tenant: TenantDep) -> JSONResponse:
    maker = maker_of(request)
    job = queueing.cancel_job(lambda: job_repo.write_session(maker), tenant, job_id, now=clock_of(request).now())
    code = status.HTTP_202_ACCEPTED if job.status == "running" else status.HTTP_200_OK
    return JSONResponse(JobRead.from_job(job).model_dump(mode="json"), status_code=code)


@router.get("/v1/jobs/{job_id}/result", summary="Read a succeeded job's result", responses=RESULT_RESPONSES)
def read_job_result(job_id: str, db: DbDep, tenant: TenantDep, if_none_match: IfNoneMatch = None) -> Response:
    job, result = queueing.read_result(db, tenant, job_id)
    return result_response(job, result, if_none_match, weak=False)
