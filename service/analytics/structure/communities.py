"""Communities: Leiden partitions by modularity, and a per-community summary."""

from __future__ import annotations

import random
import threading
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..errors import Cancelled, ComputationFailed, InvalidParameter
from ..graph import GraphArrays, to_igraph

__all__ = ["leiden", "modularity", "community_summary"]

# igraph's random generator is process-global; the lock keeps two threads of
# one process from swapping it under each other.
_RNG_LOCK = threading.Lock()


def _undirected_view(g: GraphArrays, weights: bool) -> Any:
    ig = to_igraph(g, weights=False)
    ig.es["weight"] = g.weight.tolist() if (weights and g.weighted) else [1.0] * g.m
    if g.directed:
        ig = ig.as_undirected(mode="collapse", combine_edges={"weight": "sum"})
    return ig


def leiden(
    g: GraphArrays,
    *,
    weights: bool = True,
    resolution: float = 1.0,
    n_iterations: int = 5,
    random_seed: int = 0,
) -> tuple[NDArray[np.int32], float]:
    """Communities by the Leiden algorithm maximising modularity (Traag et al. 2019).

    Parameters
    ----------
    g : GraphArrays
    weights : bool
        Use interaction counts as edge weights.
    resolution : float
        Modularity resolution gamma (1 = Newman's modularity).
    n_iterations : int
        Leiden iterations; negative runs until an iteration changes nothing.
        The default 5 is close to converged at a fraction of the time (on
        soc-Slashdot0902: modularity 0.3553 in 1.3 s against 0.3568 in 11 s
        until stable; measured).
    random_seed : int
        Equal seeds give equal partitions.

    Returns
    -------
    (membership, modularity)
        ``membership`` int32 per node, communities numbered by size (0 = the
        largest; ties by smallest member index); ``modularity`` of that
        partition on the graph Leiden saw (Newman 2006).

    Raises
    ------
    InvalidParameter
        Non-positive resolution.
    ComputationFailed
        igraph failed.

    Notes
    -----
    Directed graphs are partitioned on their undirected view: reciprocal arcs
    merge into one edge whose weight is their sum. The seed drives a private
    ``random.Random`` handed to igraph for the call only; afterwards igraph is
    given back its default generator (Python's ``random`` module), so no
    state carries from one call to the next.

    References
    ----------
    .. [1] V. A. Traag, L. Waltman, N. J. van Eck (2019). From Louvain to
       Leiden: guaranteeing well-connected communities. Sci. Rep. 9, 5233.
    .. [2] M. E. J. Newman (2006). Modularity and community structure in
       networks. PNAS 103(23), 8577-8582.

    Examples
    --------
    >>> import numpy as np
    >>> g = from_edges([(0, 1), (0, 2), (1, 2), (3, 4), (3, 5), (4, 5), (2, 3)])
    >>> membership, q = leiden(g)
    >>> membership.tolist(), round(q, 4)
    ([0, 0, 0, 1, 1, 1], 0.3571)
    """
    if not resolution > 0:
        raise InvalidParameter("resolution must be positive", field="resolution")
    if g.n == 0:
        return np.zeros(0, dtype=np.int32), 0.0
    ig = _undirected_view(g, weights)
    if ig.ecount() == 0:
        return np.arange(g.n, dtype=np.int32), 0.0
    import igraph

    with _RNG_LOCK:
        igraph.set_random_number_generator(random.Random(random_seed))
        try:
            part = ig.community_leiden(objective_function="modularity", weights="weight",
                                       resolution=resolution, n_iterations=n_iterations)
            q = float(ig.modularity(part.membership, weights="weight",
                                    resolution=resolution))
        except Cancelled:
            raise
        except Exception as exc:
            raise ComputationFailed(f"igraph Leiden failed: {exc}", measure="community") \
                from exc
        finally:
            igraph.set_random_number_generator(random)
    return _by_size(np.asarray(part.membership, dtype=np.int64)), q


def _by_size(labels: NDArray[np.int64]) -> NDArray[np.int32]:
    """Renumber labels so 0 is the largest community (ties: smallest member first)."""
    k = int(labels.max()) + 1
    sizes = np.bincount(labels, minlength=k)
    first = np.full(k, labels.shape[0], dtype=np.int64)
    np.minimum.at(first, labels, np.arange(labels.shape[0]))
    order = np.lexsort((first, -sizes))
    rank = np.empty(k, dtype=np.int32)
    rank[order] = np.arange(k, dtype=np.int32)
    return rank[labels]


