"""``profile``: the expensive parts of a version's graph profile.

Degree distribution with its power-law fit, clustering, assortativity and
distance estimates, computed by ``service.analytics.structure.profile.graph_profile``;
the cheap figures (size, density, components, reciprocity) are already in
the version's stored summary.
"""

from __future__ import annotations

from pydantic import BaseModel, ConfigDict, Field

from .. import admission
from ..kinds import RESERVED_RESULT_KEYS, JobKind, TaskContext, TaskOutput

__all__ = ["ProfileParams", "run", "KIND"]


class ProfileParams(BaseModel):
    model_config = ConfigDict(extra="forbid")

    random_seed: int = Field(default=0, ge=0, le=2**63 - 1, description="Seed of the sampled estimates.")
    bfs_samples: int | None = Field(
        default=None, ge=1, le=1_000_000, description="BFS sources for distance estimates (default: automatic)."
    )
    bootstrap: int = Field(
        default=0, ge=0, le=10_000, description="Bootstrap rounds for the power-law fit's p-value (0: none)."
    )


def run(ctx: TaskContext, params: ProfileParams) -> TaskOutput:
    from service.analytics.structure.profile import graph_profile

    version = ctx.load()
    options = {"bfs_samples": params.bfs_samples} if params.bfs_samples is not None else {}
    data = graph_profile(
        version.graph,
        random_seed=params.random_seed,
        bootstrap=params.bootstrap,
        progress=ctx.progress,
        **options,
    )
    return TaskOutput(data={k: v for k, v in data.items() if k not in RESERVED_RESULT_KEYS})


KIND = JobKind(
    name="profile",
    params=ProfileParams,
    run=run,
    estimate=admission.linear_estimate,
    summary="Graph profile: degree distribution and power-law fit, clustering, assortativity, distances",
    result_description=(
        "summary (people, ties, components, reciprocity, degree median and maximum); degree "
        "distribution with a power-law fit (Clauset, Shalizi and Newman 2009); clustering; "
        "assortativity; estimated average distance and effective diameter; communities; readings "
        "(one plain sentence per figure)."
    ),
)
