"""The ``scores`` job kind: a door over :mod:`service.usecases.scores`."""

from __future__ import annotations

from service.usecases import result_models
from service.usecases.scores import compute_scores, precheck, ScoresParams

from .. import admission
from ..kinds import JobKind, TaskContext, TaskOutput

__all__ = ["KIND", "run"]


def run(ctx: TaskContext, params: ScoresParams) -> TaskOutput:
    return compute_scores(ctx.load(), params, progress=ctx.progress)


KIND = JobKind(
    result=result_models.ScoresResult,
    name="scores",
    params=ScoresParams,
    run=run,
    estimate=admission.scores_estimate,
    precheck=precheck,
    summary="Node scores: degree, strength, PageRank, eigenvector, hubs/authorities, betweenness, "
    "harmonic closeness, k-core, clustering, constraint, Leiden communities",
    result_description=(
        "`measures`: per measure its normalisation, weighting and method (sampled betweenness: "
        "epsilon, delta, samples, error_bound); `communities`: count and modularity when computed; "
        "`nodes`, `edges`. Arrays per measure m: `score.m` (float64), `order.m` (int32 node "
        "indices best first, ties by node id), `pct.m` (float64 percentile rank); `id_order`; "
        "with communities `community.membership`, `community.size`, `community.internal_edges`. "
        "Read them as rankings: GET /v1/graphs/{graph_id}/rankings?measure=m."
    ),
)
