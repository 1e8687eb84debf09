"""Rankings, the node view and communities: doors of :mod:`service.usecases.rankings` and
:mod:`service.usecases.communities`.

Each route parses, calls one use case in one thread-pool call (sync dependencies would each
cost a thread hop, most of a top-50 read), and renders: JSON or CSV, figures rounded as every
answer rounds shares, ETag/Cache-Control, 304 when If-None-Match matches.
"""

from __future__ import annotations

import dataclasses
from typing import Annotated, Any, Literal

from fastapi import APIRouter, Depends, Header, Query, Request, Response, status
from fastapi.concurrency import run_in_threadpool
from fastapi.responses import JSONResponse, StreamingResponse
from sqlalchemy.orm import Session, sessionmaker

from service.settings import Settings
from service.usecases import communities as cu
from service.usecases import rankings as uc

from .deps import get_principal, require_graph
from .etags import etag_matches
from .node_ids import node_route
from .rendering import round_value
from .schemas.common import PROBLEM_RESPONSES
from .schemas.scores import CommunityPage, NodeRead, ScorePage

__all__ = ["router"]

IfNoneMatch = Annotated[str | None, Header(alias="If-None-Match")]
VersionQ = Annotated[str | None, Query(description="Version number or 'latest' (default).")]
NOT_MODIFIED: dict[int | str, dict[str, Any]] = {304: {"description": "Not modified (If-None-Match matched the ETag)."}}

router = APIRouter(prefix="/v1/graphs", tags=["scores"], responses=PROBLEM_RESPONSES)


def _shown(x: float) -> float:
    """Scores and percentiles to four significant digits, as every answer rounds shares."""
    return round_value(x, "share")


def _caller(request: Request, limit: int | None = None) -> tuple[str, int, sessionmaker[Session]]:
    """The caller's tenant, the page size for ``limit``, and the session maker."""
    settings: Settings = request.app.state.settings
    maker: sessionmaker[Session] = request.app.state.sessionmaker
    return get_principal(request).tenant_id, min(limit or settings.page_limit_default, settings.page_limit_max), maker


def _headers(answer: uc.Unchanged | uc.RankingPage | uc.RankingExport | cu.CommunityList) -> dict[str, str]:
    return {"ETag": answer.etag, "Cache-Control": "no-cache"}


def _document(answer: uc.RankingPage | cu.CommunityList) -> dict[str, Any]:
    return {f.name: getattr(answer, f.name) for f in dataclasses.fields(answer) if f.name != "etag"}


