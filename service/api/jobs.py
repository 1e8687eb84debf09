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
from pydantic import BaseModel, ValidationError
from sqlalchemy import select
from sqlalchemy.orm import Session, sessionmaker

from service.jobs import admission, registry, webhooks
from service.jobs.clock import Clock, SystemClock
from service.jobs.errors import InvalidJobParams, ResultNotReady
from service.loader import load_version
from storage.errors import NotFound
from storage.models import FINISHED_STATUSES, Graph, Job, JobResult
from storage.repo import graphs as graph_repo
from storage.repo import jobs as job_repo
from storage.repo import results as result_repo

from .deps import DbDep, SettingsDep, TenantDep, require_graph
from .errors import InvalidParams, TooManyJobs
from .rendering import round_document
from .schemas.common import PROBLEM_RESPONSES
from .schemas.results import JobResult as JobResultDocument
from .schemas.jobs import JobCreate, JobKindList, JobKindRead, JobPage, JobRead, JobSpec, JobStatus

__all__ = ["router", "clock_of", "resolve_job_spec", "result_response", "etag_matches"]

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


def maker_of(request: Request) -> sessionmaker[Session]:
    maker: sessionmaker[Session] = request.app.state.sessionmaker
    return maker


def parse_params_strictly(kind: registry.JobKind, raw: dict[str, Any]) -> BaseModel:
    """The kind's params as the registry reads them, after a strict pass over the JSON as sent.

    Strict as the request bodies are: ``0`` is no boolean and ``"3"`` no integer (``3.0`` is 3).
    """
    params = registry.parse_params(kind, raw)  # the kind's own messages for anything else
    try:
        kind.params.model_validate_json(json.dumps(_whole_numbers(raw)), strict=True)
    except ValidationError as exc:
        errors = registry.validation_errors(exc)
        raise InvalidJobParams(f"{'.'.join(errors[0]['loc'])}: {errors[0]['msg']}", field="params",
                               errors=errors) from exc
    return params


def _whole_numbers(value: Any) -> Any:
    """3.0 as 3 throughout (JSON Schema's integers); a float field takes an int as well."""
    if isinstance(value, float) and value.is_integer():
        return int(value)
    if isinstance(value, list):
        return [_whole_numbers(v) for v in value]
    if isinstance(value, dict):
        return {k: _whole_numbers(v) for k, v in value.items()}
    return value


def resolve_job_spec(db: Session, tenant: str, graph_id: str, spec: JobSpec) -> tuple[Graph, int, dict[str, Any]]:
    """Check the kind, params and version of a job spec; return (graph, version, normalised params)."""
    graph = graph_repo.get_graph(db, tenant, graph_id)  # an unknown graph is a 404 before anything else
    kind = registry.get_kind(spec.kind)
    params = parse_params_strictly(kind, spec.params)
    if spec.version is None:
        if graph.latest_version < 1:
            raise InvalidParams("the graph has no versions yet; upload its edges first", field="version")
        version = graph.latest_version
    else:
        try:
            version = graph_repo.get_version(db, graph, spec.version).number
        except NotFound as exc:
            raise InvalidParams(
                f"version {spec.version} does not exist; the newest is {graph.latest_version}",
                field="version",
                value=spec.version,
            ) from exc
    return graph, version, params.model_dump(mode="json")


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
    now = clock_of(request).now()
    kind = registry.get_kind(body.kind) if body.kind in registry.REGISTRY else None
    if kind is not None and (kind.precheck is not None or kind.estimate is not None):
        # Before the write transaction: checking ids and estimating memory may load the version.
        with maker_of(request)() as db:
            graph, number, params = resolve_job_spec(db, tenant, graph_id, body)
            row = graph_repo.get_version(db, graph, number)
            parsed = kind.params.model_validate(params)
            if kind.precheck is not None:
                kind.precheck(parsed, lambda: load_version(db, row), edges=row.edges)
            if kind.estimate is not None:
                limit = settings.job_memory_limit()
                estimate = kind.estimate(parsed, lambda: load_version(db, row), nodes=row.nodes,
                                         edges=row.edges, limit=limit, threads=settings.thread_count())
                admission.admit(estimate, limit)
    with job_repo.write_session(maker_of(request)) as db:
        if idempotency_key:
            replay = job_repo.get_by_idempotency_key(db, tenant, idempotency_key, digest)
            if replay is not None:
                return _job_response(replay, status.HTTP_200_OK)
        graph, version, params = resolve_job_spec(db, tenant, graph_id, body)
        if job_repo.count_queued(db, tenant) >= settings.job_max_queued_per_tenant:
            raise TooManyJobs(
                f"{settings.job_max_queued_per_tenant} jobs are already queued for this tenant",
                retry_after=30,
            )
        job, created = job_repo.add_job(
            db,
            tenant_id=tenant,
            graph_id=graph.id,
            version=version,
            kind=body.kind,
            params=params,
            now=now,
            priority=body.priority,
            max_attempts=settings.job_max_attempts,
            idempotency_key=idempotency_key,
            request_hash=digest if idempotency_key else None,
        )
        db.commit()
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
            return db.execute(
                select(Job.status).where(Job.id == job_id, Job.tenant_id == tenant)
            ).scalar_one_or_none()

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
    now = clock_of(request).now()
    with job_repo.write_session(maker_of(request)) as db:
        job, ended = job_repo.cancel(db, tenant, job_id, now)
        if ended:
            webhooks.queue_job_event(db, job, now)
        db.commit()
    code = status.HTTP_202_ACCEPTED if job.status == "running" else status.HTTP_200_OK
    return JSONResponse(JobRead.from_job(job).model_dump(mode="json"), status_code=code)


def etag_matches(if_none_match: str | None, etag: str) -> bool:
    """Weak comparison (RFC 9110 13.1.2), as If-None-Match uses."""
    if not if_none_match:
        return False
    if if_none_match.strip() == "*":
        return True
    bare = etag.removeprefix("W/")
    return any(tag.strip().removeprefix("W/") == bare for tag in if_none_match.split(","))


def result_body(job: Job, result: JobResult) -> dict[str, Any]:
    """The result document as callers see it: stored figures rounded to what they mean."""
    return {
        "job_id": job.id,
        "created_at": result.created_at.isoformat(),
        "arrays": result.manifest,
        **round_document(result.data),
    }


def result_response(job: Job, result: JobResult, if_none_match: str | None, *, weak: bool) -> Response:
    etag = f'{"W/" if weak else ""}"{result.etag}"'
    headers = {"ETag": etag, "Cache-Control": "no-cache"}
    if etag_matches(if_none_match, etag):
        return Response(status_code=status.HTTP_304_NOT_MODIFIED, headers=headers)
    return JSONResponse(result_body(job, result), headers=headers)


@router.get("/v1/jobs/{job_id}/result", summary="Read a succeeded job's result", responses=RESULT_RESPONSES)
def read_job_result(job_id: str, db: DbDep, tenant: TenantDep, if_none_match: IfNoneMatch = None) -> Response:
    job = job_repo.get_job(db, tenant, job_id)
    if job.status != "succeeded":
        hint = {
            "queued": "it is queued; poll GET /v1/jobs/{id}?wait=30",
            "running": "it is still running; poll GET /v1/jobs/{id}?wait=30",
            "failed": "it failed; see the job's error",
            "cancelled": "it was cancelled",
        }[job.status].replace("{id}", job.id)
        raise ResultNotReady(f"job {job.id} has no result: {hint}", job_id=job.id, job_status=job.status)
    return result_response(job, result_repo.get_result(db, job.id), if_none_match, weak=False)
