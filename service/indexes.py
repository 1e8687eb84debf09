"""Per-process caches of what synchronous recommendation requests need.

A version is immutable, so the structures built from it can be kept and
shared by every request in the process, like :mod:`service.loader`'s graphs:

- the :class:`~service.analytics.ties.NeighbourIndex` (tie strengths and the
  undirected neighbour rows that introductions walk),
- per-node follow-on measures (degree, PageRank, ...) used to blend next
  contacts.

Each is built once per version and key: the first request builds it, while
concurrent requests for the same key wait for that one build instead of
starting their own. Caches are bounded by an approximate byte budget and
evicted least recently used first. (The arcs with probabilities that next
contacts walk come from the shared cache in :mod:`service.diffusion_cache`.)

Requests run their numeric work on :func:`compute_pool`, a small thread pool:
the neighbour index keeps per-thread scratch arrays of ~30 bytes per node,
so bounding the threads bounds that memory (the web server's own pool has
dozens of threads).
"""

from __future__ import annotations

import os
import threading
from collections import OrderedDict
from collections.abc import Callable, Hashable
from concurrent.futures import Future, ThreadPoolExecutor
from typing import Any, Generic, TypeVar

import numpy as np
from numpy.typing import NDArray

from service.analytics.graph import GraphArrays
from service.analytics.ties import NeighbourIndex, neighbour_index

__all__ = [
    "BuildOnceCache",
    "FOLLOW_ON_MEASURES",
    "INDEX_CACHE_BYTES",
    "neighbour_index_for",
    "follow_on_for",
    "compute_pool",
    "clear_caches",
    "index_nbytes",
]

INDEX_CACHE_BYTES = 1024**3
MEASURE_CACHE_BYTES = 256 * 1024**2
COMPUTE_THREADS = max(2, min(4, os.cpu_count() or 2))

#: Per-node measures that may be blended into next contacts: near-linear ones only,
#: since they are computed on the request path (once per version).
FOLLOW_ON_MEASURES: tuple[str, ...] = (
    "degree", "in_degree", "out_degree", "strength", "pagerank", "coreness",
)

K = TypeVar("K", bound=Hashable)
V = TypeVar("V")


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


class BuildOnceCache(Generic[K, V]):
    """A thread-safe LRU cache that builds each missing value exactly once.

    Concurrent callers asking for a key being built wait for that build; a
    failed build is not cached (each waiter gets the error, the next caller
    tries again). Past ``max_bytes`` the least recently used entries go, but
    the newest one always stays.
    """

    def __init__(self, max_bytes: int, size: Callable[[V], int]) -> None:
        self.max_bytes = max_bytes
        self._size = size
        self._lock = threading.Lock()
        self._items: OrderedDict[K, tuple[V, int]] = OrderedDict()
        self._building: dict[K, Future[V]] = {}
        self.builds = 0

    def get(self, key: K, build: Callable[[], V]) -> V:
        with self._lock:
            hit = self._items.get(key)
            if hit is not None:
                self._items.move_to_end(key)
                return hit[0]
            pending = self._building.get(key)
            owner = pending is None
            if pending is None:
                pending = Future()
                self._building[key] = pending
        if not owner:
            return pending.result()
        try:
            value = build()
        except BaseException as exc:
            with self._lock:
                self._building.pop(key, None)
            pending.set_exception(exc)
            raise
        nbytes = self._size(value)
        with self._lock:
            self.builds += 1
            self._building.pop(key, None)
            self._items[key] = (value, nbytes)
            total = sum(n for _, n in self._items.values())
            while total > self.max_bytes and len(self._items) > 1:
                _, (_, old) = self._items.popitem(last=False)
                total -= old
        pending.set_result(value)
        return value

    def __contains__(self, key: object) -> bool:
        with self._lock:
            return key in self._items

    def clear(self) -> None:
        with self._lock:
            self._items.clear()


_indexes: BuildOnceCache[str, NeighbourIndex] = BuildOnceCache(INDEX_CACHE_BYTES, index_nbytes)
_measures: BuildOnceCache[tuple[str, str], NDArray[np.float64]] = BuildOnceCache(
    MEASURE_CACHE_BYTES, lambda a: int(a.nbytes)
)
_pool: ThreadPoolExecutor | None = None
_pool_lock = threading.Lock()


def neighbour_index_for(version_id: str, graph: GraphArrays) -> NeighbourIndex:
    """The version's neighbour index with the default tie-strength shares (built once)."""
    return _indexes.get(version_id, lambda: neighbour_index(graph))


def follow_on_for(version_id: str, graph: GraphArrays, measure: str) -> NDArray[np.float64]:
    """One per-node measure of :data:`FOLLOW_ON_MEASURES` (computed once per version)."""

    def build() -> NDArray[np.float64]:
        from service.analytics import centrality

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

    return _measures.get((version_id, measure), build)


def compute_pool() -> ThreadPoolExecutor:
    """The bounded thread pool that runs request computations (created on first use)."""
    global _pool
    with _pool_lock:
        if _pool is None:
            _pool = ThreadPoolExecutor(COMPUTE_THREADS, thread_name_prefix="bw-compute")
        return _pool


def clear_caches() -> None:
    """Forget every cached index and measure (tests)."""
    for cache in (_indexes, _measures):
        cache.clear()
