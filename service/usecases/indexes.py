"""Per-process caches of what synchronous recommendation requests need.

A version is immutable, so the structures built from it can be kept and
shared by every request in the process, like :mod:`service.usecases.loading`'s graphs:

- the :class:`~service.analytics.ties.strength.NeighbourIndex` (tie strengths and the
  undirected neighbour rows that introductions walk),
- per-node follow-on measures (degree, PageRank, ...) used to blend next
  contacts.

They are kept in :data:`service.usecases.caches.index_cache` and
:data:`service.usecases.caches.measure_cache`, under the shared byte bound of
:mod:`service.usecases.caches`: each is built once per version and key, and concurrent
requests for the same key wait for that one build instead of starting their
own. (The arcs with probabilities that next contacts walk come from
:mod:`service.usecases.diffusion_inputs`.)

Requests run their numeric work on :func:`compute_pool`, a small thread pool:
the neighbour index keeps per-thread scratch arrays of ~30 bytes per node,
so bounding the threads bounds that memory (the web server's own pool has
dozens of threads).
"""

from __future__ import annotations

import os
import threading
from concurrent.futures import ThreadPoolExecutor
from typing import Any

import numpy as np
from numpy.typing import NDArray

from service.analytics.graph import GraphArrays
from service.analytics.ties.strength import NeighbourIndex, neighbour_index
from service.usecases.caches import index_cache, measure_cache

__all__ = [
    "FOLLOW_ON_MEASURES",
    "neighbour_index_for",
    "follow_on_for",
    "compute_pool",
    "clear_caches",
    "index_nbytes",
]

COMPUTE_THREADS = max(2, min(4, os.cpu_count() or 2))

#: Per-node measures that may be blended into next contacts: near-linear ones only,
#: since they are computed on the request path (once per version).
FOLLOW_ON_MEASURES: tuple[str, ...] = (
    "degree", "in_degree", "out_degree", "strength", "pagerank", "coreness",
)


def _arrays_nbytes(obj: Any) -> int:
    """Bytes held by the numpy arrays of a NamedTuple or dataclass, one level deep."""
    values = obj._asdict().values() if hasattr(obj, "_asdict") else vars(obj).values()
    total = 0
    for v in values:
        if isinstance(v, np.ndarray):
            total += v.nbytes
        elif v is not None and (hasattr(v, "_asdict") or hasattr(v, "__dataclass_fields__")):
            total += _arrays_nbytes(v)
    return total


def index_nbytes(index: NeighbourIndex) -> int:
    """Approximate size of a neighbour index, scratch arrays of the compute pool included."""
    return _arrays_nbytes(index) + 30 * index.n * COMPUTE_THREADS


_pool: ThreadPoolExecutor | None = None
_pool_lock = threading.Lock()


def neighbour_index_for(version_id: str, graph: GraphArrays) -> NeighbourIndex:
    """The version's neighbour index with the default tie-strength shares (built once)."""
    return index_cache.get(version_id, lambda: neighbour_index(graph))


def follow_on_for(version_id: str, graph: GraphArrays, measure: str) -> NDArray[np.float64]:
    """One per-node measure of :data:`FOLLOW_ON_MEASURES` (computed once per version)."""

    def build() -> NDArray[np.float64]:
        from service.analytics.structure import centrality

        if measure in ("degree", "in_degree", "out_degree"):
            mode = {"degree": "all", "in_degree": "in", "out_degree": "out"}[measure]
            return centrality.degree(graph, mode=mode)
        if measure == "strength":
            return centrality.strength(graph)
        if measure == "pagerank":
            return centrality.pagerank(graph)
        if measure == "coreness":
            return centrality.coreness(graph)
        raise ValueError(f"unknown follow-on measure {measure!r}")

    return measure_cache.get((version_id, measure), build)


def compute_pool() -> ThreadPoolExecutor:
    """The bounded thread pool that runs request computations (created on first use)."""
    global _pool
    with _pool_lock:
        if _pool is None:
            _pool = ThreadPoolExecutor(COMPUTE_THREADS, thread_name_prefix="bw-compute")
        return _pool


def clear_caches() -> None:
    """Forget every cached index and measure (tests)."""
    index_cache.clear()
    measure_cache.clear()
