"""The ``layout`` job kind: a door over :mod:`service.usecases.layouts`."""

from __future__ import annotations

from service.usecases.layouts import LayoutParams, LayoutResult, compute_layout

from .. import admission
from ..kinds import JobKind, TaskContext, TaskOutput

__all__ = ["KIND", "run"]


def run(ctx: TaskContext, params: LayoutParams) -> TaskOutput:
    return compute_layout(ctx.load(), params, progress=ctx.progress)


KIND = JobKind(
    result=LayoutResult,
    name="layout",
    params=LayoutParams,
    run=run,
    estimate=admission.scores_estimate,
    summary="Network picture: where to draw each person (force-directed layout) and their communities",
    result_description=(
        "method (fruchterman_reingold or drl), nodes, communities; arrays x, y (positions in the unit square) "
        "and community, one per person; drawn by GET /v1/graphs/{graph_id}/versions/{n}/layout.svg."
    ),
)
