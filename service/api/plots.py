"""SVG plots of job results: degree distribution, reach versus budget, adoption by round."""

from __future__ import annotations

from typing import Any, Literal

from fastapi import APIRouter, Response

from service import plots
from storage.repo import jobs as job_repo
from storage.repo import results as result_repo

from .deps import DbDep, TenantDep
from .errors import InvalidParams
from .schemas.common import PROBLEM_RESPONSES

__all__ = ["router", "render_plot"]

router = APIRouter(tags=["plots"], responses=PROBLEM_RESPONSES)

PLOTS = {
    "degree_distribution": "profile",
    "reach_curve": "shortlist",
    "adoption": "forecast",
}

SVG_RESPONSE: dict[int | str, dict[str, Any]] = {
    200: {"content": {"image/svg+xml": {"schema": {"type": "string"}}}, "description": "An SVG image."}
}


@router.get(
    "/v1/jobs/{job_id}/plots/{name}.svg",
    summary="Plot a job's result as SVG",
    response_class=Response,
    responses=SVG_RESPONSE,
)
def read_plot(
    job_id: str,
    name: Literal["degree_distribution", "reach_curve", "adoption"],
    db: DbDep,
    tenant: TenantDep,
) -> Response:
    job = job_repo.get_job(db, tenant, job_id)
    want = PLOTS[name]
    if job.kind != want:
        raise InvalidParams(f"plot {name!r} is drawn from a {want} job; job {job.id} is a {job.kind} job", field="name")
    if job.status != "succeeded":
        raise InvalidParams(f"job {job.id} has not succeeded (status {job.status}); no plot yet", field="job_id")
    result = result_repo.get_result(db, job.id)
    svg = render_plot(name, result.data)
    return Response(svg, media_type="image/svg+xml", headers={"ETag": f'"{result.etag}-{name}"'})


def render_plot(name: str, data: dict[str, Any]) -> str:
    """The SVG for one plot of a result's data."""
    if name == "degree_distribution":
        dist = data["degree_distribution"]["total"]
        edges, density = dist["edges"], dist["density"]
        # Bin centres on the log scale (geometric mean of the bin edges).
        centres = [(a * max(b - 1, a)) ** 0.5 for a, b in zip(edges[:-1], edges[1:])]
        pts = [(c, d) for c, d in zip(centres, density) if d > 0]
        fit = data.get("power_law") or {}
        return plots.degree_distribution_svg([p[0] for p in pts], [p[1] for p in pts], fit=fit)
    if name == "reach_curve":
        curve = [float(v) for v in data["reach_curve"]]
        baselines = {
            k: [float(v) for v in b["reach_curve"]]
            for k, b in (data.get("baselines") or {}).items()
            if isinstance(b, dict) and b.get("reach_curve")
        }
        return plots.reach_curve_svg(curve, baselines)
    if name == "adoption":
        sets = data.get("forecasts") or []
        if not sets:
            raise InvalidParams("the forecast has no seed sets to plot", field="name")
        series = {}
        for r in sets:
            br = r["by_round"]
            series[r["name"]] = (
                [x["round"] for x in br],
                [x["cumulative_mean"] for x in br],
                [x["ci_low"] for x in br],
                [x["ci_high"] for x in br],
            )
        first = next(iter(series))
        r0, m0, lo0, hi0 = series.pop(first)
        return plots.adoption_svg(r0, m0, lo0, hi0, label=first, others=series)
    raise InvalidParams(f"unknown plot {name!r}", field="name")
