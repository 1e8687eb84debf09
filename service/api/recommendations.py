"""Introductions for a person, and next contacts for a campaign in flight: the HTTP doors of
:mod:`service.usecases.recommendations` and :mod:`service.usecases.next_contacts`.

Both answer synchronously, on the bounded compute pool. The first request on a
version builds its neighbour index (and, for next contacts, the arc
probabilities of the model asked for) and keeps it for the process; later
requests touch only the person's or the adopters' neighbourhoods.
"""

from __future__ import annotations

import asyncio
from collections.abc import Callable
from typing import Annotated, Any, TypeVar

from fastapi import APIRouter, Depends, Header, Query, Request, Response, status
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse
from pydantic import ValidationError
from sqlalchemy.orm import Session, sessionmaker

from service.usecases import next_contacts as contacts
from service.usecases import recommendations as introductions
from service.usecases.indexes import compute_pool

from .deps import SettingsDep, TenantDep, require_graph
from .errors import InvalidParams, PayloadTooLarge, UnsupportedMediaType
from .graphs import parse_version
from .etags import etag_matches
from .node_ids import node_route
from .rendering import round_document
from .schemas.common import PROBLEM_RESPONSES
from .schemas.recommendations import (
    NEXT_CONTACTS_BODY,
    Method,
    NextContactsPage,
    NextContactsRequest,
    RecommendationPage,
)

__all__ = ["router"]

router = APIRouter(tags=["recommendations"], responses=PROBLEM_RESPONSES)
T = TypeVar("T")


def _maker(request: Request) -> sessionmaker[Session]:
    maker: sessionmaker[Session] = request.app.state.sessionmaker
    return maker


async def _compute(fn: Callable[[], T]) -> T:
    """Run ``fn`` on the bounded compute pool (see service.usecases.indexes), off the event loop."""
    return await asyncio.get_running_loop().run_in_executor(compute_pool(), fn)


@node_route(
    router,
    "/v1/graphs/{graph_id}/nodes/{node_id}/recommendations",
    dependencies=[Depends(require_graph)],
    summary="Whom to introduce a person to, with the shared contacts that explain it",
    description=(
        "People the node is not yet tied to, best first. `node_id` is one path segment, "
        "percent-encoded (`/` as `%2F`). Methods: `adamic_adar` (default), `resource_allocation`, "
        "`jaccard`, `common_neighbours`, `preferential_attachment`, `personalized_pagerank`, "
        "`weighted_adamic_adar` (alias `tie_strength`). An unknown node is a 404. The first "
        "request on a version builds its neighbour index (seconds on a million edges); later "
        "ones touch only the person's neighbourhood. The answer is fixed by the version and "
        "the parameters, hence the ETag."
    ),
    response_model=RecommendationPage,
    responses={304: {"description": "Not modified (If-None-Match matched the ETag)."}},
)
async def list_recommendations(
    graph_id: str,
    node_id: str,
    request: Request,
    tenant: TenantDep,
    method: Method = "adamic_adar",
    limit: Annotated[int, Query(ge=1, le=1000)] = 10,
    contactable: Annotated[bool, Query(description="Only people with contact consent.")] = False,
    version: Annotated[str | None, Query(description="Version number or 'latest' (default).")] = None,
    explain: Annotated[int, Query(ge=0, le=20, description="Shared contacts per recommendation.")] = 3,
    if_none_match: Annotated[str | None, Header(alias="If-None-Match")] = None,
) -> Response:
    query = introductions.PersonQuery(graph_id, node_id, method=method, limit=limit, contactable=contactable,
                                      explain=explain, version=parse_version(version))
    maker = _maker(request)

    def work() -> Response:
        answer = introductions.recommend_for_person(
            maker, tenant, query, is_current=lambda etag: etag_matches(if_none_match, etag))
        headers = {"ETag": answer.etag, "Cache-Control": "no-cache"}
        if answer.document is None:
            return Response(status_code=status.HTTP_304_NOT_MODIFIED, headers=headers)
        return JSONResponse(round_document(answer.document), headers=headers)

    return await _compute(work)


async def _read_body(request: Request, limit: int) -> bytes:
    declared = request.headers.get("content-length")
    if declared is not None and declared.isdigit() and int(declared) > limit:
        raise PayloadTooLarge(f"body of {int(declared)} bytes exceeds the limit of {limit} bytes", limit=limit)
    chunks, size = [], 0
    async for chunk in request.stream():
        size += len(chunk)
        if size > limit:
            raise PayloadTooLarge(f"body exceeds the limit of {limit} bytes", limit=limit)
        chunks.append(chunk)
    return b"".join(chunks)


