"""Node scores: degree, strength, PageRank, eigenvector, hubs and authorities,
betweenness (exact and sampled), harmonic closeness, k-core number, local
clustering, Burt's constraint, and :func:`scores`, which computes a list of
them in one pass and records how each was normalised.

Weights are interaction counts, that is tie *strengths*. PageRank,
eigenvector, hub/authority and strength use them directly; constraint uses
them as tie strength; path-based scores (betweenness, harmonic closeness) turn
them into distances ``1 / w``, because more interactions make two people
closer, not further apart.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from . import _centrality_kernels as _k
from .errors import Cancelled, ComputationFailed, InvalidParameter
from .graph import GraphArrays, arcs, csr, to_igraph

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
    "betweenness",
    "rk_sample_size",
    "harmonic_closeness",
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
#: Above this many ``n * m`` steps, betweenness="auto" samples and
#: :func:`default_measures` leaves out harmonic closeness and constraint.
EXACT_WORK_LIMIT = 1e9
_RTOL = 1e-10


@dataclass(frozen=True)
class ScoreResult:
    """Scores by measure name (one float64 per node) and how each was computed."""

    values: dict[str, NDArray[np.float64]]
    meta: dict[str, dict[str, Any]]


class _Views:
    """The igraph graph and derived views, built once and shared by the measures."""

    def __init__(self, g: GraphArrays) -> None:
        self.g = g
        self._ig: Any = None
        self._simple_undirected: Any = None
        self.warnings: list[str] = []
        self.cache: dict[str, Any] = {}

    def call(self, fn: Callable[..., Any], *args: Any, **kwargs: Any) -> NDArray[np.float64]:
        """Run an igraph method: warnings are kept, errors become ComputationFailed."""
        name = getattr(fn, "__name__", str(fn))
        try:
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always")
                out = np.asarray(fn(*args, **kwargs), dtype=np.float64)
        except Cancelled:
            raise
        except Exception as exc:  # igraph raises InternalError and plain ValueErrors
            raise ComputationFailed(f"igraph failed in {name}: {exc}", measure=name) from exc
        self.warnings.extend(str(w.message).split(" Location:")[0] for w in caught)
        return out

    @property
    def ig(self) -> Any:
        if self._ig is None:
            self._ig = to_igraph(self.g, weights=True)
        return self._ig

    def weights(self, use: bool) -> list[float] | None:
        return self.g.weight.tolist() if (use and self.g.weighted) else None

    def loopless(self) -> Any:
        if not np.any(self.g.src == self.g.dst):
            return self.ig
        h = self.ig.copy()
        h.simplify(multiple=False, loops=True, combine_edges="first")
        return h

    @property
    def simple_undirected(self) -> Any:
        """Undirected, no loops; reciprocal arcs merged, summing ``weight`` and
        counting merged arcs in ``arcs``."""
        if self._simple_undirected is None:
            ig = self.ig
            ig.es["arcs"] = [1.0] * ig.ecount()
            combine = {"weight": "sum", "arcs": "sum"}
            h = ig.as_undirected(mode="collapse", combine_edges=combine)
            h.simplify(multiple=True, loops=True, combine_edges=combine)
            self._simple_undirected = h
        return self._simple_undirected


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
    >>> g = GraphArrays(4, True, np.array([0, 0, 1], np.int32), np.array([1, 2, 2], np.int32),
    ...                 np.ones(3))
    >>> degree(g, mode="out").tolist(), degree(g, mode="in").tolist()
    ([2.0, 1.0, 0.0, 0.0], [0.0, 1.0, 2.0, 0.0])
    """
    return strength(g, mode=mode, weights=False)


