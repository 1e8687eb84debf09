"""Schedules: cron-driven jobs and their newest result."""

from __future__ import annotations

import hashlib
import json
from typing import Annotated

from fastapi import APIRouter, Header, Query, Request, Response, status
from fastapi.responses import JSONResponse

from service.jobs import queueing, registry
from service.jobs.errors import ResultNotReady
from service.jobs.schedules import next_run_after
from service.usecases import integrity_rules
from storage.repo import graphs as graph_repo
from storage.repo import idempotency as idem_repo
from storage.repo import jobs as job_repo
from storage.repo import results as result_repo
from storage.repo import schedules as schedule_repo

from .deps import DbDep, SettingsDep, TenantDep
from .errors import InvalidParams
from .jobs import RESULT_RESPONSES, IfNoneMatch, clock_of, maker_of
from .rendering import result_response
from .schemas.common import PROBLEM_RESPONSES
from .schemas.schedules import ScheduleCreate, SchedulePage, ScheduleRead

__all__ = ["router"]

router = APIRouter(prefix="/v1/schedules", tags=["schedules"], responses=PROBLEM_RESPONSES)

IdemKey = Annotated[str | None, Header(alias="Idempotency-Key", min_length=1, max_length=200)]
ROUTE = "POST /v1/schedules"


@router.post("", status_code=status.HTTP_201_CREATED, summary="Create a schedule", response_model=ScheduleRead,
    responses={200: {"description": "Replay of an earlier request with the same Idempotency-Key", "model": ScheduleRead}},
)
def create_schedule(
    body: ScheduleCreate, request: Request, tenant: TenantDep, settings: SettingsDep, idempotency_key: IdemKey = None
) -> JSONResponse:
    registry.import_kind_modules(settings.job_kind_modules)
    digest = hashlib.sha256(json.dumps(body.model_dump(mode="json"), sort_keys=True).encode()).hexdigest()
    now = clock_of(request).now()
    with job_repo.write_session(maker_of(request)) as db:
        if idempotency_key:
            replay = idem_repo.get_replay(db, tenant, idempotency_key, ROUTE, digest)
            if replay is not None:
                return JSONResponse(replay.body, status_code=200, headers={"Location": replay.location or ""})
        graph_repo.get_graph(db, tenant, body.graph_id)  # an unknown graph is a 404 before anything else
        next_run = next_run_after(body.cron, body.timezone, now)
        spec = body.job
        # A schedule without a version follows the newest; only the kind and params are checked now, and
        # a job named by exclude_flagged for what cannot change (it exists, flags people, on this graph).
        parsed = queueing.parse_job_params(registry.get_kind(spec.kind), spec.params)
        rule = getattr(parsed, "exclude_flagged", None)
        if rule is not None:
            integrity_rules.check_named_job(rule, db, tenant, graph_id=body.graph_id)
        params = parsed.model_dump(mode="json")
        if spec.version is not None:
            queueing.resolve_version(db, tenant, body.graph_id, spec.version)
        schedule = schedule_repo.add_schedule(
            db,
            tenant_id=tenant,
            graph_id=body.graph_id,
            cron=" ".join(body.cron.split()),
            timezone=body.timezone,
            kind=spec.kind,
            params=params,
            version=spec.version,
            next_run_at=next_run,
            now=now,
            priority=body.priority,
        )
        out = ScheduleRead.from_schedule(schedule).model_dump(mode="json")
        location = f"/v1/schedules/{schedule.id}"
        if idempotency_key:
            idem_repo.add_record(
                db, tenant_id=tenant, key=idempotency_key, route=ROUTE, request_hash=digest,
                status_code=201, body=out, location=location,
            )
        db.commit()
    return JSONResponse(out, status_code=201, headers={"Location": location})


@router.get("", summary="List schedules, newest first")
def list_schedules(
    db: DbDep,
    tenant: TenantDep,
    settings: SettingsDep,
    graph_id: str | None = None,
    limit: Annotated[int, Query(ge=1)] = 50,
    cursor: str | None = None,
) -> SchedulePage:
    try:
        rows, nxt = schedule_repo.list_schedules(
            db, tenant, limit=min(limit, settings.page_limit_max), cursor=cursor, graph_id=graph_id
        )
    except ValueError as exc:
        raise InvalidParams(str(exc), field="cursor") from exc
    return SchedulePage(items=[ScheduleRead.from_schedule(s) for s in rows], next_cursor=nxt)


@router.get("/{schedule_id}", summary="Read a schedule (with next_run_at)")
def read_schedule(schedule_id: str, db: DbDep, tenant: TenantDep) -> ScheduleRead:
    return ScheduleRead.from_schedule(schedule_repo.get_schedule(db, tenant, schedule_id))


@router.delete("/{schedule_id}", status_code=status.HTTP_204_NO_CONTENT, summary="Delete a schedule")
def delete_schedule(schedule_id: str, request: Request, tenant: TenantDep) -> Response:
    with job_repo.write_session(maker_of(request)) as db:
        schedule_repo.delete_schedule(db, schedule_repo.get_schedule(db, tenant, schedule_id))
        db.commit()
    return Response(status_code=status.HTTP_204_NO_CONTENT)


@router.get(
    "/{schedule_id}/latest",
    summary="Read the newest succeeded result of a schedule (ETag changes only with the result)",
    responses=RESULT_RESPONSES,
)
def read_latest_result(
    schedule_id: str, db: DbDep, tenant: TenantDep, if_none_match: IfNoneMatch = None
) -> Response:
    schedule = schedule_repo.get_schedule(db, tenant, schedule_id)
    found = result_repo.latest_for_schedule(db, tenant, schedule.id)
    if found is None:
        raise ResultNotReady(
            f"schedule {schedule.id} has no succeeded run yet; next run at {schedule.next_run_at.isoformat()}",
            schedule_id=schedule.id,
        )
    job, result = found
    return result_response(job, result, if_none_match, weak=True)
