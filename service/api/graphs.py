"""Graphs and their versions: create, list, read, delete, upload."""

from __future__ import annotations

import hashlib
import json
from typing import Annotated, Literal

from fastapi import APIRouter, Depends, Header, Query, Request, Response, status
from fastapi.concurrency import run_in_threadpool
from fastapi.responses import JSONResponse


from service.intake import SizeLimits
from service.intake.dialect import DELIMITER_SPELLINGS, parse_delimiter
from storage.repo import graphs as graph_repo
from storage.repo import idempotency as idem_repo

from .deps import DbDep, SettingsDep, TenantDep, WriteDbDep, require_graph
from .errors import InvalidParams, UnsupportedMediaType
from .event_params import EventQuery
from .schemas.common import PROBLEM_RESPONSES
from .schemas.graphs import GraphCreate, GraphPage, GraphRead, VersionList, VersionRead
from .spool import FORMATS, UPLOAD_BODY, media_type, spool_body

__all__ = ["router"]

router = APIRouter(prefix="/v1/graphs", tags=["graphs"], responses=PROBLEM_RESPONSES)

IdemKey = Annotated[str | None, Header(alias="Idempotency-Key", max_length=200)]



def graph_read(g: object) -> GraphRead:
    data = GraphRead.model_validate(g, from_attributes=True)
    return data.model_copy(update={"latest_version": getattr(g, "latest_version", 0) or None})


def version_read(graph_id: str, v: object) -> VersionRead:
    summary = dict(v.summary)  # type: ignore[attr-defined]
    warnings = summary.pop("warnings", [])
    return VersionRead(
        graph_id=graph_id,
        number=v.number,  # type: ignore[attr-defined]
        created_at=v.created_at,  # type: ignore[attr-defined]
        nodes=v.nodes,  # type: ignore[attr-defined]
        edges=v.edges,  # type: ignore[attr-defined]
        origin=v.origin,  # type: ignore[attr-defined]
        summary=summary,
        warnings=warnings,
    )


def _hash(*parts: object) -> str:
    return hashlib.sha256(json.dumps(parts, sort_keys=True, default=str).encode()).hexdigest()


@router.post("", status_code=status.HTTP_201_CREATED, summary="Create a graph")
def create_graph(
    body: GraphCreate, db: WriteDbDep, tenant: TenantDep, response: Response, idempotency_key: IdemKey = None
) -> GraphRead:
    route, digest = "POST /v1/graphs", _hash(body.model_dump())
    if idempotency_key:
        replay = idem_repo.get_replay(db, tenant, idempotency_key, route, digest)
        if replay is not None:
            response.headers["Location"] = replay.location or ""
            return GraphRead.model_validate(replay.body)
    graph = graph_repo.add_graph(db, tenant_id=tenant, **body.model_dump())
    out = graph_read(graph)
    location = f"/v1/graphs/{graph.id}"
    if idempotency_key:
        idem_repo.add_record(
            db,
            tenant_id=tenant,
            key=idempotency_key,
            route=route,
            request_hash=digest,
            status_code=201,
            body=out.model_dump(mode="json"),
            location=location,
        )
    db.commit()
    response.headers["Location"] = location
    return out


@router.get("", summary="List graphs, newest first")
def list_graphs(
    db: DbDep,
    tenant: TenantDep,
    settings: SettingsDep,
    limit: Annotated[int, Query(ge=1)] = 50,
    cursor: str | None = None,
) -> GraphPage:
    limit = min(limit, settings.page_limit_max)
    try:
        rows, nxt = graph_repo.list_graphs(db, tenant, limit=limit, cursor=cursor)
    except ValueError as exc:
        raise InvalidParams(str(exc), field="cursor") from exc
    return GraphPage(items=[graph_read(g) for g in rows], next_cursor=nxt)


@router.get("/{graph_id}", summary="Read a graph")
def read_graph(graph_id: str, db: DbDep, tenant: TenantDep) -> GraphRead:
    return graph_read(graph_repo.get_graph(db, tenant, graph_id))


@router.delete("/{graph_id}", status_code=status.HTTP_204_NO_CONTENT, summary="Delete a graph and everything made from it")
def delete_graph(graph_id: str, db: WriteDbDep, tenant: TenantDep) -> Response:
    graph = graph_repo.get_graph(db, tenant, graph_id)
    graph_repo.delete_graph(db, graph)
    db.commit()
    return Response(status_code=status.HTTP_204_NO_CONTENT)




