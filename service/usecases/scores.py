"""``scores``: node scores of a version, stored ready to rank.

Computes the asked measures with ``service.analytics.structure.centrality.scores`` and
stores, per measure, its values, its ranking order and its percentile ranks
(layout and conventions: :mod:`service.usecases._ranking_tables`), so that rankings, the
node view and the communities view only slice arrays.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import TYPE_CHECKING, Any, Literal

import numpy as np
from numpy.typing import NDArray
from pydantic import BaseModel, ConfigDict, Field, field_validator, model_validator

from service.analytics.structure.centrality import MEASURES, scores
from service.analytics.errors import InvalidParameter, UnknownNode
from service.usecases._ranking_tables import ASCENDING, LABEL_MEASURES, key, result_arrays

from .outcome import Computed, Progress

if TYPE_CHECKING:
    from service.usecases.loading import LoadedVersion

__all__ = ["Personalization", "ScoresParams", "check_params", "compute_scores"]

#: Share of the progress bar given to the measures; the rest is ranking.
_COMPUTE_SHARE = 0.95


class Personalization(BaseModel):
    """Where PageRank's random jumps land: a set of people, or a node attribute."""

    model_config = ConfigDict(extra="forbid")

    nodes: list[str] | None = Field(
        default=None, min_length=1, max_length=1_000_000, description="Node ids to jump to, uniformly."
    )
    attribute: Literal["value", "cost"] | None = Field(
        default=None, description="Jump in proportion to this node attribute (missing counts 0)."
    )

    @model_validator(mode="after")
    def _exactly_one(self) -> Personalization:
        if (self.nodes is None) == (self.attribute is None):
            raise ValueError("give exactly one of 'nodes' or 'attribute'")
        return self


class ScoresParams(BaseModel):
    model_config = ConfigDict(extra="forbid")

    measures: list[str] | None = Field(
        default=None,
        min_length=1,
        description="Measures to compute; default: every cheap one, plus betweenness, harmonic "
        "closeness and constraint when n * m <= 1e9. One of: " + ", ".join(MEASURES) + ".",
    )
    weights: bool = Field(default=True, description="Use the edge weights (interaction counts).")
    damping: float = Field(default=0.85, ge=0.0, lt=1.0, description="PageRank damping factor.")
    personalization: Personalization | None = Field(default=None, description="Personalised PageRank.")
    betweenness: Literal["auto", "exact", "sampled"] = Field(
        default="auto", description="Exact (Brandes) or sampled (Riondato-Kornaropoulos); auto samples large graphs."
    )
    betweenness_epsilon: float = Field(
        default=0.01, ge=0.001, lt=1.0,
        description="Sampled: additive error bound. At least 0.001: samples grow as 1/epsilon^2 "
        "(0.001 already draws about 4 million paths).",
    )
    betweenness_delta: float = Field(
        default=0.1, ge=1e-6, lt=1.0,
        description="Sampled: failure probability. At least 1e-6: samples grow with ln(1/delta).",
    )
    harmonic_cutoff: float | None = Field(default=None, gt=0.0, description="Ignore nodes further than this.")
    random_seed: int = Field(default=0, ge=0, le=2**63 - 1, description="Seeds sampling and Leiden.")

    @field_validator("measures")
    @classmethod
    def _known_measures(cls, value: list[str] | None) -> list[str] | None:
        if value is None:
            return None
        unknown = [m for m in value if m not in MEASURES]
        if unknown:
            raise ValueError(f"unknown measure {unknown[0]!r}; expected one of {', '.join(MEASURES)}")
        return list(dict.fromkeys(value))


def check_params(version: LoadedVersion, params: ScoresParams) -> NDArray[Any] | None:
    """Check the params against the version; return the PageRank reset (indices or values).

    Raises
    ------
    UnknownNode
        A personalization id is not in the version (``node_id``, ``unknown``: up to 20).
    InvalidParameter
        A personalization attribute that is negative somewhere or zero everywhere.
    """
    p = params.personalization
    if p is None:
        return None
    if p.nodes is not None:
        index = version.index
        unknown = [s for s in p.nodes if s not in index]
        if unknown:
            raise UnknownNode(
                f"personalization names {len(unknown)} node(s) not in version {version.number}, "
                f"first {unknown[0]!r}",
                field="params.personalization.nodes", node_id=unknown[0], unknown=unknown[:20],
            )
        return np.fromiter((index[s] for s in p.nodes), dtype=np.int64, count=len(p.nodes))
    values = np.nan_to_num(getattr(version.attrs, str(p.attribute)).astype(np.float64), nan=0.0)
    bad = np.flatnonzero(~np.isfinite(values) | (values < 0))
    if bad.size:
        raise InvalidParameter(
            f"personalization attribute {p.attribute!r} must be non-negative",
            field="params.personalization.attribute", node_id=version.ids[int(bad[0])],
        )
    if not values.sum() > 0:
        raise InvalidParameter(
            f"personalization attribute {p.attribute!r} is zero or missing for every node",
            field="params.personalization.attribute",
        )
    return np.asarray(values, dtype=np.float64)


def compute_scores(version: LoadedVersion, params: ScoresParams, *, progress: Progress) -> Computed:
    reset = check_params(version, params)
    result = scores(
        version.graph,
        params.measures,
        weights=params.weights,
        damping=params.damping,
        personalization=reset,
        betweenness=params.betweenness,
        betweenness_epsilon=params.betweenness_epsilon,
        betweenness_delta=params.betweenness_delta,
        harmonic_cutoff=params.harmonic_cutoff,
        random_seed=params.random_seed,
        progress=lambda f, msg: progress(_COMPUTE_SHARE * f, msg),
    )
    arrays = result_arrays(
        version.graph, version.ids, result.values,
        progress=lambda f: progress(_COMPUTE_SHARE + (1 - _COMPUTE_SHARE) * f, "ranking"),
    )
    return Computed(data=_document(version, params, result.meta, arrays), arrays=arrays)


def _document(
    version: LoadedVersion, params: ScoresParams, meta: dict[str, dict[str, Any]], arrays: dict[str, NDArray[Any]]
) -> dict[str, Any]:
    measures: dict[str, dict[str, Any]] = {}
    for name, info in meta.items():
        info = dict(info)
        if name == "pagerank" and params.personalization is not None:
            p = params.personalization
            info["personalization"] = {"nodes": len(p.nodes)} if p.nodes else {"attribute": p.attribute}
        if name not in LABEL_MEASURES:
            info["ranking"] = "lowest first" if name in ASCENDING else "highest first"
        measures[name] = info
    doc: dict[str, Any] = {"nodes": version.graph.n, "edges": version.graph.m, "measures": measures}
    if "community" in meta:
        sizes = arrays[key("community", "size")]
        doc["communities"] = {"count": int(np.count_nonzero(sizes)),
                              "modularity": meta["community"]["modularity"]}
    return doc


def precheck(params: ScoresParams, load: Callable[[], LoadedVersion], *, edges: int) -> None:
    """Refuse unknown personalization ids at job creation (a 422 before anything is queued)."""
    if params.personalization is not None:
        check_params(load(), params)
