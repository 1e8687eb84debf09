"""SVG plots of job results: reach versus budget, reach per segment, adoption, outcomes, degrees."""

from __future__ import annotations

from typing import Any, Literal

from fastapi import APIRouter, Response

from service.jobs import registry
from storage.repo import jobs as job_repo
from storage.repo import results as result_repo

from .deps import DbDep, TenantDep
from .errors import InvalidParams
from .schemas.common import PROBLEM_RESPONSES

__all__ = ["router", "render_plot", "PLOTS"]

router = APIRouter(tags=["plots"], responses=PROBLEM_RESPONSES)


def _plots() -> dict[str, tuple[str, ...]]:
    """Plot name -> the job kinds it is drawn from, as the kinds declare them."""
    found: dict[str, list[str]] = {}
    for kind in registry.REGISTRY.values():
        for name in kind.plots:
            found.setdefault(name, []).append(kind.name)
    return {name: tuple(kinds) for name, kinds in found.items()}


#: Plot name -> the job kinds it is drawn from.
PLOTS = _plots()
PlotName: Any = Literal[tuple(PLOTS)]  # the plot names the registry's kinds declare

SVG_RESPONSE: dict[int | str, dict[str, Any]] = {
    200: {"content": {"image/svg+xml": {"schema": {"type": "string"}}}, "description": "An SVG image."}
}


@router.get(
    "/v1/jobs/{job_id}/plots/{name}.svg",
    summary="Plot a job's result as SVG",
    description=(
        "`reach_curve` (shortlist): expected reach against the number of people contacted, with its "
        "interval, the budget marked and a second axis in % of people. `segment_reach` (shortlist, "
        "forecast): expected reach per segment. `adoption` (forecast): people reached by round, the "
        "average with its interval and the band holding 90% of campaigns. `outcomes` (forecast): "
        "histogram of simulated campaign outcomes. `degree_distribution` (profile): ties per person, "
        "log-log, with the fitted power law. `neighbourhood_law` (odd_neighbourhoods): ties against "
        "contacts of every person, the fitted law, the near-cliques and near-stars marked. `group_density` "
        "(dense_groups): each group's share of its possible ties or shared values present, against the "
        "whole table's, by the kind of evidence."
    ),
    response_class=Response,
    responses=SVG_RESPONSE,
)
def read_plot(job_id: str, name: PlotName, db: DbDep, tenant: TenantDep) -> Response:
    job = job_repo.get_job(db, tenant, job_id)
    want = _plots().get(name, ())
    if job.kind not in want:
        raise InvalidParams(
            f"plot {name!r} is drawn from a {' or '.join(want)} job; job {job.id} is a {job.kind} job", field="name"
        )
    if job.status != "succeeded":
        raise InvalidParams(f"job {job.id} has not succeeded (status {job.status}); no plot yet", field="job_id")
    result = result_repo.get_result(db, job.id)
    svg = registry.get_kind(job.kind).plots[name](result.data)
    return Response(svg, media_type="image/svg+xml", headers={"ETag": f'"{result.etag}-{name}-2"'})


def render_plot(name: str, data: dict[str, Any]) -> str:
    """The SVG for one plot of a result's data (the first kind that declares the plot draws it)."""
    kinds = _plots().get(name)
    if not kinds:
        raise InvalidParams(f"unknown plot {name!r}; plots: {', '.join(_plots())}", field="name")
    return registry.get_kind(kinds[0]).plots[name](data)
