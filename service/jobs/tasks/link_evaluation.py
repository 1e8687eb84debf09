"""``link_evaluation``: which introduction method fits this graph.

Hides a random share of the ties (reproducible from ``random_seed``), builds
the neighbour index on the rest, and scores the hidden pairs against sampled
untied pairs with each method, by
``service.analytics.ties.evaluation.evaluate_link_prediction``. The answer is
AUC and precision at k per method and the best method by AUC.

A kind of its own rather than a flag on ``recommendations``: it shares no
parameter with the batch export and returns a different document.
"""

from __future__ import annotations


from collections.abc import Iterator
from typing import TYPE_CHECKING, Any, Literal

from numpy.typing import NDArray
from pydantic import BaseModel, ConfigDict, Field

from .. import admission
from ..kinds import RESERVED_RESULT_KEYS, JobKind, TaskContext, TaskOutput
from .recommendations import METHOD_ALIASES, LinkMethodName

if TYPE_CHECKING:
    from service.usecases.loading import LoadedVersion

__all__ = ["LinkEvaluationParams", "run", "csv_table", "KIND"]

ALL_METHODS: list[LinkMethodName] = [
    "adamic_adar",
    "resource_allocation",
    "jaccard",
    "common_neighbours",
    "preferential_attachment",
    "personalized_pagerank",
    "weighted_adamic_adar",
]


class LinkEvaluationParams(BaseModel):
    model_config = ConfigDict(extra="forbid")

    methods: list[LinkMethodName] = Field(
        default_factory=lambda: list(ALL_METHODS), min_length=1, description="Methods to compare."
    )
    holdout: float = Field(default=0.1, gt=0, lt=1, description="Share of ties hidden.")
    random_seed: int = Field(default=0, ge=0, le=2**63 - 1, description="Seeds the hidden set and negatives.")
    k: int = Field(default=100, ge=1, le=1_000_000, description="For precision at k.")
    negatives: Literal["uniform", "two_hop"] = Field(
        default="uniform",
        description="'uniform': any untied pair; 'two_hop': untied pairs sharing a contact (harder).",
    )
    negatives_per_positive: int = Field(default=1, ge=1, le=100)
    max_positives: int | None = Field(
        default=10_000, ge=1, description="Score at most this many hidden ties (null: all)."
    )


def run(ctx: TaskContext, params: LinkEvaluationParams) -> TaskOutput:
    from service.analytics.ties.evaluation import evaluate_link_prediction

    v = ctx.load()
    methods = list(dict.fromkeys(METHOD_ALIASES.get(m, m) for m in params.methods))
    report = evaluate_link_prediction(
        v.graph,
        methods=methods,
        holdout=params.holdout,
        random_seed=params.random_seed,
        negatives_per_positive=params.negatives_per_positive,
        negatives=params.negatives,
        k=params.k,
        max_positives=params.max_positives,
        progress=lambda f: ctx.progress(f, "evaluating"),
    )
    return TaskOutput(data={k: val for k, val in report.items() if k not in RESERVED_RESULT_KEYS})


def csv_table(
    version: LoadedVersion, data: dict[str, Any], arrays: dict[str, NDArray[Any]]
) -> tuple[list[str], Iterator[list[Any]]]:
    """One row per method: AUC and precision at k, best first."""
    scores = data["methods"]
    order = sorted(scores, key=lambda m: -(scores[m]["auc"] or 0.0))
    rows = ([m, scores[m]["auc"], scores[m]["precision_at_k"], data["k"]] for m in order)
    return ["method", "auc", "precision_at_k", "k"], rows


KIND = JobKind(
    csv=csv_table,
    name="link_evaluation",
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