def _validation(exc: ValidationError, prefix: tuple[str, ...]) -> RequestValidationError:
    errors = [{**e, "loc": (*prefix, *e["loc"])} for e in exc.errors(include_url=False, include_context=False)]
    return RequestValidationError(errors)


@router.post(
    "/v1/graphs/{graph_id}/next-contacts",
    dependencies=[Depends(require_graph)],
    summary="Which non-adopters to contact next, and which adopter should ask each",
    description=(
        "Non-adopters with contact consent, those with an adopter who may ask them first, then by "
        "exposure, their chance of being reached in the next round from the adopters: Independent "
        "Cascade 1 - prod(1 - p_uv), Linear Threshold the adopters' incoming weight (Kempe, Kleinberg "
        "and Tardos 2003), optionally blended with a follow-on measure; equal exposures (common under "
        "weighted cascade) by the strength of the asking tie. Each names the adopter best placed to "
        "ask (strongest tie); `exposure_explained` says in words what exposure means under the chosen "
        "model. Only people with contact consent are listed or asked. `group_by=adopter` answers per adopter whom to ask them to "
        "refer, each target assigned to one adopter only. Unknown adopter ids are a 422 listing "
        "them (or, with strict=false, skipped and counted)."
    ),
    openapi_extra=NEXT_CONTACTS_BODY,
    responses={200: {"model": NextContactsPage}},
)
async def create_next_contacts(
    graph_id: str,
    request: Request,
    tenant: TenantDep,
    settings: SettingsDep,
    id: Annotated[str | None, Query(max_length=200, description="CSV body: the id column.")] = None,
    limit: Annotated[str | None, Query(description="CSV body: a number, or 'all'.")] = None,
    model: Annotated[str | None, Query(description="CSV body: 'ic' or 'lt'.")] = None,
    scheme: Annotated[str | None, Query(description="CSV body: probability scheme.")] = None,
    p: Annotated[float | None, Query(description="CSV body: probability.p.")] = None,
    q: Annotated[float | None, Query(description="CSV body: probability.q.")] = None,
    random_seed: Annotated[int | None, Query()] = None,
    version: Annotated[str | None, Query(description="CSV body: version number or 'latest'.")] = None,
    follow_on: Annotated[str | None, Query()] = None,
    blend: Annotated[float | None, Query()] = None,
    group_by: Annotated[str | None, Query()] = None,
    per_adopter: Annotated[int | None, Query()] = None,
    strict: Annotated[bool | None, Query()] = None,
) -> Response:
    ctype = (request.headers.get("content-type") or "").split(";")[0].strip().lower()
    if ctype not in ("application/json", "text/csv", "application/csv"):
        raise UnsupportedMediaType(
            f"Content-Type {ctype or '(none)'!r} is not read here; send application/json or text/csv",
            field="Content-Type",
        )
    raw = await _read_body(request, settings.max_body_bytes)
    options: dict[str, Any] = {
        k: v for k, v in {
            "limit": limit, "model": model, "random_seed": random_seed, "version": version,
            "follow_on": follow_on, "blend": blend, "group_by": group_by, "per_adopter": per_adopter,
            "strict": strict,
        }.items() if v is not None
    }
    prob = {k: v for k, v in {"scheme": scheme, "p": p, "q": q}.items() if v is not None}
    if ctype == "application/json":
        if options or prob or id is not None:
            raise InvalidParams(
                "with a JSON body, give the options in the body, not as query parameters",
                field=next(iter([*options, *prob, "id"])),
            )
        try:
            req = NextContactsRequest.model_validate_json(raw, strict=True)  # 0 is no boolean
        except ValidationError as exc:
            raise _validation(exc, ("body",)) from exc
    else:
        ids = await asyncio.to_thread(contacts.read_adopter_ids, raw, id or "id")
        if options.get("limit") == "all":
            options["limit"] = None
        if "version" in options and options["version"] != "latest":
            options["version"] = parse_version(options["version"])
        if prob:
            options["probability"] = prob
        try:
            req = NextContactsRequest.model_validate({**options, "adopters": ids})
        except ValidationError as exc:
            raise _validation(exc, ("query",)) from exc
    query = contacts.AdopterQuery(**{**dict(req), "graph_id": graph_id, "adopters": tuple(req.adopters),
                                     "version": parse_version(req.version)})
    maker = _maker(request)
    return await _compute(lambda: JSONResponse(round_document(contacts.next_contacts_for(maker, tenant, query))))