def modularity(
    g: GraphArrays, membership: NDArray[np.integer[Any]], *, weights: bool = True,
    resolution: float = 1.0,
) -> float:
    """Newman's modularity of a partition, on the same undirected view as :func:`leiden`.

    Examples
    --------
    >>> import numpy as np
    >>> g = from_edges([(0, 1), (2, 3)])
    >>> modularity(g, np.array([0, 0, 1, 1]))
    0.5
    """
    _check_membership(g, membership)
    ig = _undirected_view(g, weights)
    if ig.ecount() == 0:
        return 0.0
    try:
        return float(ig.modularity(np.asarray(membership).tolist(), weights="weight",
                                   resolution=resolution))
    except Exception as exc:
        raise ComputationFailed(f"igraph modularity failed: {exc}") from exc


def _check_membership(g: GraphArrays, membership: NDArray[np.integer[Any]]) -> None:
    mem = np.asarray(membership)
    if mem.shape != (g.n,) or mem.dtype.kind not in "iu" or (g.n and mem.min() < 0):
        raise InvalidParameter("membership must hold one non-negative integer per node",
                               field="membership")


def community_summary(
    g: GraphArrays,
    membership: NDArray[np.integer[Any]],
    score: NDArray[np.float64] | None = None,
    *,
    top: int = 5,
) -> list[dict[str, Any]]:
    """Size, internal edge density and leading members of each community.

    Parameters
    ----------
    g : GraphArrays
    membership : array of int, one label per node
    score : array of float, optional
        Ranks members (highest first; NaN last); None ranks by total degree.
    top : int
        Members listed per community.

    Returns
    -------
    list of dict, one per label present, by label:
        ``community``, ``size``, ``internal_edges`` (linked pairs inside, on
        the undirected simple view), ``density`` (``internal_edges`` over
        ``size (size - 1) / 2``; None for a single node), ``top_members``
        (node indices) and ``top_scores``.

    Examples
    --------
    >>> import numpy as np
    >>> g = from_edges([(0, 1), (1, 2), (2, 3)])
    >>> s = community_summary(g, np.array([0, 0, 1, 1]), top=1)
    >>> [(c["size"], c["internal_edges"], c["density"], c["top_members"]) for c in s]
    [(2, 1, 1.0, [1]), (2, 1, 1.0, [2])]
    """
    _check_membership(g, membership)
    if top < 0:
        raise InvalidParameter("top must be non-negative", field="top")
    mem = np.asarray(membership, dtype=np.int64)
    if g.n == 0:
        return []
    if score is None:
        degree = np.bincount(g.src, minlength=g.n) + np.bincount(g.dst, minlength=g.n)
        sc = degree.astype(np.float64)
    else:
        sc = np.asarray(score, dtype=np.float64)
    if sc.shape != (g.n,):
        raise InvalidParameter("score must hold one value per node", field="score")
    k = int(mem.max()) + 1
    sizes = np.bincount(mem, minlength=k)
    lo = np.minimum(g.src, g.dst).astype(np.int64)
    hi = np.maximum(g.src, g.dst).astype(np.int64)
    pairs = np.unique(lo[lo != hi] * g.n + hi[lo != hi])
    a, b = pairs // g.n, pairs % g.n
    inside = mem[a] == mem[b]
    internal = np.bincount(mem[a[inside]], minlength=k)
    key = np.where(np.isnan(sc), -np.inf, sc)
    order = np.lexsort((np.arange(g.n), -key, mem))
    starts = np.searchsorted(mem[order], np.arange(k))
    out = []
    for c in np.flatnonzero(sizes):
        members = order[starts[c]:starts[c] + min(top, int(sizes[c]))]
        size = int(sizes[c])
        out.append({
            "community": int(c),
            "size": size,
            "internal_edges": int(internal[c]),
            "density": float(internal[c] / (size * (size - 1) / 2)) if size > 1 else None,
            "top_members": members.tolist(),
            "top_scores": sc[members].tolist(),
        })
    return out
