"""Link evaluation: which introduction method fits this graph.

:func:`evaluate_links` is the body of the ``link_evaluation`` job kind. It hides a
random share of the ties (reproducible from ``random_seed``), builds the neighbour
index on the rest, and scores the hidden pairs against sampled untied pairs with each
method, by :func:`service.analytics.ties.evaluation.evaluate_link_prediction`. The
answer is AUC and precision at k per method and the best method by AUC;
:func:`link_evaluation_table` is its CSV export.

A kind of its own rather than a flag on ``recommendations``: it shares no parameter
with the batch export and returns a different document.
"""

from __future__ import annotations

from collections.abc import Iterator
from typing import Any, Literal, get_args

from numpy.typing import NDArray
from pydantic import BaseModel, ConfigDict, Field

from service.analytics.ties.evaluation import evaluate_link_prediction
from service.analytics.ties.recommend import LinkMethod
from service.usecases.loading import LoadedVersion

from .recommendations import METHOD_ALIASES, BatchOutput, LinkMethodName, Progress

__all__ = ["ALL_METHODS", "LinkEvaluationParams", "evaluate_links", "link_evaluation_table"]

ALL_METHODS: list[LinkMethodName] = list(get_args(LinkMethod))  # every method the engine has


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


def evaluate_links(v: LoadedVersion, params: LinkEvaluationParams, *, progress: Progress) -> BatchOutput:
    """AUC and precision at k of each method on held-out ties, the best by AUC (no arrays)."""
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
        progress=lambda f: progress(f, "evaluating"),
    )
    return BatchOutput(data=dict(report))


def link_evaluation_table(
    version: LoadedVersion, data: dict[str, Any], arrays: dict[str, NDArray[Any]]
) -> tuple[list[str], Iterator[list[Any]]]:
    """One row per method: AUC and precision at k, best first."""
    scores = data["methods"]
    order = sorted(scores, key=lambda m: -(scores[m]["auc"] or 0.0))
    rows = ([m, scores[m]["auc"], scores[m]["precision_at_k"], data["k"]] for m in order)
    return ["method", "auc", "precision_at_k", "k"], rows
