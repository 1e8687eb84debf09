"""``link_evaluation``: which introduction method fits this graph.

AUC and precision at k per method on held-out ties, the best by AUC:
:func:`service.usecases.link_evaluation.evaluate_links`.
"""

from __future__ import annotations

from service.usecases import result_models

from collections.abc import Iterator
from typing import TYPE_CHECKING, Any

from numpy.typing import NDArray

from service.usecases import link_evaluation as use_case
from service.usecases.link_evaluation import LinkEvaluationParams

from .. import admission
from ..kinds import RESERVED_RESULT_KEYS, JobKind, TaskContext, TaskOutput

if TYPE_CHECKING:
    from service.usecases.loading import LoadedVersion

__all__ = ["LinkEvaluationParams", "run", "csv_table", "KIND"]


def run(ctx: TaskContext, params: LinkEvaluationParams) -> TaskOutput:
    out = use_case.evaluate_links(ctx.load(), params, progress=ctx.progress)
    return TaskOutput(data={k: val for k, val in out.data.items() if k not in RESERVED_RESULT_KEYS})


def csv_table(
    version: LoadedVersion, data: dict[str, Any], arrays: dict[str, NDArray[Any]]
) -> tuple[list[str], Iterator[list[Any]]]:
    """One row per method: AUC and precision at k, best first."""
    return use_case.link_evaluation_table(version, data, arrays)


KIND = JobKind(
    name="link_evaluation",
    result=result_models.LinkEvaluationResult,
    csv=csv_table,
    params=LinkEvaluationParams,
    run=run,
    estimate=admission.linear_estimate,
    summary="Which introduction method fits this graph: AUC and precision at k on held-out ties",
    result_description=(
        "methods: {name: {auc, precision_at_k}}, best (highest AUC), positives, negatives, hidden, "
        "train_edges, base_rate (precision of a random ranking), holdout, k, negatives_per_positive, "
        "negative_sampling, max_positives (protocol of Liben-Nowell and Kleinberg 2007)."
    ),
)