@router.get(
    "/{graph_id}/rankings",
    dependencies=[Depends(require_graph)],
    summary="Rank people by a measure or a weighted composite, filtered, paged or exported as CSV",
    description=(
        "From the newest succeeded `scores` job of the version (default: newest) that has the measure. "
        "Best first (lowest first for `constraint`), ties by node id. `percentile` is the mid-rank "
        "percentile among all scored nodes, 100 = top. `measure=composite&weights=pagerank:0.5,degree:0.5` "
        "ranks by `sum w_m p_m / sum w_m` over the measures' percentiles `p_m` (undefined counts 0). "
        "`next_cursor` pins the result it came from, so paging survives a newer scores job. "
        "`format=csv` streams the whole filtered ranking (text cells that start with = + - @ tab or CR "
        "get a leading apostrophe)."
    ),
    response_model=ScorePage,
    responses={**NOT_MODIFIED, 200: {"content": {"text/csv": {}}, "description": "JSON page, or CSV."}},
)
async def list_rankings(
    graph_id: str,
    request: Request,
    measure: Annotated[str, Query(description="A measure name, or `composite` with `weights`.")] = "pagerank",
    weights: Annotated[str | None, Query(description="Composite: `name:weight,...`, weights > 0.")] = None,
    limit: Annotated[int | None, Query(ge=1)] = None,
    cursor: str | None = None,
    segment: Annotated[list[str] | None, Query(description="Keep these segments (repeat for several).")] = None,
    contactable: Annotated[bool | None, Query(description="true: only people with consent; false: only without.")] = None,
    community: Annotated[int | None, Query(ge=0, description="Keep one community (needs a result with communities).")] = None,
    version: VersionQ = None,
    format_: Annotated[Literal["json", "csv"], Query(alias="format")] = "json",
    if_none_match: IfNoneMatch = None,
) -> Response:
    tenant, size, maker = _caller(request, limit)
    q = uc.RankingQuery.parse(graph_id, measure=measure, weights=weights, segments=segment or [],
                              contactable=contactable, community=community, version=version, limit=size)
    read = uc.export_ranking if format_ == "csv" else uc.read_ranking

    def work() -> Response:
        with maker() as db:
            answer = read(db, tenant, q, cursor=cursor, known_etag=lambda tag: etag_matches(if_none_match, tag),
                          shown=_shown)
        headers = _headers(answer)
        if isinstance(answer, uc.Unchanged):
            return Response(status_code=status.HTTP_304_NOT_MODIFIED, headers=headers)
        if isinstance(answer, uc.RankingExport):
            headers["Content-Disposition"] = f'attachment; filename="{answer.filename}"'
            return StreamingResponse(answer.chunks, media_type="text/csv; charset=utf-8", headers=headers)
        stamp = answer.computed_at.isoformat().replace("+00:00", "Z")
        return JSONResponse(_document(answer) | {"computed_at": stamp}, headers=headers)

    return await run_in_threadpool(work)


@node_route(
    router,
    "/{graph_id}/nodes/{node_id}",
    dependencies=[Depends(require_graph)],
    summary="Read a person: attributes, degree, every score with its percentile and rank, community",
    description="`node_id` is one percent-encoded path segment (`/` as `%2F`). Scores come from the "
    "newest succeeded `scores` job of the version; `scores` is empty and `job_id` null when none has run.",
    response_model=NodeRead,
)
async def read_node(graph_id: str, node_id: str, request: Request, version: VersionQ = None) -> NodeRead:
    tenant, _, maker = _caller(request)

    def work() -> NodeRead:
        with maker() as db:
            person = uc.read_person(db, tenant, graph_id, node_id, version, shown=_shown)
        return NodeRead.model_validate(dataclasses.asdict(person))

    return await run_in_threadpool(work)


@router.get(
    "/{graph_id}/communities",
    dependencies=[Depends(require_graph)],
    summary="Communities: size, internal density, top members by a measure, and modularity",
    description="From the newest succeeded `scores` job of the version with `community` (Leiden, "
    "modularity objective). Largest first; members ranked by `measure` (default `degree` when the "
    "result has it, else its first measure), ties by node id.",
    response_model=CommunityPage,
    responses=NOT_MODIFIED,
)
async def list_communities(
    graph_id: str,
    request: Request,
    version: VersionQ = None,
    measure: Annotated[str | None, Query(description="Rank top members by this measure.")] = None,
    top: Annotated[int, Query(ge=0, le=1000, description="Members listed per community.")] = 5,
    limit: Annotated[int | None, Query(ge=1)] = None,
    cursor: str | None = None,
    if_none_match: IfNoneMatch = None,
) -> Response:
    tenant, size, maker = _caller(request, limit)
    q = cu.CommunityQuery(graph_id, measure, top, size, version)

    def work() -> Response:
        with maker() as db:
            answer = cu.list_communities(db, tenant, q, cursor=cursor,
                                         known_etag=lambda tag: etag_matches(if_none_match, tag), shown=_shown)
        if isinstance(answer, uc.Unchanged):
            return Response(status_code=status.HTTP_304_NOT_MODIFIED, headers=_headers(answer))
        page = CommunityPage.model_validate(_document(answer))
        return JSONResponse(page.model_dump(mode="json"), headers=_headers(answer))

    return await run_in_threadpool(work)
