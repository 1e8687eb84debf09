"""Shortest-path node scores: betweenness, exact (Brandes 2001) or sampled with
a stated error bound (Riondato and Kornaropoulos 2014) with its sample size,
and harmonic closeness (Marchiori and Latora 2000).

Weights are interaction counts (tie strengths), so shortest paths use the
distance ``1 / w``: more interactions make two people closer. Split from
:mod:`.centrality`, whose :func:`~.centrality.scores` calls these. (Not named
``betweenness.py``: the package re-exports the function ``betweenness``, which
would shadow a submodule of that name.)
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any

import numpy as np
from numpy.typing import NDArray

from . import _kernels as _k
from .._chunks import map_ordered, run_chunked, split_range, thread_count
from ._views import _Views
from ._weighted_sampling import rk_sample_weighted
from ..errors import InvalidParameter
from ..graph import GraphArrays, arcs, csr


Progress = Callable[[float, str], None] | None

__all__ = ["EXACT_WORK_LIMIT", "betweenness", "harmonic_closeness", "rk_sample_size"]

#: Above this many ``n * m`` steps, betweenness="auto" samples and
#: :func:`.centrality.default_measures` leaves out harmonic closeness and constraint.
EXACT_WORK_LIMIT = 1e9
_RTOL = 1e-10


def _path_lengths(v: _Views, use: bool) -> list[float] | None:
    """igraph path lengths ``1 / w`` (None: hops)."""
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
    threads: int | None = None,
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
        ``progress(fraction, message)`` about every quarter second; may raise Cancelled.
    threads : int, optional
        Most threads the sampled method runs on (default: every core the process may
        use). Sample ``i`` depends only on ``(random_seed, i)`` and the per-thread counts
        are whole numbers added exactly, so the scores are the same for any number.

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
    a balanced bidirectional BFS, weighted ones a balanced bidirectional
    Dijkstra search (:func:`._weighted_sampling.rk_sample_weighted`; 20 to 25
    times faster than one search from the source, measured on wiki-Vote and
    ca-HepTh by ``tests/bench/bench_betweenness.py``). The estimate is rescaled
    by ``n / (n - 2)`` to NetworkX's normalisation.

    References
    ----------
    .. [1] U. Brandes (2001). A faster algorithm for betweenness centrality.
       J. Math. Sociol. 25(2), 163-177.
    .. [2] M. Riondato, E. Kornaropoulos (2014). Fast approximation of
       betweenness centrality through sampling. WSDM '14.

    Examples
    --------
    >>> import numpy as np
    >>> g = from_edges([(0, 1), (0, 2), (0, 3)])
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
        lengths = _path_lengths(v, use_w)
        raw = np.zeros(n)

        def sources(start: int, count: int) -> None:
            # Brandes' sum over sources, a slice of sources per call (igraph's
            # subset betweenness): each call is short enough to reach a cancel point.
            raw[:] += v.call(v.ig.betweenness, directed=True, weights=lengths,
                             sources=range(start, start + count), targets=None)

        def after(done: int) -> None:
            if progress is not None:
                progress(done / n, f"betweenness: paths from {done} of {n} people")

        run_chunked(n, sources, after=after, first=16)
        factor = scale if g.directed else 2.0 * scale
        meta.update(method="exact", algorithm="Brandes 2001 (igraph)")
        return raw * factor, meta
    values, info = _sampled_betweenness(g, use_w, epsilon, delta, random_seed, progress,
                                        thread_count(threads))
    meta.update(info)
    return values, meta


def _sampled_betweenness(
    g: GraphArrays, use_w: bool, epsilon: float, delta: float, seed: int, progress: Progress,
    threads: int = 1,
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
    _draw_samples(n, out, inn, use_w, r, state, counts, progress, threads=threads)
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


def _draw_samples(n: int, out: Any, inn: Any, use_w: bool, r: int,
                  state: NDArray[np.uint64], counts: NDArray[np.float64],
                  progress: Progress, *, first: int = 16, threads: int = 1) -> None:
    """Draw ``r`` RK samples into ``counts`` in chunks of about a quarter second each,
    calling ``progress`` after every chunk. Each chunk is split into one index range
    per thread, each with its own state and counts, added in order; sample ``i``
    depends only on ``(key, i)``, so the counts equal those of one call drawing all
    ``r`` (they are whole numbers, so the additions are exact in any order)."""

    def part(start: int, todo: int) -> NDArray[np.float64]:
        local = np.zeros(n) if threads > 1 else counts
        st = np.array([state[0], start], dtype=np.uint64)
        if use_w:
            rk_sample_weighted(n, out.indptr, out.indices, out.data, inn.indptr,
                               inn.indices, inn.data, todo, st, local, _RTOL)
        else:
            _k.rk_sample_unweighted(n, out.indptr, out.indices, inn.indptr, inn.indices,
                                    todo, st, local)
        return local

    def step(_start: int, todo: int) -> None:
        start = int(state[1])
        parts = split_range(start, todo, threads if todo >= 4 * threads else 1)
        if threads > 1:
            for local in map_ordered(part, parts):
                counts[:] += local
        else:
            part(start, todo)
        state[1] = np.uint64(start + todo)

    def after(done: int) -> None:
        if progress is not None:
            progress(done / r, f"betweenness: {done} of {r} sampled paths")

    run_chunked(r, step, after=after, first=first)


def harmonic_closeness(
    g: GraphArrays,
    *,
    weights: bool = True,
    cutoff: float | None = None,
    mode: str = "out",
    progress: Progress = None,
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
    progress : callable, optional
        ``progress(fraction, message)`` after each slice of nodes; may raise Cancelled.

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
    >>> g = from_edges([(0, 1), (0, 2), (0, 3)])
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
    lengths = _path_lengths(v, weights)
    out = np.zeros(g.n)

    def nodes(start: int, count: int) -> None:
        out[start:start + count] = v.call(v.ig.harmonic_centrality, vertices=range(start, start + count),
                                          mode=mode, cutoff=cutoff, weights=lengths, normalized=False)

    def after(done: int) -> None:
        if progress is not None:
            progress(done / g.n, f"harmonic closeness: {done} of {g.n} people")

    run_chunked(g.n, nodes, after=after, first=16)
    return out
