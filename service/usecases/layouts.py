"""Where to draw each person: the ``layout`` capability behind the network picture.

A force-directed layout of a version (igraph's Fruchterman-Reingold for small
networks, DrL for large ones) and its communities (Leiden), stored as the
job's result arrays ``x``, ``y`` and ``community``, one value per person in
the version's node order; :mod:`service.usecases.network_picture` draws them.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Literal

import numpy as np
from pydantic import BaseModel, ConfigDict, Field

from service.analytics.structure import force_layout, leiden

from .outcome import Computed, Progress
from .result_models import Result

if TYPE_CHECKING:
    from .loading import LoadedVersion

__all__ = ["LayoutParams", "LayoutResult", "compute_layout", "COMMUNITY_MAX_EDGES"]

#: Communities (for colours and the grouped view) up to this many ties; above, everyone is one group.
COMMUNITY_MAX_EDGES = 5_000_000


class LayoutParams(BaseModel):
    model_config = ConfigDict(extra="forbid")

    method: Literal["auto", "fruchterman_reingold", "drl"] = Field(
        default="auto", description="auto: Fruchterman-Reingold up to 5,000 people, DrL above."
    )
    random_seed: int = Field(default=0, ge=0, le=2**63 - 1, description="Equal seeds give equal pictures.")


class LayoutResult(Result):
    kind: Literal["layout"]
    params: LayoutParams
    method: str = Field(description="The layout used: fruchterman_reingold or drl.")
    nodes: int
    communities: int = Field(description="Communities found (colours and grouped circles of the picture).")


def compute_layout(version: LoadedVersion, params: LayoutParams, *, progress: Progress) -> Computed:
    """Positions and communities of every person of ``version``."""
    g = version.graph
    progress(0.05, "communities")
    if g.m <= COMMUNITY_MAX_EDGES:
        community, _ = leiden(g, random_seed=params.random_seed)
    else:
        community = np.zeros(g.n, dtype=np.int32)
    progress(0.3, "positions")
    x, y, used = force_layout(g, method=params.method, random_seed=params.random_seed)
    progress(1.0, "done")
    count = int(community.max()) + 1 if community.size else 0
    return Computed(data={"method": used, "nodes": g.n, "communities": count},
                    arrays={"x": x.astype(np.float32), "y": y.astype(np.float32),
                            "community": community.astype(np.int32)})
