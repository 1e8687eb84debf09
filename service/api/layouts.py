"""The network picture for callers: ``GET /v1/graphs/{graph_id}/versions/{n}/layout.svg``."""

from __future__ import annotations

from typing import Annotated, Any, Literal

from fastapi import APIRouter, Depends, Query, Response

from service.usecases.network_picture import MAX_PEOPLE, PictureRequest, network_picture

from .deps import DbDep, TenantDep, require_graph
from .schemas.common import PROBLEM_RESPONSES

__all__ = ["router"]

router = APIRouter(tags=["plots"], responses=PROBLEM_RESPONSES)

SVG_RESPONSE: dict[int | str, dict[str, Any]] = {
    200: {"content": {"image/svg+xml": {"schema": {"type": "string"}}}, "description": "An SVG image."}
}


@router.get(
    "/v1/graphs/{graph_id}/versions/{number}/layout.svg",
    dependencies=[Depends(require_graph)],
    summary="Draw a version's network as SVG",
    description=(
        "People placed by the version's newest `layout` job, sized by `size_by` (`degree`, or a measure of "
        "the version's newest `scores` job), coloured by `colour_by` (community or segment), the seeds of "
        "the `shortlist` job ringed and the people a `forecast` job reaches in at least half of its "
        "campaigns ringed with dashes, with a legend. Above `max_people` people, the seeds' neighbourhood "
        "is drawn and everyone else as one circle per community sized by membership, as the picture says."
    ),
    response_class=Response,
    responses=SVG_RESPONSE,
)
def read_layout_svg(
    graph_id: str,
    number: int,
    db: DbDep,
    tenant: TenantDep,
    size_by: str = "degree",
    colour_by: Literal["community", "segment"] = "community",
    shortlist: Annotated[str | None, Query(description="A shortlist job of this version.")] = None,
    forecast: Annotated[str | None, Query(description="A forecast job of this version.")] = None,
    max_people: Annotated[int, Query(ge=100, le=20_000)] = MAX_PEOPLE,
) -> Response:
    picture = network_picture(db, tenant, graph_id, number, PictureRequest(
        size_by=size_by, colour_by=colour_by, shortlist_job=shortlist, forecast_job=forecast,
        max_people=max_people))
    return Response(picture.svg, media_type="image/svg+xml", headers={"Cache-Control": "no-cache"})
