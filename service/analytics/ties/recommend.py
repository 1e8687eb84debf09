"""Whom to introduce a person to: link prediction over a :class:`NeighbourIndex`.

Pair scores (:func:`common_neighbours`, :func:`jaccard`, :func:`adamic_adar`,
:func:`resource_allocation`, :func:`preferential_attachment`,
:func:`weighted_adamic_adar`) score given pairs; :func:`personalized_pagerank`
is a local forward-push estimate; :func:`recommend_for` ranks the people one
person is not yet tied to, with the shared contacts that explain each
suggestion, touching only that person's two-hop neighbourhood (or, for
personalised PageRank, the region the push reaches).
:func:`recommend_all` is the batch form for nightly exports.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Literal, NamedTuple

import numpy as np
from numpy.typing import ArrayLike, NDArray

from . import _kernels as K
from ..errors import InvalidParameter, UnknownNode
from .strength import NeighbourIndex

__all__ = [
    "LinkMethod",
    "LINK_METHODS",
    "SharedContact",
    "Recommendation",
    "SparseScores",
    "common_neighbours",
    "jaccard",
    "adamic_adar",
    "resource_allocation",
    "preferential_attachment",
    "weighted_adamic_adar",
    "personalized_pagerank",
    "recommend_for",
    "recommend_all",
]

LinkMethod = Literal[
    "adamic_adar",
    "resource_allocation",
    "jaccard",
    "common_neighbours",
    "preferential_attachment",
    "personalized_pagerank",
    "weighted_adamic_adar",
]
LINK_METHODS: tuple[str, ...] = (
    "adamic_adar",
    "resource_allocation",
    "jaccard",
    "common_neighbours",
    "preferential_attachment",
    "personalized_pagerank",
    "weighted_adamic_adar",
)
_CODES = {
    "common_neighbours": K.CN,
    "adamic_adar": K.AA,
    "resource_allocation": K.RA,
    "jaccard": K.JACCARD,
    "weighted_adamic_adar": K.WAA,
    "preferential_attachment": K.PA,
}
DEFAULT_TOLERANCE = 1e-5


@dataclass(frozen=True)
class SharedContact:
    """A contact both people have, with the strength of each of the two ties."""

    node: int
    tie_to_person: float
    tie_to_candidate: float


@dataclass(frozen=True)
class Recommendation:
    """One suggested introduction: the candidate, its score and why."""

    candidate: int
    score: float
    common: int  # number of shared contacts
    shared: tuple[SharedContact, ...]  # the strongest few, strongest first


class SparseScores(NamedTuple):
    """Scores on the few nodes a local method reached (all others 0)."""

    nodes: NDArray[np.int32]
    values: NDArray[np.float64]


def _pairs(index: NeighbourIndex, pairs: ArrayLike) -> tuple[NDArray[np.int32], NDArray[np.int32]]:
    arr = np.asarray(pairs, dtype=np.int64).reshape(-1, 2)
    if arr.size:
        bad = (arr < 0) | (arr >= index.n)
        if bad.any():
            node = int(arr[bad][0])
            raise UnknownNode(f"node index {node} is not in the graph", node_index=node)
    return arr[:, 0].astype(np.int32), arr[:, 1].astype(np.int32)


def _pair_method(index: NeighbourIndex, pairs: ArrayLike, method: str) -> NDArray[np.float64]:
    u, v = _pairs(index, pairs)
    return np.asarray(
        K.pair_scores(index.indptr, index.indices, index.degree, index.strength, u, v,
                      _CODES[method])
    )


def common_neighbours(index: NeighbourIndex, pairs: ArrayLike) -> NDArray[np.float64]:
    """Number of common neighbours |N(u) ∩ N(v)| of each pair [1]_.

    Parameters
    ----------
    index : the neighbour index (undirected view).
    pairs : (m, 2) node indices.

    Returns
    -------
    numpy.ndarray of float64, one score per pair.

    Raises
    ------
    UnknownNode
        A pair names a node index outside ``0..n-1``.

    References
    ----------
    .. [1] D. Liben-Nowell, J. Kleinberg (2007). The link-prediction problem for
       social networks. JASIST 58(7), 1019-1031. doi:10.1002/asi.20591

    Examples
    --------
    >>> import numpy as np
    >>> from service.analytics.graph import GraphArrays
    >>> from service.analytics.ties.strength import neighbour_index
    >>> ix = neighbour_index(GraphArrays(4, False, np.array([0, 0, 1, 2], np.int32),
    ...                      np.array([1, 2, 3, 3], np.int32), np.ones(4)))
    >>> common_neighbours(ix, [(0, 3), (1, 2)]).tolist()
    [2.0, 2.0]
    """
    return _pair_method(index, pairs, "common_neighbours")


def jaccard(index: NeighbourIndex, pairs: ArrayLike) -> NDArray[np.float64]:
    """Jaccard coefficient |N(u) ∩ N(v)| / |N(u) ∪ N(v)| (0 when both are empty) [1]_.

    Parameters, Returns and Raises as :func:`common_neighbours`.

    References
    ----------
    .. [1] D. Liben-Nowell, J. Kleinberg (2007). JASIST 58(7). doi:10.1002/asi.20591

    Examples
    --------
    >>> import numpy as np
    >>> from service.analytics.graph import GraphArrays
    >>> from service.analytics.ties.strength import neighbour_index
    >>> ix = neighbour_index(GraphArrays(4, False, np.array([0, 0, 1, 2], np.int32),
    ...                      np.array([1, 2, 3, 3], np.int32), np.ones(4)))
    >>> jaccard(ix, [(0, 3)]).tolist()
    [1.0]
    """
    return _pair_method(index, pairs, "jaccard")


def adamic_adar(index: NeighbourIndex, pairs: ArrayLike) -> NDArray[np.float64]:
    """Adamic–Adar index: sum over common neighbours z of 1 / ln k_z [1]_ [2]_.

    Parameters, Returns and Raises as :func:`common_neighbours`.

    References
    ----------
    .. [1] L. A. Adamic, E. Adar (2003). Friends and neighbors on the Web.
       Social Networks 25(3), 211-230. doi:10.1016/S0378-8733(03)00009-1
    .. [2] D. Liben-Nowell, J. Kleinberg (2007). JASIST 58(7). doi:10.1002/asi.20591

    Examples
    --------
    >>> import numpy as np
    >>> from service.analytics.graph import GraphArrays
    >>> from service.analytics.ties.strength import neighbour_index
    >>> ix = neighbour_index(GraphArrays(4, False, np.array([0, 0, 1, 2], np.int32),
    ...                      np.array([1, 2, 3, 3], np.int32), np.ones(4)))
    >>> round(float(adamic_adar(ix, [(0, 3)])[0]), 6)  # 2 / ln 2
    2.88539
    """
    return _pair_method(index, pairs, "adamic_adar")


def resource_allocation(index: NeighbourIndex, pairs: ArrayLike) -> NDArray[np.float64]:
    """Resource allocation index: sum over common neighbours z of 1 / k_z [1]_.

    Parameters, Returns and Raises as :func:`common_neighbours`.

    References
    ----------
    .. [1] T. Zhou, L. Lu, Y.-C. Zhang (2009). Predicting missing links via local
       information. Eur. Phys. J. B 71, 623-630. doi:10.1140/epjb/e2009-00335-8

    Examples
    --------
    >>> import numpy as np
    >>> from service.analytics.graph import GraphArrays
    >>> from service.analytics.ties.strength import neighbour_index
    >>> ix = neighbour_index(GraphArrays(4, False, np.array([0, 0, 1, 2], np.int32),
    ...                      np.array([1, 2, 3, 3], np.int32), np.ones(4)))
    >>> resource_allocation(ix, [(0, 3)]).tolist()
    [1.0]
    """
    return _pair_method(index, pairs, "resource_allocation")


def preferential_attachment(index: NeighbourIndex, pairs: ArrayLike) -> NDArray[np.float64]:
    """Preferential attachment score k_u k_v [1]_.

    Parameters, Returns and Raises as :func:`common_neighbours`.

    References
    ----------
    .. [1] D. Liben-Nowell, J. Kleinberg (2007). JASIST 58(7). doi:10.1002/asi.20591

    Examples
    --------
    >>> import numpy as np
    >>> from service.analytics.graph import GraphArrays
    >>> from service.analytics.ties.strength import neighbour_index
    >>> ix = neighbour_index(GraphArrays(4, False, np.array([0, 0, 1, 2], np.int32),
    ...                      np.array([1, 2, 3, 3], np.int32), np.ones(4)))
    >>> preferential_attachment(ix, [(0, 3)]).tolist()
    [4.0]
    """
    return _pair_method(index, pairs, "preferential_attachment")


def weighted_adamic_adar(index: NeighbourIndex, pairs: ArrayLike) -> NDArray[np.float64]:
    """Adamic–Adar with each shared contact counted by its tie strengths.

    .. math:: s_{uv} = \\sum_{z \\in N(u) \\cap N(v)} \\frac{(t_{uz} + t_{zv})/2}{\\ln k_z}

    with t the tie strengths of :func:`service.analytics.ties.strength.tie_strength`.
    This is the weighted Adamic–Adar form of [1]_ (exponent 1, weights in
    [0, 1] so it never exceeds plain Adamic–Adar, degree in place of node
    strength); with every tie at strength 1 it equals :func:`adamic_adar`.

    Parameters, Returns and Raises as :func:`common_neighbours`.

    References
    ----------
    .. [1] L. Lu, T. Zhou (2010). Link prediction in weighted networks: the role
       of weak ties. EPL 89, 18001. doi:10.1209/0295-5075/89/18001 (from memory)

    Examples
    --------
    >>> import numpy as np
    >>> from service.analytics.graph import GraphArrays
    >>> from service.analytics.ties.strength import neighbour_index
    >>> ix = neighbour_index(GraphArrays(4, False, np.array([0, 0, 0, 1, 1, 2], np.int32),
    ...                      np.array([1, 2, 3, 2, 3, 3], np.int32), np.ones(6)))
    >>> bool(np.isclose(weighted_adamic_adar(ix, [(0, 1)]), adamic_adar(ix, [(0, 1)]))[0])
    True
    """
    return _pair_method(index, pairs, "weighted_adamic_adar")


def _check_node(index: NeighbourIndex, node: int) -> int:
    if not 0 <= int(node) < index.n:
        raise UnknownNode(f"node index {node} is not in the graph", node_index=int(node))
    return int(node)


def _check_ppr(damping: float, tolerance: float) -> None:
    if not 0.0 < damping < 1.0:
        raise InvalidParameter("damping must be in (0, 1)", field="damping")
    if not 0.0 < tolerance < 1.0:
        raise InvalidParameter("tolerance must be in (0, 1)", field="tolerance")


def personalized_pagerank(
    index: NeighbourIndex,
    source: int,
    *,
    damping: float = 0.85,
    tolerance: float = DEFAULT_TOLERANCE,
) -> SparseScores:
    """Personalised PageRank from ``source`` by local forward push [1]_.

    The random walk on the undirected view follows an edge with probability
    ``damping`` and jumps back to ``source`` otherwise, as
    ``nx.pagerank(G, alpha=damping, personalization={source: 1})``.

    Parameters
    ----------
    index : the neighbour index.
    source : the person.
    damping : follow-an-edge probability (1 - teleport).
    tolerance : push threshold eps: nodes are pushed while residual >= eps * degree.

    Returns
    -------
    SparseScores
        The nodes the push reached and their estimates (ascending node order).

    Raises
    ------
    UnknownNode, InvalidParameter

    Notes
    -----
    Non-lazy push: pushing u moves (1 - damping) r_u to the estimate and
    shares damping r_u equally among u's neighbours. On exit every residual
    r_u < eps k_u, so for every node v the estimate is below the true value
    by less than eps k_v (undirected graphs: ppr_u(v) / k_v = ppr_v(u) / k_u),
    and the total missing mass is below eps times the volume reached. Work
    is at most 1 / (eps (1 - damping)) edge visits whatever the graph size.

    References
    ----------
    .. [1] R. Andersen, F. Chung, K. Lang (2006). Local graph partitioning
       using PageRank vectors. FOCS '06, 475-486. doi:10.1109/FOCS.2006.44

    Examples
    --------
    >>> import numpy as np
    >>> from service.analytics.graph import GraphArrays
    >>> from service.analytics.ties.strength import neighbour_index
    >>> ix = neighbour_index(GraphArrays(4, False, np.array([0, 1, 2], np.int32),
    ...                      np.array([1, 2, 3], np.int32), np.ones(3)))
    >>> est = personalized_pagerank(ix, 0, tolerance=1e-9)
    >>> est.nodes.tolist(), round(float(est.values.sum()), 6)
    ([0, 1, 2, 3], 1.0)
    """
    node = _check_node(index, source)
    _check_ppr(damping, tolerance)
    nodes, values = _push(index, node, damping, tolerance)
    order = np.argsort(nodes)
    return SparseScores(nodes[order], values[order])


def _push(
    index: NeighbourIndex, node: int, damping: float, tolerance: float
) -> tuple[NDArray[np.int32], NDArray[np.float64]]:
    s = index.scratch()
    m = 0
    try:
        m = K.ppr_push(index.indptr, index.indices, index.degree, node, 1.0 - damping,
                       tolerance, s.acc, s.r, s.flag, s.inq, s.queue, s.touched)
        nodes = s.touched[:m].copy()
        return nodes, s.acc[nodes].copy()
    finally:
        t = s.touched[:m]
        s.acc[t] = 0.0
        s.r[t] = 0.0
        s.flag[t] = 0
        s.inq[t] = 0


def _eligible_array(index: NeighbourIndex, eligible: ArrayLike | None) -> NDArray[np.bool_]:
    if eligible is None:
        return np.ones(0, dtype=bool)
    arr = np.asarray(eligible)
    if arr.dtype != np.bool_ or arr.shape != (index.n,):
        raise InvalidParameter(
            f"eligible must be a boolean mask of length {index.n}", field="eligible"
        )
    return arr


def _top(cand: NDArray[np.int32], score: NDArray[np.float64], limit: int) -> NDArray[np.int64]:
    """Positions of the ``limit`` best scores, ties broken by lower node index."""
    if cand.shape[0] > 4 * limit:
        cut = np.partition(score, score.shape[0] - limit)[score.shape[0] - limit]
        keep = np.flatnonzero(score >= cut)
    else:
        keep = np.arange(cand.shape[0])
    order = np.lexsort((cand[keep], -score[keep]))
    return keep[order[:limit]]


def recommend_for(
    index: NeighbourIndex,
    node: int,
    *,
    method: str = "adamic_adar",
    limit: int = 10,
    eligible: ArrayLike | None = None,
    explain: int = 3,
    damping: float = 0.85,
    tolerance: float = DEFAULT_TOLERANCE,
) -> list[Recommendation]:
    """The people ``node`` is not yet tied to, best first, with shared contacts.

    Parameters
    ----------
    index : the neighbour index.
    node : the person.
    method : one of :data:`LINK_METHODS`; ``adamic_adar`` by default [1]_.
    limit : at most this many recommendations (>= 1).
    eligible : boolean mask of length n; only True nodes are recommended.
    explain : how many shared contacts to give per recommendation (>= 0).
    damping, tolerance : for ``personalized_pagerank`` (see there).

    Returns
    -------
    list of Recommendation
        Best score first, ties by lower index. Only positive scores are
        listed, so fewer than ``limit`` may come back.

    Raises
    ------
    UnknownNode
        ``node`` is outside ``0..n-1``.
    InvalidParameter
        Unknown method, bad limit, explain, mask or push settings.

    Notes
    -----
    The person and their current neighbours (either direction) are never
    recommended. Neighbourhood methods visit the two-hop neighbourhood,
    O(sum of k_z over neighbours z); ``personalized_pagerank`` at most
    1 / (tolerance (1 - damping)) edges; ``preferential_attachment`` ranks
    everyone by degree and walks the index's degree order until ``limit``
    eligible non-neighbours are found. Shared contacts are ranked by the
    weaker of their two ties, then the sum of both, then index.

    References
    ----------
    .. [1] D. Liben-Nowell, J. Kleinberg (2007). JASIST 58(7). doi:10.1002/asi.20591

    Examples
    --------
    >>> import numpy as np
    >>> from service.analytics.graph import GraphArrays
    >>> from service.analytics.ties.strength import neighbour_index
    >>> ix = neighbour_index(GraphArrays(4, False, np.array([0, 0, 1, 2], np.int32),
    ...                      np.array([1, 2, 3, 3], np.int32), np.ones(4)))
    >>> [(r.candidate, r.common, [c.node for c in r.shared]) for r in recommend_for(ix, 0)]
    [(3, 2, [1, 2])]
    """
    x = _check_node(index, node)
    if method not in LINK_METHODS:
        raise InvalidParameter(
            f"unknown method {method!r}; expected one of {', '.join(LINK_METHODS)}",
            field="method",
        )
    if int(limit) < 1:
        raise InvalidParameter("limit must be at least 1", field="limit")
    if int(explain) < 0:
        raise InvalidParameter("explain must be at least 0", field="explain")
    limit = int(limit)
    elig = _eligible_array(index, eligible)
    if method == "personalized_pagerank":
        _check_ppr(damping, tolerance)
        cand, score = _push(index, x, damping, tolerance)
        keep = (cand != x) & (score > 0)
        nb = index.neighbours(x)
        if nb.shape[0]:
            pos = np.minimum(np.searchsorted(nb, cand), nb.shape[0] - 1)
            keep &= nb[pos] != cand
        if elig.shape[0]:
            keep &= elig[cand]
        cand, score = cand[keep], score[keep]
    elif method == "preferential_attachment":
        cand, score = _by_degree(index, x, limit, elig)
    else:
        cand, score = _two_hop(index, x, _CODES[method], elig)
    pick = _top(cand, score, limit)
    cand, score = cand[pick], score[pick]
    return _explained(index, x, cand, score, int(explain))


def _two_hop(
    index: NeighbourIndex, x: int, code: int, elig: NDArray[np.bool_]
) -> tuple[NDArray[np.int32], NDArray[np.float64]]:
    s = index.scratch()
    m = 0
    try:
        m = K.two_hop(index.indptr, index.indices, index.degree, index.strength, x, code,
                      elig, elig.shape[0] > 0, s.acc, s.cnt, s.flag, s.touched)
        cand = s.touched[:m].copy()
        if code == K.JACCARD:
            common = s.cnt[cand].astype(np.float64)
            score = common / (index.degree[x] + index.degree[cand] - common)
        else:
            score = s.acc[cand].copy()
        return cand, score
    finally:
        t = s.touched[:m]
        s.acc[t] = 0.0
        s.cnt[t] = 0


def _by_degree(
    index: NeighbourIndex, x: int, limit: int, elig: NDArray[np.bool_]
) -> tuple[NDArray[np.int32], NDArray[np.float64]]:
    kx = float(index.degree[x])
    if kx == 0:
        return np.zeros(0, np.int32), np.zeros(0)
    nb = index.neighbours(x)
    # At most k_x + 1 of the first limit + k_x + 1 nodes are excluded by
    # adjacency; the eligibility mask may exclude more, so widen as needed.
    width = limit + nb.shape[0] + 1
    while True:
        head = index.by_degree[:width]
        ok = (head != x) & (index.degree[head] > 0)
        if nb.shape[0]:
            pos = np.minimum(np.searchsorted(nb, head), nb.shape[0] - 1)
            ok &= nb[pos] != head
        if elig.shape[0]:
            ok &= elig[head]
        found = head[ok]
        if found.shape[0] >= limit or width >= index.n:
            found = found[:limit]
            return found, kx * index.degree[found].astype(np.float64)
        width = min(index.n, width * 4)


def _explained(
    index: NeighbourIndex, x: int, cand: NDArray[np.int32], score: NDArray[np.float64],
    explain: int,
) -> list[Recommendation]:
    oz, ox, oy, cnt = K.explain_shared(index.indptr, index.indices, index.strength, x,
                                       np.ascontiguousarray(cand, np.int32), max(explain, 1))
    out = []
    for e in range(cand.shape[0]):
        shared = tuple(
            SharedContact(int(oz[e, q]), float(ox[e, q]), float(oy[e, q]))
            for q in range(min(explain, int(cnt[e])))
        )
        out.append(Recommendation(int(cand[e]), float(score[e]), int(cnt[e]), shared))
    return out


def recommend_all(
    index: NeighbourIndex,
    nodes: Sequence[int] | NDArray[np.integer],
    *,
    method: str = "adamic_adar",
    limit: int = 10,
    eligible: ArrayLike | None = None,
    explain: int = 3,
    progress: Callable[[float], None] | None = None,
) -> list[list[Recommendation]]:
    """:func:`recommend_for` for many people, for nightly exports.

    Parameters
    ----------
    index, method, limit, eligible, explain : as :func:`recommend_for`.
    nodes : the people, in the order wanted.
    progress : called with the share done (0..1) about every 1% and at the
        end; it may raise :class:`~service.analytics.errors.Cancelled`, which
        propagates.

    Returns
    -------
    list of list of Recommendation, aligned with ``nodes``.

    Raises
    ------
    UnknownNode, InvalidParameter, Cancelled

    References
    ----------
    .. [1] D. Liben-Nowell, J. Kleinberg (2007). JASIST 58(7). doi:10.1002/asi.20591

    Examples
    --------
    >>> import numpy as np
    >>> from service.analytics.graph import GraphArrays
    >>> from service.analytics.ties.strength import neighbour_index
    >>> ix = neighbour_index(GraphArrays(4, False, np.array([0, 0, 1, 2], np.int32),
    ...                      np.array([1, 2, 3, 3], np.int32), np.ones(4)))
    >>> [[r.candidate for r in rs] for rs in recommend_all(ix, [0, 1])]
    [[3], [2]]
    """
    todo = [int(v) for v in np.asarray(nodes, dtype=np.int64).ravel()]
    elig = None if eligible is None else _eligible_array(index, eligible)
    step = max(1, len(todo) // 100)
    out = []
    for i, v in enumerate(todo):
        out.append(recommend_for(index, v, method=method, limit=limit, eligible=elig,
                                 explain=explain))
        if progress is not None and (i + 1) % step == 0:
            progress((i + 1) / len(todo))
    if progress is not None:
        progress(1.0)
    return out
