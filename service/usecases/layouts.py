"""Where to draw each person: the ``layout`` capability behind the network picture.

A force-directed layout of a version (igraph's Fruchterman-Reingold for small
networks, DrL for large ones) and its communities (Leiden), stored as the
job's result arrays ``x``, ``y`` and ``community``, one value per person in
the version's node order; :mod:`service.usecases.network_picture` draws them.

igraph holds the interpreter lock for the whole of a layout, which on a large
network outlasts the job's lease: the worker's heartbeat could not run and the
job would be taken up again and again. Above :data:`IN_PROCESS_MAX_NODES`
people the layout and the communities are therefore computed in a child
process (``spawn``), while this one reports progress each second, so the
heartbeat runs and a cancellation ends the child at once.
"""

from __future__ import annotations

import multiprocessing
import time
from typing import TYPE_CHECKING, Any, Literal

import numpy as np
from numpy.typing import NDArray
from pydantic import BaseModel, ConfigDict, Field

from service.analytics.graph import GraphArrays
from service.analytics.structure import force_layout, leiden

from .outcome import Computed, Progress
from .result_models import Result

if TYPE_CHECKING:
    from .loading import LoadedVersion

__all__ = ["LayoutParams", "LayoutResult", "compute_layout", "COMMUNITY_MAX_EDGES", "IN_PROCESS_MAX_NODES"]

#: Communities (for colours and the grouped view) up to this many ties; above, everyone is one group.
COMMUNITY_MAX_EDGES = 5_000_000
#: Up to this many people the layout runs in the worker itself (a second or two).
IN_PROCESS_MAX_NODES = 2000


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


def _positions(g: GraphArrays, method: str, random_seed: int
               ) -> tuple[NDArray[np.int32], NDArray[np.float64], NDArray[np.float64], str]:
    """Communities and positions (run here or in the child process)."""
    if g.m <= COMMUNITY_MAX_EDGES:
        community, _ = leiden(g, random_seed=random_seed)
    else:
        community = np.zeros(g.n, dtype=np.int32)
    x, y, used = force_layout(g, method=method, random_seed=random_seed)  # type: ignore[arg-type]
    return community, x, y, used


def compute_layout(version: LoadedVersion, params: LayoutParams, *, progress: Progress) -> Computed:
    """Positions and communities of every person of ``version``."""
    g = version.graph
    progress(0.05, "placing people")
    if g.n <= IN_PROCESS_MAX_NODES:
        community, x, y, used = _positions(g, params.method, params.random_seed)
    else:
        community, x, y, used = _in_child(g, params, progress)
    progress(1.0, "done")
    count = int(community.max()) + 1 if community.size else 0
    return Computed(data={"method": used, "nodes": g.n, "communities": count},
                    arrays={"x": x.astype(np.float32), "y": y.astype(np.float32),
                            "community": community.astype(np.int32)})


def _in_child(g: GraphArrays, params: LayoutParams, progress: Progress) -> Any:
    """:func:`_positions` in a spawned process; progress every second (a cancellation ends the child)."""
    pool = multiprocessing.get_context("spawn").Pool(1)
    try:
        pending = pool.apply_async(_positions, (g, params.method, params.random_seed))
        start = time.monotonic()
        while not pending.ready():
            pending.wait(1.0)
            elapsed = time.monotonic() - start
            progress(0.05 + 0.9 * elapsed / (elapsed + 60.0), "placing people")
        return pending.get()
    finally:
        pool.terminate()
        pool.join()
