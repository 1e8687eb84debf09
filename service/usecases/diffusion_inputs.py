"""The per-process cache of :class:`~service.analytics.graph.DiffusionGraph`.

Building a diffusion graph (arcs, probabilities, both CSR orientations) costs
O(m log m) and about 40 bytes per arc; a version is immutable, so each
process builds it once per probability model and keeps it. Forecasts,
shortlists and next contacts all ask here (through
:meth:`service.usecases.diffusion_settings.DiffusionSettings.diffusion_graph`
or :func:`diffusion_graph_for`), so a second job on the same version and
settings reuses the arrays; the compiled kernels then find their prepared
arrays in their own identity cache (``service.analytics.diffusion._kernels.kernel_graph``).

The key is ``(version_id, model, scheme, p, q, random_seed)`` where the
settings a scheme ignores are blanked (``p`` only for uniform, ``q`` only
for per_interaction, the seed only for trivalency), so they do not split the
cache. Entries are kept in :data:`service.usecases.caches.diffusion_cache`, under the
shared byte bound of :mod:`service.usecases.caches`: the first caller of a key builds
it, concurrent callers of the same key wait for that build, and the least
recently used entries go first past the bound. Nothing happens at import.
"""

from __future__ import annotations

from typing import NamedTuple

from service.analytics.graph import DiffusionGraph, GraphArrays, diffusion_graph
from service.usecases.caches import CacheInfo, diffusion_cache

__all__ = ["CacheKey", "CacheInfo", "cache_key", "diffusion_graph_for", "cache_info", "clear_cache"]


class CacheKey(NamedTuple):
    version_id: str
    model: str
    scheme: str
    p: float | None
    q: float | None
    random_seed: int


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
    return diffusion_cache.get(key, lambda: diffusion_graph(
        graph, model=key.model, scheme=key.scheme, p=key.p, q=key.q, random_seed=key.random_seed))


def cache_info() -> CacheInfo:
    """Entries, bytes held, builds and hits so far (for tests and metrics)."""
    return diffusion_cache.info()


def clear_cache() -> None:
    """Forget every cached diffusion graph (tests)."""
    diffusion_cache.clear()
