"""``recommendations``: introductions for many people in one batch, for nightly exports.

The same ranking as ``GET /v1/graphs/{id}/nodes/{node}/recommendations``, for every node
or a given list: :func:`service.usecases.recommendations.recommend_everyone`. The result
document holds the counts; the rows are stored as arrays (one entry per recommendation)
and exported as CSV by ``GET /v1/jobs/{job_id}/result.csv`` (see :func:`csv_table`).
"""

from __future__ import annotations

from service.usecases import result_models
from collections.abc import Iterator
from typing import TYPE_CHECKING, Any

from numpy.typing import NDArray

from service.usecases import recommendations as use_case
from service.usecases.recommendations import RecommendationsParams

from .. import admission
from ..kinds import JobKind, TaskContext, TaskOutput

if TYPE_CHECKING:
    from service.usecases.loading import LoadedVersion

__all__ = ["RecommendationsParams", "run", "csv_table", "KIND"]


def run(ctx: TaskContext, params: RecommendationsParams) -> TaskOutput:
    out = use_case.recommend_everyone(ctx.load(), params, progress=ctx.progress)
    return TaskOutput(data=out.data, arrays=out.arrays)


def csv_table(
    version: LoadedVersion, data: dict[str, Any], arrays: dict[str, NDArray[Any]]
) -> tuple[list[str], Iterator[list[Any]]]:
    """The export: one row per recommendation, ids in place of indices."""
    return use_case.recommendations_table(version, data, arrays)


KIND = JobKind(
    name="recommendations",
    result=result_models.RecommendationsResult,
    csv=csv_table,
    params=RecommendationsParams,
    run=run,
    estimate=admission.linear_estimate,
    summary="Introductions for every node (or a list): link prediction with shared contacts",
    result_description=(
        "Counts (people, people_with_recommendations, rows) and the columns of the CSV export "
        "GET /v1/jobs/{job_id}/result.csv: node_id, rank, candidate_id, score, common, and per "
        "shared contact its id and the two tie strengths. Rows are stored as arrays."
    ),
)