@router.post(
    "/{graph_id}/versions",
    status_code=status.HTTP_201_CREATED,
    summary="Upload edges, node attributes or an event table as a new version",
    openapi_extra=UPLOAD_BODY,
    response_model=VersionRead,
)
async def create_version(
    graph_id: str,
    request: Request,
    tenant: TenantDep,
    settings: SettingsDep,
    events: Annotated[EventQuery, Depends()],
    part: Literal["edges", "nodes", "events"] = "edges",
    mode: Literal["replace", "append", "remove"] = "replace",
    duplicates: Literal["sum", "max", "last"] = "sum",
    source: Annotated[str, Query(min_length=1, max_length=200)] = "source",
    target: Annotated[str, Query(min_length=1, max_length=200)] = "target",
    weight: Annotated[str | None, Query(max_length=200)] = None,
    probability: Annotated[str | None, Query(max_length=200)] = None,
    id: Annotated[str, Query(min_length=1, max_length=200)] = "id",
    extra_columns: Literal["error", "ignore"] = "error",
    delimiter: Annotated[
        str | None,
        Query(max_length=20, description="CSV field separator: comma, semicolon, tab or pipe (or the "
              "character; words in any case); detected from the first lines when absent.",
              json_schema_extra={"enum": DELIMITER_SPELLINGS}),
    ] = None,
    idempotency_key: IdemKey = None,
) -> JSONResponse:
    ctype, charset = media_type(request.headers.get("content-type"))
    fmt = FORMATS.get(ctype)
    if fmt is None:
        raise UnsupportedMediaType(
            f"Content-Type {ctype or '(none)'!r} is not read here; send one of "
            + ", ".join(sorted({"text/csv", "application/x-ndjson", "application/json", "application/graphml+xml"})),
            field="Content-Type",
        )
    if delimiter is not None:
        parse_delimiter(delimiter)  # refuse a bad value before reading the body
    if fmt == "graphml" and part == "nodes":
        part = "edges"  # a GraphML file carries both; its nodes are applied with its edges
    from service.usecases import event_graphs, uploads as ingest

    maker = request.app.state.sessionmaker
    # Check the graph exists before reading a large body.
    with maker() as db:
        graph = graph_repo.get_graph(db, tenant, graph_id)
    spool = await spool_body(request, settings.spool_dir(), settings.max_upload_bytes)
    try:
        options = ingest.UploadOptions(
            fmt=fmt,
            part=part,
            mode=mode,
            duplicates=duplicates,
            source=source,
            target=target,
            weight=weight,
            probability=probability,
            id=id,
            extra_columns=extra_columns,
            delimiter=delimiter,
            charset=charset,
        )
        limits = SizeLimits(
            settings.upload_max_id_chars, settings.upload_max_label_chars, settings.upload_max_value_chars
        )
        route = f"POST /v1/graphs/{graph_id}/versions"
        digest = _hash(spool.sha256, options, events)

        def work() -> ingest.Uploaded:
            if part == "events":
                return event_graphs.upload_events(
                    maker, tenant, graph_id, spool.path, event_graphs.EventUploadOptions(
                        fmt, mode, events.columns(weight, extra_columns), events.settings(), delimiter, charset),
                    limits=limits, render=lambda g, v: version_read(g.id, v).model_dump(mode="json"),
                    idempotency_key=idempotency_key, request_hash=digest, route=route,
                    max_attempts=settings.job_max_attempts)
            return ingest.upload_version(
                maker, tenant, graph_id, spool.path, options, limits=limits,
                render=lambda g, v: version_read(g.id, v).model_dump(mode="json"),
                idempotency_key=idempotency_key, request_hash=digest, route=route,
            )

        done = await run_in_threadpool(work)
    finally:
        spool.remove()
    del graph
    return JSONResponse(done.body, status_code=done.status_code, headers={"Location": done.location})


@router.get("/{graph_id}/versions", summary="List a graph's versions")
def list_versions(graph_id: str, db: DbDep, tenant: TenantDep) -> VersionList:
    graph = graph_repo.get_graph(db, tenant, graph_id)
    return VersionList(items=[version_read(graph.id, v) for v in graph_repo.list_versions(db, graph)])


@router.get("/{graph_id}/versions/{number}", summary="Read a version's stored summary",
            dependencies=[Depends(require_graph)])
def read_version(graph_id: str, number: str, db: DbDep, tenant: TenantDep) -> VersionRead:
    graph = graph_repo.get_graph(db, tenant, graph_id)
    return version_read(graph.id, graph_repo.get_version(db, graph, parse_version(number)))


def parse_version(number: str | int | None) -> int | None:
    """``latest`` (or None) means the newest version; otherwise a positive integer."""
    if number is None or number == "latest":
        return None
    try:
        n = int(number)
    except ValueError as exc:
        raise InvalidParams("version must be a positive integer or 'latest'", field="version") from exc
    if n < 1:
        raise InvalidParams("version must be a positive integer or 'latest'", field="version")
    return n
