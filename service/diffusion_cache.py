"""A bounded per-process cache of :class:`~service.analytics.graph.DiffusionGraph`.

Building a diffusion graph (arcs, probabilities, both CSR orientations) costs
O(m log m) and about 40 bytes per arc; a version is immutable, so each
process builds it once per probability model and keeps it. Forecasts,
shortlists and next contacts all ask here (through
:meth:`service.jobs.tasks.diffusion_settings.DiffusionSettings.diffusion_graph`
or :func:`diffusion_graph_for`), so a second job on the same version and
settings reuses the arrays; the compiled kernels then find their prepared
arrays in their own identity cache (``service.analytics._kernels.kernel_graph``).

The key is ``(version_id, model, scheme, p, q, random_seed)`` where the
settings a scheme ignores are blanked (``p`` only for uniform, ``q`` only
for per_interaction, the seed only for trivalency), so they do not split the
cache. The first caller of a key builds it; concurrent callers of the same
key wait for that build. Entries are evicted least recently used first past
``max_bytes`` (the newest entry always stays). Nothing happens at import.
"""

from __future__ import annotations

import threading
from collections import OrderedDict
from concurrent.futures import Future
from typing import NamedTuple

import numpy as np

from service.analytics.graph import DiffusionGraph, GraphArrays, diffusion_graph

__all__ = ["DIFFUSION_CACHE_BYTES", "CacheKey", "CacheInfo", "cache_key", "diffusion_graph_for", "cache_info", "clear_cache"]

DIFFUSION_CACHE_BYTES = 1024**3


class CacheKey(NamedTuple):
    version_id: str
    model: str
    scheme: str
    p: float | None
    q: float | None
    random_seed: int


class CacheInfo(NamedTuple):
    entries: int
    nbytes: int
    builds: int
    hits: int


def cache_key(
    version_id: str, *, model: str, scheme: str, p: float | None, q: float | None, random_seed: int
) -> CacheKey:
    """The cache key: settings the scheme ignores are blanked."""
    return CacheKey(
        version_id,
        model,
        scheme,
        None if scheme != "uniform" or p is None else float(p),
        None if scheme != "per_interaction" or q is None else float(q),
        int(random_seed) if scheme == "trivalency" else 0,
    )


def _nbytes(dg: DiffusionGraph) -> int:
    return sum(int(v.nbytes) for v in dg if isinstance(v, np.ndarray))


class _Cache:
    def __init__(self, max_bytes: int) -> None:
        self.max_bytes = max_bytes
        self.lock = threading.Lock()
        self.items: OrderedDict[CacheKey, tuple[DiffusionGraph, int]] = OrderedDict()
        self.building: dict[CacheKey, Future[DiffusionGraph]] = {}
        self.builds = 0
        self.hits = 0

    def get(self, key: CacheKey, graph: GraphArrays) -> DiffusionGraph:
        with self.lock:
            hit = self.items.get(key)
            if hit is not None:
                self.items.move_to_end(key)
                self.hits += 1
                return hit[0]
            pending = self.building.get(key)
            owner = pending is None
            if pending is None:
                pending = self.building[key] = Future()
        if not owner:
            return pending.result()
        try:
            dg = diffusion_graph(graph, model=key.model, scheme=key.scheme, p=key.p, q=key.q,
                                 random_seed=key.random_seed)
        except BaseException as exc:  # not cached: the next caller tries again
            with self.lock:
                self.building.pop(key, None)
            pending.set_exception(exc)
            raise
        size = _nbytes(dg)
        with self.lock:
            self.builds += 1
            self.building.pop(key, None)
            self.items[key] = (dg, size)
            total = sum(s for _, s in self.items.values())
            while total > self.max_bytes and len(self.items) > 1:
                _, (_, old) = self.items.popitem(last=False)
                total -= old
        pending.set_result(dg)
        return dg


_cache = _Cache(DIFFUSION_CACHE_BYTES)


def diffusion_graph_for(
    version_id: str,
    graph: GraphArrays,
    *,
    model: str,
    scheme: str,
    p: float | None = None,
    q: float | None = None,
    random_seed: int = 0,
) -> DiffusionGraph:
    """The diffusion graph of version ``version_id`` (whose arrays are ``graph``), built once.

    Raises what :func:`service.analytics.graph.diffusion_graph` raises
    (``InvalidParameter`` for a bad scheme, ``p``/``q``, explicit without
    probabilities, or Linear Threshold weights above 1); failures are not cached.
    """
    key = cache_key(version_id, model=model, scheme=scheme, p=p, q=q, random_seed=random_seed)
    return _cache.get(key, graph)


def cache_info() -> CacheInfo:
    """Entries, bytes held, builds and hits so far (for tests and metrics)."""
    with _cache.lock:
        return CacheInfo(len(_cache.items), sum(s for _, s in _cache.items.values()), _cache.builds, _cache.hits)


def clear_cache() -> None:
    """Forget every cached diffusion graph (tests)."""
    with _cache.lock:
        _cache.items.clear()
