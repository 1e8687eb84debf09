"""``profile``: the expensive parts of a version's graph profile.

Degree distribution with its power-law fit, clustering, assortativity and
distance estimates, computed by ``service.analytics.structure.profile.graph_profile``;
the cheap figures (size, density, components, reciprocity) are already in
the version's stored summary.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from pydantic import BaseModel, ConfigDict, Field

from .outcome import RESERVED_RESULT_KEYS, Computed, Progress

if TYPE_CHECKING:
    from .loading import LoadedVersion

__all__ = ["ProfileParams", "profile_version"]


class ProfileParams(BaseModel):
    model_config = ConfigDict(extra="forbid")

    random_seed: int = Field(default=0, ge=0, le=2**63 - 1, description="Seed of the sampled estimates.")
    bfs_samples: int | None = Field(
        default=None, ge=1, le=1_000_000, description="BFS sources for distance estimates (default: automatic)."
    )
    bootstrap: int = Field(
        default=0, ge=0, le=10_000, description="Bootstrap rounds for the power-law fit's p-value (0: none)."
    )


def profile_version(version: LoadedVersion, params: ProfileParams, *, progress: Progress) -> Computed:
    from service.analytics.structure.profile import graph_profile

    options = {"bfs_samples": params.bfs_samples} if params.bfs_samples is not None else {}
    data = graph_profile(
        version.graph,
        random_seed=params.random_seed,
        bootstrap=params.bootstrap,
        progress=progress,
        **options,
    )
    return Computed(data={k: v for k, v in data.items() if k not in RESERVED_RESULT_KEYS})
