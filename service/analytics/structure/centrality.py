"""Node scores: degree, strength, PageRank, eigenvector, hubs and authorities,
k-core number, local clustering, Burt's constraint, and :func:`scores`, which
computes a list of them, the shortest-path ones of :mod:`.paths` (betweenness,
harmonic closeness) included, in one pass and records how each was normalised.

Weights are interaction counts, that is tie *strengths*. PageRank,
eigenvector, hub/authority and strength use them directly; constraint uses
them as tie strength; path-based scores (betweenness, harmonic closeness) turn
them into distances ``1 / w``, because more interactions make two people
closer, not further apart.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..errors import InvalidParameter
from ..graph import GraphArrays
from ._views import _Views
from .paths import EXACT_WORK_LIMIT, betweenness, harmonic_closeness

__all__ = [
    "MEASURES",
    "DEFAULT_MEASURES",
    "ScoreResult",
    "default_measures",
    "degree",
    "strength",
    "pagerank",
    "eigenvector_centrality",
    "hits",
    "coreness",
    "local_clustering",
    "constraint",
    "scores",
]

Progress = Callable[[float, str], None] | None

MEASURES: tuple[str, ...] = (
    "degree", "in_degree", "out_degree", "strength", "in_strength", "out_strength",
    "pagerank", "eigenvector", "hub", "authority", "betweenness", "harmonic",
    "coreness", "clustering", "constraint", "community",
)
#: Near-linear measures, computed by default on any graph.
DEFAULT_MEASURES: tuple[str, ...] = tuple(
    m for m in MEASURES if m not in ("betweenness", "harmonic", "constraint")
)


@dataclass(frozen=True)
class ScoreResult:
    """Scores by measure name (one float64 per node) and how each was computed."""

    values: dict[str, NDArray[np.float64]]
    meta: dict[str, dict[str, Any]]


def degree(g: GraphArrays, *, mode: str = "all") -> NDArray[np.float64]:
    """Number of edges at each node: ``mode`` ``all`` (in + out), ``in`` or ``out``.

    Notes
    -----
    Undirected graphs: every mode gives the degree, a self-loop counting twice
    (NetworkX and igraph convention). Raw counts, not divided by ``n - 1``
    (NetworkX's ``degree_centrality`` divides; its ``G.degree`` does not).

    Examples
    --------
    >>> import numpy as np
    >>> g = from_edges([(0, 1), (0, 2), (1, 2)], n=4, directed=True)
    >>> degree(g, mode="out").tolist(), degree(g, mode="in").tolist()
    ([2.0, 1.0, 0.0, 0.0], [0.0, 1.0, 2.0, 0.0])
    """
    return strength(g, mode=mode, weights=False)


def strength(g: GraphArrays, *, mode: str = "all", weights: bool = True) -> NDArray[np.float64]:
    """Sum of the weights (interaction counts) of the edges at each node.

    Examples
    --------
    >>> import numpy as np
    >>> g = from_edges([(0, 1), (1, 2)], n=4, weights=[2.0, 3.0])
    >>> strength(g).tolist()
    [2.0, 5.0, 3.0, 0.0]
    """
    if mode not in ("all", "in", "out"):
        raise InvalidParameter(f"mode must be 'all', 'in' or 'out', got {mode!r}", field="mode")
    w = g.weight if weights else np.ones(g.m)
    out = np.bincount(g.src, weights=w, minlength=g.n)
    inn = np.bincount(g.dst, weights=w, minlength=g.n)
    if not g.directed or mode == "all":
        return np.asarray(out + inn, dtype=np.float64)
    return np.asarray(out if mode == "out" else inn, dtype=np.float64)


def _reset_vector(g: GraphArrays, personalization: object) -> NDArray[np.float64] | None:
    """Jump distribution from node indices (integers) or a value per node (floats)."""
    if personalization is None:
        return None
    raw = np.asarray(personalization)
    if raw.ndim != 1:
        raise InvalidParameter("personalization must be a list of node indices or one "
                               "value per node", field="personalization")
    if raw.dtype.kind in "iu":
        idx = raw.astype(np.int64)
        if idx.size == 0:
            raise InvalidParameter("personalization set is empty", field="personalization")
        bad = idx[(idx < 0) | (idx >= g.n)]
        if bad.size:
            raise InvalidParameter("personalization names a node outside the graph",
                                   field="personalization", node_index=int(bad[0]))
        p = np.zeros(g.n)
        p[idx] = 1.0
    elif raw.dtype.kind in "fb":
        p = raw.astype(np.float64)
        if p.shape[0] != g.n:
            raise InvalidParameter(f"personalization vector has {p.shape[0]} values for "
                                   f"{g.n} nodes", field="personalization")
        bad_mask = ~np.isfinite(p) | (p < 0)
        if bad_mask.any():
            raise InvalidParameter("personalization values must be finite and non-negative",
                                   field="personalization",
                                   node_index=int(np.flatnonzero(bad_mask)[0]))
        if p.sum() <= 0:
            raise InvalidParameter("personalization must give some node a positive value",
                                   field="personalization")
    else:
        raise InvalidParameter("personalization must hold integers or numbers",
                               field="personalization")
    return np.asarray(p / p.sum(), dtype=np.float64)


def pagerank(
    g: GraphArrays,
    *,
    damping: float = 0.85,
    weights: bool = True,
    personalization: Sequence[int] | NDArray[Any] | None = None,
    _views: _Views | None = None,
) -> NDArray[np.float64]:
    """PageRank, optionally weighted and personalised (Brin and Page 1998).

    Parameters
    ----------
    g : GraphArrays
    damping : float
        Probability of following an edge rather than jumping, in [0, 1).
    weights : bool
        Walk edges in proportion to their interaction counts.
    personalization : sequence of int or array of float, optional
        Node indices to jump to (uniformly), or a non-negative value per node
        (a length-``n`` float array). None jumps uniformly to every node.
        Integers are always read as node indices, floats as values.

    Returns
    -------
    numpy.ndarray of float64, summing to 1.

    Raises
    ------
    InvalidParameter
        Damping outside [0, 1), or a personalization naming unknown nodes,
        negative values, or nothing at all.

    Notes
    -----
    Computed with igraph (PRPACK). Walkers at a node without out-edges jump
    as they do on a reset, to the personalization distribution, which is
    NetworkX's default (``dangling=None``). Undirected edges are walked both
    ways.

    References
    ----------
    .. [1] S. Brin, L. Page (1998). The anatomy of a large-scale hypertextual
       Web search engine. Computer Networks 30, 107-117.

    Examples
    --------
    >>> import numpy as np
    >>> g = from_edges([(0, 1), (0, 2), (0, 3)])
    >>> pr = pagerank(g)
    >>> round(float(pr.sum()), 6), int(pr.argmax())
    (1.0, 0)
    """
    if not 0.0 <= damping < 1.0:
        raise InvalidParameter("damping must be in [0, 1)", field="damping")
    v = _views or _Views(g)
    if g.n == 0:
        return np.zeros(0)
    reset = _reset_vector(g, personalization)
    pr = v.call(v.ig.personalized_pagerank, directed=True, damping=damping,
               reset=None if reset is None else reset.tolist(), weights=v.weights(weights))
    return np.asarray(pr / pr.sum(), dtype=np.float64)


def eigenvector_centrality(
    g: GraphArrays, *, weights: bool = True, _views: _Views | None = None
) -> NDArray[np.float64]:
    """Eigenvector centrality (Bonacich 1972): the principal eigenvector of A.

    Notes
    -----
    Scaled to unit Euclidean norm with non-negative entries, as NetworkX's
    ``eigenvector_centrality_numpy``. Directed graphs use the left eigenvector:
    a node is central when central nodes point to it. Meaningful on connected
    (strongly connected) graphs; elsewhere the mass sits on the component with
    the largest eigenvalue and other components get (near) zero.

    References
    ----------
    .. [1] P. Bonacich (1972). Factoring and weighting approaches to status
       scores and clique identification. J. Math. Sociol. 2, 113-120.

    Examples
    --------
    >>> import numpy as np
    >>> g = from_edges([(0, 1), (1, 2), (2, 3), (3, 0)])
    >>> np.round(eigenvector_centrality(g), 6).tolist()
    [0.5, 0.5, 0.5, 0.5]
    """
    v = _views or _Views(g)
    if g.n == 0:
        return np.zeros(0)
    if g.m == 0:
        return np.full(g.n, 1.0 / math.sqrt(g.n))
    key = f"eigenvector:{weights}"
    if key not in v.cache:
        x = np.abs(v.call(v.ig.eigenvector_centrality, directed=True,
                          weights=v.weights(weights)))
        norm = float(np.linalg.norm(x))
        v.cache[key] = x / norm if norm > 0 else x
    return np.array(v.cache[key])


def hits(
    g: GraphArrays, *, weights: bool = True, _views: _Views | None = None
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Hub and authority scores (Kleinberg 1999), each summing to 1.

    Notes
    -----
    Hubs are the principal eigenvector of ``A A^T``, authorities of
    ``A^T A``, each scaled to sum 1 as NetworkX's ``hits``. On an undirected
    graph ``A`` is symmetric, so both equal eigenvector centrality scaled to
    sum 1, and that is what is returned.

    References
    ----------
    .. [1] J. Kleinberg (1999). Authoritative sources in a hyperlinked
       environment. J. ACM 46(5), 604-632.

    Examples
    --------
    >>> import numpy as np
    >>> g = from_edges([(0, 2), (0, 3), (1, 3)], directed=True)
    >>> hub, auth = hits(g)
    >>> int(hub.argmax()), int(auth.argmax())
    (0, 3)
    """
    v = _views or _Views(g)
    if g.n == 0:
        return np.zeros(0), np.zeros(0)
    key = f"hits:{weights}"
    if key not in v.cache:
        v.cache[key] = _hits(g, weights, v)
    hub, auth = v.cache[key]
    return np.array(hub), np.array(auth)


def _hits(g: GraphArrays, weights: bool, v: _Views
          ) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    if not g.directed or g.m == 0:
        x = eigenvector_centrality(g, weights=weights, _views=v)
        x = x / x.sum()
        return x, x.copy()
    w = v.weights(weights)
    hub = np.abs(v.call(v.ig.hub_score, weights=w))
    auth = np.abs(v.call(v.ig.authority_score, weights=w))
    return hub / hub.sum(), auth / auth.sum()


def coreness(g: GraphArrays, *, _views: _Views | None = None) -> NDArray[np.float64]:
    """k-core number of each node (Batagelj and Zaversnik 2003).

    Notes
    -----
    Self-loops are ignored; on directed graphs degree is in + out, so a
    reciprocated pair counts twice (NetworkX ``core_number``).

    References
    ----------
    .. [1] V. Batagelj, M. Zaversnik (2003). An O(m) algorithm for cores
       decomposition of networks. arXiv:cs/0310049.

    Examples
    --------
    >>> import numpy as np
    >>> g = from_edges([(0, 1), (1, 2), (2, 0), (2, 3)])
    >>> coreness(g).tolist()
    [2.0, 2.0, 2.0, 1.0]
    """
    v = _views or _Views(g)
    if g.n == 0:
        return np.zeros(0)
    return v.call(v.loopless().coreness, mode="all")


def local_clustering(g: GraphArrays, *, _views: _Views | None = None) -> NDArray[np.float64]:
    """Local clustering coefficient on the undirected simple view (Watts and Strogatz 1998).

    Notes
    -----
    Directions and weights are dropped and self-loops removed; nodes of degree
    below 2 get 0. Equals NetworkX ``clustering(nx.Graph(G))``.

    References
    ----------
    .. [1] D. J. Watts, S. H. Strogatz (1998). Collective dynamics of
       'small-world' networks. Nature 393, 440-442.

    Examples
    --------
    >>> import numpy as np
    >>> g = from_edges([(0, 1), (1, 2), (2, 0), (2, 3)])
    >>> np.round(local_clustering(g), 4).tolist()
    [1.0, 1.0, 0.3333, 0.0]
    """
    v = _views or _Views(g)
    if g.n == 0:
        return np.zeros(0)
    return v.call(v.simple_undirected.transitivity_local_undirected, mode="zero")


def constraint(
    g: GraphArrays, *, weights: bool = True, _views: _Views | None = None
) -> NDArray[np.float64]:
    """Burt's constraint: how much a node's contacts are tied to each other (Burt 1992).

    ``c_i = sum over contacts j of (p_ij + sum_q p_iq p_qj)^2`` with
    ``p_ij = (w_ij + w_ji) / sum_k (w_ik + w_ki)``. Low constraint marks a
    broker whose contacts are otherwise unconnected.

    Notes
    -----
    Computed by igraph on the undirected view with reciprocal weights summed
    (the mutual weight ``w_ij + w_ji``), self-loops removed; equals NetworkX
    ``constraint``. NaN for isolated nodes (undefined, as in NetworkX).
    O(sum of squared degrees) time.

    References
    ----------
    .. [1] R. S. Burt (1992). Structural Holes: The Social Structure of
       Competition. Harvard University Press.

    Examples
    --------
    >>> import numpy as np
    >>> g = from_edges([(0, 1), (0, 2), (0, 3)])
    >>> np.round(constraint(g), 4).tolist()
    [0.3333, 1.0, 1.0, 1.0]
    """
    v = _views or _Views(g)
    if g.n == 0:
        return np.zeros(0)
    h = v.simple_undirected
    w = h.es["weight" if (weights and g.weighted) else "arcs"] if h.ecount() else None
    c = v.call(h.constraint, weights=w)
    c[np.asarray(h.degree()) == 0] = np.nan
    return c


def default_measures(g: GraphArrays, *, exact_limit: float = EXACT_WORK_LIMIT) -> list[str]:
    """:data:`DEFAULT_MEASURES`, plus betweenness, harmonic and constraint when
    ``n * m <= exact_limit`` (1e9: a few seconds to a minute of igraph time).

    Examples
    --------
    >>> import numpy as np
    >>> g = from_edges([(0, 1)], n=3)
    >>> len(default_measures(g)) == len(MEASURES)
    True
    """
    if float(g.n) * g.m <= exact_limit:
        return list(MEASURES)
    return list(DEFAULT_MEASURES)


def scores(
    g: GraphArrays,
    measures: Sequence[str] | None = None,
    *,
    weights: bool = True,
    damping: float = 0.85,
    personalization: Sequence[int] | NDArray[Any] | None = None,
    betweenness: str = "auto",
    betweenness_epsilon: float = 0.01,
    betweenness_delta: float = 0.1,
    betweenness_exact_limit: float = EXACT_WORK_LIMIT,
    harmonic_cutoff: float | None = None,
    random_seed: int = 0,
    progress: Progress = None,
) -> ScoreResult:
    """Compute several node scores at once and record how each was normalised.

    Parameters
    ----------
    g : GraphArrays
    measures : sequence of str, optional
        Names from :data:`MEASURES`; None gives :func:`default_measures`.
    weights, damping, personalization, harmonic_cutoff, random_seed
        As in the single-measure functions.
    betweenness : {"auto", "exact", "sampled"}
    betweenness_epsilon, betweenness_delta, betweenness_exact_limit
        See :func:`betweenness`.
    progress : callable, optional
        Called as ``progress(fraction, message)`` after each measure (and
        during sampling); whatever it raises (e.g. Cancelled) propagates.

    Returns
    -------
    ScoreResult
        ``values[name]``: float64 per node; ``meta[name]``: normalisation,
        weighting and method notes (``community`` also has ``modularity``).

    Raises
    ------
    InvalidParameter
        An unknown measure name, or an invalid option.
    ComputationFailed
        igraph failed.

    Examples
    --------
    >>> import numpy as np
    >>> g = from_edges([(0, 1), (0, 2), (0, 3)])
    >>> r = scores(g, ["degree", "pagerank"])
    >>> r.values["degree"].tolist(), r.meta["pagerank"]["damping"]
    ([3.0, 1.0, 1.0, 1.0], 0.85)
    """
    names = list(default_measures(g, exact_limit=betweenness_exact_limit)
                 if measures is None else measures)
    unknown = [m for m in names if m not in MEASURES]
    if unknown:
        raise InvalidParameter(f"unknown measure {unknown[0]!r}; expected one of "
                               f"{', '.join(MEASURES)}", field="measures")
    names = list(dict.fromkeys(names))
    v = _Views(g)
    use_w = bool(weights and g.weighted)
    values: dict[str, NDArray[np.float64]] = {}
    meta: dict[str, dict[str, Any]] = {}
    for i, name in enumerate(names):
        del v.warnings[:]
        values_i, meta_i = _one(name, v, use_w, damping, personalization, betweenness,
                                betweenness_epsilon, betweenness_delta,
                                betweenness_exact_limit, harmonic_cutoff, random_seed,
                                _scaled(progress, i, len(names)))
        values.update(values_i)
        for key, info in meta_i.items():
            if v.warnings:
                info["warnings"] = sorted(set(v.warnings))
            meta[key] = info
        if progress is not None:
            progress((i + 1) / len(names), f"computed {name}")
    return ScoreResult(values={m: values[m] for m in names}, meta={m: meta[m] for m in names})


def _scaled(progress: Progress, i: int, k: int) -> Progress:
    if progress is None:
        return None
    outer = progress

    def inner(fraction: float, message: str) -> None:
        outer((i + fraction) / k, message)

    return inner


def _one(
    name: str, v: _Views, use_w: bool, damping: float, personalization: Any, bmethod: str,
    eps: float, delta: float, limit: float, cutoff: float | None, seed: int, progress: Progress,
) -> tuple[dict[str, NDArray[np.float64]], dict[str, dict[str, Any]]]:
    g = v.g
    direction = {"degree": "all", "in_degree": "in", "out_degree": "out",
                 "strength": "all", "in_strength": "in", "out_strength": "out"}
    if name in direction:
        mode = direction[name]
        weighted = name.endswith("strength")
        x = strength(g, mode=mode, weights=weighted and use_w)
        note = ("sum of interaction counts" if weighted and use_w else "number of edges")
        return {name: x}, {name: {"normalization": f"raw {note}, not divided by n - 1",
                                  "direction": mode if g.directed else "all",
                                  "weighted": weighted and use_w}}
    if name == "pagerank":
        x = pagerank(g, damping=damping, weights=use_w, personalization=personalization,
                     _views=v)
        return {name: x}, {name: {"normalization": "sums to 1", "damping": damping,
                                  "weighted": use_w,
                                  "personalized": personalization is not None,
                                  "dangling": "jump to the personalization distribution",
                                  "algorithm": "igraph PRPACK"}}
    if name == "eigenvector":
        x = eigenvector_centrality(g, weights=use_w, _views=v)
        return {name: x}, {name: {"normalization": "unit Euclidean norm (NetworkX "
                                  "eigenvector_centrality_numpy)", "weighted": use_w,
                                  "direction": "in-edges (left eigenvector)" if g.directed
                                  else "undirected"}}
    if name in ("hub", "authority"):
        hub, auth = hits(g, weights=use_w, _views=v)
        note = ("" if g.directed else "; undirected graph: equals eigenvector centrality "
                "scaled to sum 1")
        info = {"normalization": "sums to 1 (NetworkX hits)" + note, "weighted": use_w}
        return {"hub": hub, "authority": auth}, {"hub": dict(info), "authority": dict(info)}
    if name == "betweenness":
        x, info = betweenness(g, weights=use_w, method=bmethod, epsilon=eps, delta=delta,
                              exact_limit=limit, random_seed=seed, progress=progress,
                              _views=v)
        return {name: x}, {name: info}
    if name == "harmonic":
        x = harmonic_closeness(g, weights=use_w, cutoff=cutoff, progress=progress, _views=v)
        return {name: x}, {name: {"normalization": "sum of 1/d over other nodes, not "
                                  "divided by n - 1 (NetworkX default)",
                                  "direction": "distances from the node" if g.directed
                                  else "undirected", "cutoff": cutoff, "weighted": use_w,
                                  "distance": "1/weight" if use_w else "hops"}}
    if name == "coreness":
        return {name: coreness(g, _views=v)}, {name: {
            "normalization": "k-core number (integer)", "self_loops": "ignored",
            "degree": "in + out" if g.directed else "undirected"}}
    if name == "clustering":
        return {name: local_clustering(g, _views=v)}, {name: {
            "normalization": "share of neighbour pairs that are linked; 0 below degree 2",
            "view": "undirected, unweighted, self-loops removed"}}
    if name == "constraint":
        return {name: constraint(g, weights=use_w, _views=v)}, {name: {
            "normalization": "Burt's constraint (NetworkX constraint); lower = more "
            "brokerage; NaN for isolated nodes", "weighted": use_w,
            "view": "undirected, mutual weight w_ij + w_ji"}}
    from .communities import leiden

    membership, modularity = leiden(g, weights=use_w, random_seed=seed)
    return {name: membership.astype(np.float64)}, {name: {
        "normalization": "community label (0 = largest community)",
        "algorithm": "Leiden, modularity objective", "modularity": modularity,
        "random_seed": seed, "weighted": use_w,
        "view": "undirected" if not g.directed else "undirected view of a directed graph"}}