def strength(g: GraphArrays, *, mode: str = "all", weights: bool = True) -> NDArray[np.float64]:
    """Sum of the weights (interaction counts) of the edges at each node.

    Examples
    --------
    >>> import numpy as np
    >>> g = GraphArrays(4, False, np.array([0, 1], np.int32), np.array([1, 2], np.int32),
    ...                 np.array([2.0, 3.0]))
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
    >>> g = GraphArrays(4, False, np.array([0, 0, 0], np.int32), np.array([1, 2, 3], np.int32),
    ...                 np.ones(3))
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
    >>> g = GraphArrays(4, False, np.array([0, 1, 2, 3], np.int32),
    ...                 np.array([1, 2, 3, 0], np.int32), np.ones(4))
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
    >>> g = GraphArrays(4, True, np.array([0, 0, 1], np.int32), np.array([2, 3, 3], np.int32),
    ...                 np.ones(3))
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


def _path_lengths(v: _Views, use: bool) -> list[float] | None:
    return (1.0 / v.g.weight).tolist() if (use and v.g.weighted) else None


def rk_sample_size(vertex_diameter: int, epsilon: float, delta: float, *, c: float = 0.5) -> int:
    """Riondato-Kornaropoulos sample size ``(c/eps^2)(floor(log2(VD-2)) + 1 + ln(1/delta))``.

    Examples
    --------
    >>> rk_sample_size(10, 0.1, 0.1)
    316
    """
    if vertex_diameter < 3:
        return 0
    r = (c / epsilon**2) * (math.floor(math.log2(vertex_diameter - 2)) + 1 + math.log(1 / delta))
    return int(math.ceil(r))


def betweenness(
    g: GraphArrays,
    *,
    weights: bool = True,
    method: str = "auto",
    epsilon: float = 0.01,
    delta: float = 0.1,
    exact_limit: float = EXACT_WORK_LIMIT,
    random_seed: int = 0,
    progress: Progress = None,
    _views: _Views | None = None,
) -> tuple[NDArray[np.float64], dict[str, Any]]:
    """Betweenness centrality: exact (Brandes 2001) or sampled (Riondato-Kornaropoulos 2014).

    Parameters
    ----------
    g : GraphArrays
    weights : bool
        Use path lengths ``1 / w`` (more interactions = closer).
    method : {"auto", "exact", "sampled"}
        ``auto`` is exact when ``n * m <= exact_limit``, else sampled.
    epsilon, delta : float
        Sampled method: with probability at least ``1 - delta`` every node's
        estimate is within ``epsilon`` of its betweenness on RK's scale
        (pairs counted over ``n (n - 1)`` ordered pairs).
    exact_limit : float
        Work (``n * m``) above which ``auto`` samples.
    random_seed : int
        Seeds the sampled method; equal seeds give equal results.
    progress : callable, optional
        ``progress(fraction, message)`` during sampling; may raise Cancelled.

    Returns
    -------
    (values, meta)
        ``values`` normalised as NetworkX ``betweenness_centrality(normalized=True)``:
        divided by ``(n - 1)(n - 2)`` over ordered pairs (directed) or by
        ``(n - 1)(n - 2) / 2`` over unordered pairs (undirected). ``meta``
        gives method, normalisation and, when sampled, ``epsilon``, ``delta``,
        ``samples`` (r), ``vertex_diameter_bound`` and ``error_bound`` (the
        additive bound on the returned scale, ``epsilon * n / (n - 2)``).

    Raises
    ------
    InvalidParameter
        Unknown method, or epsilon / delta outside (0, 1).
    ComputationFailed
        igraph failed.

    Notes
    -----
    Sampling draws ``r = (c / eps^2)(floor(log2(VD - 2)) + 1 + ln(1 / delta))``
    ordered pairs, ``c = 0.5`` [2]_, and for each a uniformly random shortest
    path (BFS or Dijkstra with path counts, stopped at the target, then a
    random walk back choosing predecessors by path count); a node's estimate
    is the share of paths with it inside. ``VD`` is bounded from above by
    the heaviest chain of strongly connected components, each counting
    ``min(|C|, floor((ecc_in + ecc_out) l_max / l_min) + 1)`` vertices from one
    BFS each way from a root in it (``2 ecc + 1`` on undirected unweighted
    graphs; ``l_max / l_min`` is the ratio of the longest to the shortest
    path length ``1 / w``); see
    :func:`._centrality_kernels.vertex_diameter_bound`. Unweighted samples use
    a balanced bidirectional BFS; weighted ones a Dijkstra search stopped at
    the target, which is much slower per sample on large graphs. The estimate
    is rescaled by ``n / (n - 2)`` to NetworkX's normalisation.

    References
    ----------
    .. [1] U. Brandes (2001). A faster algorithm for betweenness centrality.
       J. Math. Sociol. 25(2), 163-177.
    .. [2] M. Riondato, E. Kornaropoulos (2014). Fast approximation of
       betweenness centrality through sampling. WSDM '14.

    Examples
    --------
    >>> import numpy as np
    >>> g = GraphArrays(4, False, np.array([0, 0, 0], np.int32), np.array([1, 2, 3], np.int32),
    ...                 np.ones(3))
    >>> b, meta = betweenness(g)
    >>> b.tolist(), meta["method"]
    ([1.0, 0.0, 0.0, 0.0], 'exact')
    """
    if method not in ("auto", "exact", "sampled"):
        raise InvalidParameter("betweenness method must be 'auto', 'exact' or 'sampled'",
                               field="betweenness")
    if not (0 < epsilon < 1 and 0 < delta < 1):
        raise InvalidParameter("betweenness epsilon and delta must be in (0, 1)",
                               field="betweenness_epsilon")
    n = g.n
    use_w = bool(weights and g.weighted)
    scale = 1.0 / ((n - 1) * (n - 2)) if n > 2 else 0.0
    meta: dict[str, Any] = {
        "normalization": "NetworkX normalized=True: share of the other (n-1)(n-2) ordered "
        "pairs (directed) or (n-1)(n-2)/2 unordered pairs (undirected) whose shortest "
        "paths pass through the node",
        "weighted": use_w,
        "distance": "1/weight" if use_w else "hops",
    }
    if method == "auto":
        method = "exact" if float(n) * g.m <= exact_limit else "sampled"
    if method == "exact":
        v = _views or _Views(g)
        raw = v.call(v.ig.betweenness, directed=True, weights=_path_lengths(v, use_w))
        factor = scale if g.directed else 2.0 * scale
        meta.update(method="exact", algorithm="Brandes 2001 (igraph)")
        return raw * factor, meta
    values, info = _sampled_betweenness(g, use_w, epsilon, delta, random_seed, progress)
    meta.update(info)
    return values, meta


def _sampled_betweenness(
    g: GraphArrays, use_w: bool, epsilon: float, delta: float, seed: int, progress: Progress
) -> tuple[NDArray[np.float64], dict[str, Any]]:
    from scipy.sparse import csr_matrix
    from scipy.sparse.csgraph import connected_components

    n = g.n
    a = arcs(g)
    keep = a.src != a.dst
    src, dst = a.src[keep], a.dst[keep]
    length = 1.0 / a.weight[keep] if use_w else np.ones(src.shape[0])
    out = csr(n, src, dst, length)
    inn = csr(n, dst, src, length)
    adj = csr_matrix((np.ones(src.shape[0], np.int8), (src, dst)), shape=(n, n))
    ncomp, labels = connected_components(adj, directed=g.directed, connection="strong")
    ratio = float(length.max() / length.min()) if length.size else 1.0
    vd = _k.vertex_diameter_bound(n, out.indptr, out.indices, inn.indptr, inn.indices,
                                  labels.astype(np.int64), int(ncomp),
                                  length_ratio=ratio)
    r = rk_sample_size(vd, epsilon, delta)
    counts = np.zeros(n)
    state = _k.seed_state(seed)
    chunks = max(1, min(20, r // 1000))
    done = 0
    for i in range(chunks):
        todo = (r * (i + 1)) // chunks - done
        if use_w:
            _k.rk_sample_weighted(n, out.indptr, out.indices, out.data, inn.indptr,
                                  inn.indices, inn.data, todo, state, counts, _RTOL)
        else:
            _k.rk_sample_unweighted(n, out.indptr, out.indices, inn.indptr, inn.indices,
                                    todo, state, counts)
        done += todo
        if progress is not None:
            progress(done / r, f"betweenness: {done} of {r} sampled paths")
    rescale = n / (n - 2) if n > 2 else 0.0
    values = counts / r * rescale if r else np.zeros(n)
    return values, {
        "method": "sampled",
        "algorithm": "Riondato-Kornaropoulos 2014, uniform shortest-path sampling",
        "epsilon": epsilon,
        "delta": delta,
        "c": 0.5,
        "samples": r,
        "vertex_diameter_bound": vd,
        "error_bound": epsilon * rescale,
        "random_seed": seed,
        "guarantee": "with probability >= 1 - delta every node is within error_bound of "
        "its exact value (epsilon on RK's 1/(n(n-1)) scale)",
    }


def harmonic_closeness(
    g: GraphArrays,
    *,
    weights: bool = True,
    cutoff: float | None = None,
    mode: str = "out",
    _views: _Views | None = None,
) -> NDArray[np.float64]:
    """Harmonic closeness: the sum of ``1 / d`` over the other nodes (Marchiori and Latora 2000).

    Parameters
    ----------
    g : GraphArrays
    weights : bool
        Distances ``1 / w`` (more interactions = closer) instead of hops.
    cutoff : float, optional
        Ignore nodes further than this (in hops, or in ``1 / w`` units).
    mode : {"out", "in"}
        ``out``: distances from the node (how close it is to everyone it can
        reach); ``in``: distances to it, which is NetworkX's
        ``harmonic_centrality`` convention on directed graphs.

    Notes
    -----
    Not normalised (NetworkX default); divide by ``n - 1`` for a mean.
    Unreachable nodes add 0. O(n m) time (O(n (m + n log n)) weighted).

    References
    ----------
    .. [1] M. Marchiori, V. Latora (2000). Harmony in the small-world.
       Physica A 285, 539-546.

    Examples
    --------
    >>> import numpy as np
    >>> g = GraphArrays(4, False, np.array([0, 0, 0], np.int32), np.array([1, 2, 3], np.int32),
    ...                 np.ones(3))
    >>> harmonic_closeness(g).tolist()
    [3.0, 2.0, 2.0, 2.0]
    """
    if mode not in ("out", "in"):
        raise InvalidParameter("harmonic mode must be 'out' or 'in'", field="mode")
    if cutoff is not None and not cutoff > 0:
        raise InvalidParameter("harmonic_cutoff must be positive", field="harmonic_cutoff")
    v = _views or _Views(g)
    if g.n == 0:
        return np.zeros(0)
    return v.call(v.ig.harmonic_centrality, mode=mode, cutoff=cutoff,
                 weights=_path_lengths(v, weights), normalized=False)


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
    >>> g = GraphArrays(4, False, np.array([0, 1, 2, 2], np.int32),
    ...                 np.array([1, 2, 0, 3], np.int32), np.ones(4))
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
    >>> g = GraphArrays(4, False, np.array([0, 1, 2, 2], np.int32),
    ...                 np.array([1, 2, 0, 3], np.int32), np.ones(4))
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
    >>> g = GraphArrays(4, False, np.array([0, 0, 0], np.int32), np.array([1, 2, 3], np.int32),
    ...                 np.ones(3))
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
    >>> g = GraphArrays(3, False, np.array([0], np.int32), np.array([1], np.int32), np.ones(1))
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
    >>> g = GraphArrays(4, False, np.array([0, 0, 0], np.int32), np.array([1, 2, 3], np.int32),
    ...                 np.ones(3))
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
        x = harmonic_closeness(g, weights=use_w, cutoff=cutoff, _views=v)
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
