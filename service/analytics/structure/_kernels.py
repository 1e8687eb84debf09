"""Compiled loops for sampled betweenness (Riondato and Kornaropoulos 2014), its
vertex-diameter bound, and the sampled-BFS distance summary of the profile.

Each sampled path comes from a balanced bidirectional search (Borassi and
Natale 2016): BFS on hops here, Dijkstra on arc lengths in
:mod:`._weighted_sampling`.

Private to ``service.analytics``. The random numbers are SplitMix64 streams, one
per sample: sample ``i`` of a run with seed ``s`` draws from the stream started at
``mix64(key ^ mix64((i + 1) * gamma))``, ``key`` a hash of ``s``. The caller owns a
two-element ``uint64`` array ``[key, next sample index]`` (:func:`seed_state`), so a
run is reproducible from its seed, can be split into chunks (for progress reports)
or over threads (each part its own state starting at its first index, its own
counts, added afterwards) without changing the result, and never touches numpy's or
numba's global generators.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from .._grouping import group_order
from .._rng import GAMMA, mix64, unit

__all__ = [
    "rk_sample_unweighted",
    "vertex_diameter_bound",
    "seed_state",
    "sample_stream",
    "bfs_distance_counts",
]



def seed_state(seed: int, first: int = 0) -> np.ndarray:
    """The sampling state ``[key, next sample index]`` of ``seed``, at sample ``first``."""
    z = (int(seed) * 0x9E3779B97F4A7C15 + 0x3C6EF372FE94F82B) & 0xFFFFFFFFFFFFFFFF
    z = ((z ^ (z >> 30)) * 0xBF58476D1CE4E5B9) & 0xFFFFFFFFFFFFFFFF
    z = ((z ^ (z >> 27)) * 0x94D049BB133111EB) & 0xFFFFFFFFFFFFFFFF
    return np.array([z ^ (z >> 31), first], dtype=np.uint64)


@njit(cache=True, inline="always")
def sample_stream(state: np.ndarray, i: int, out: np.ndarray) -> None:
    """Start ``out[0]`` at the stream of sample ``i`` of ``state``'s key."""
    out[0] = mix64(state[0] ^ mix64(np.uint64(i + 1) * GAMMA))


@njit(cache=True, inline="always")
def _next_u64(state: np.ndarray) -> np.uint64:
    state[0] += GAMMA
    z: np.uint64 = mix64(state[0])
    return z


@njit(cache=True, inline="always")
def _uniform(state: np.ndarray) -> float:
    return unit(_next_u64(state))


@njit(cache=True, inline="always")
def _below(state: np.ndarray, k: int) -> int:
    """Uniform integer in [0, k)."""
    j = int(_uniform(state) * k)
    return j if j < k else k - 1


@njit(cache=True)
def _expand(
    frontier: np.ndarray,
    size: int,
    nxt: np.ndarray,
    indptr: np.ndarray,
    indices: np.ndarray,
    dist: np.ndarray,
    sigma: np.ndarray,
    other: np.ndarray,
    other_level: int,
    visited: np.ndarray,
    nvisited: int,
) -> tuple[int, int, bool, int]:
    """Expand one BFS level; returns (next size, visited count, met, next degree sum)."""
    met = False
    nsize = 0
    deg = 0
    level = dist[frontier[0]] + 1
    for i in range(size):
        u = frontier[i]
        for k in range(indptr[u], indptr[u + 1]):
            v = indices[k]
            if dist[v] < 0:
                dist[v] = level
                nxt[nsize] = v
                nsize += 1
                visited[nvisited] = v
                nvisited += 1
                deg += indptr[v + 1] - indptr[v]
                if other[v] == other_level:
                    met = True
            if dist[v] == level:
                sigma[v] += sigma[u]
    return nsize, nvisited, met, deg


@njit(cache=True)
def _walk_back(
    v: int, end: int, indptr: np.ndarray, indices: np.ndarray, dist: np.ndarray,
    sigma: np.ndarray, state: np.ndarray, counts: np.ndarray,
) -> None:
    """From ``v`` step to a neighbour one level closer to ``end``, by path count."""
    while v != end:
        target = _uniform(state) * sigma[v]
        acc = 0.0
        pick = -1
        for k in range(indptr[v], indptr[v + 1]):
            u = indices[k]
            if dist[u] >= 0 and dist[u] == dist[v] - 1:
                pick = u
                acc += sigma[u]
                if acc > target:
                    break
        v = pick
        if v != end:
            counts[v] += 1.0


@njit(cache=True, nogil=True)
def rk_sample_unweighted(
    n: int,
    out_indptr: np.ndarray,
    out_indices: np.ndarray,
    in_indptr: np.ndarray,
    in_indices: np.ndarray,
    r: int,
    state: np.ndarray,
    counts: np.ndarray,
) -> None:
    """Add ``r`` sampled shortest paths to ``counts`` (interior vertices only): samples
    ``state[1] .. state[1] + r - 1`` of ``state``'s key, advancing ``state[1]``.

    Each sample draws an ordered pair ``s != t`` uniformly and a uniformly
    random shortest ``s``-``t`` path, found by a balanced bidirectional BFS
    (the side whose frontier has the smaller degree sum grows by one level;
    Borassi and Natale 2016). When a forward level ``lf + 1`` first touches
    the backward ball of radius ``lb``, every shortest path has length
    ``lf + 1 + lb`` and crosses that level at a node ``v`` with
    ``d(v, t) = lb``; there are ``sigma_s(v) sigma_t(v)`` of them through
    ``v``. So ``v`` is drawn in proportion to that product and the two halves
    are traced back by path counts, each predecessor with probability
    ``sigma[u] / sigma[v]`` (symmetrically when the backward side grows).
    """
    df = np.full(n, -1, dtype=np.int64)
    db = np.full(n, -1, dtype=np.int64)
    sf = np.zeros(n, dtype=np.float64)
    sb = np.zeros(n, dtype=np.float64)
    ff = np.empty(n, dtype=np.int64)
    fb = np.empty(n, dtype=np.int64)
    nxt = np.empty(n, dtype=np.int64)
    vis_f = np.empty(n, dtype=np.int64)
    vis_b = np.empty(n, dtype=np.int64)
    first = int(state[1])
    state[1] += np.uint64(r)
    rng = np.empty(1, dtype=np.uint64)
    for i in range(r):
        sample_stream(state, first + i, rng)
        s = _below(rng, n)
        t = _below(rng, n - 1)
        if t >= s:
            t += 1
        df[s] = 0
        sf[s] = 1.0
        db[t] = 0
        sb[t] = 1.0
        ff[0] = s
        fb[0] = t
        vis_f[0] = s
        vis_b[0] = t
        nf = 1
        nb = 1
        nvf = 1
        nvb = 1
        degf = out_indptr[s + 1] - out_indptr[s]
        degb = in_indptr[t + 1] - in_indptr[t]
        lf = 0
        lb = 0
        met = False
        forward = True
        while nf > 0 and nb > 0:
            forward = degf <= degb
            if forward:
                nf, nvf, met, degf = _expand(ff, nf, nxt, out_indptr, out_indices, df, sf,
                                             db, lb, vis_f, nvf)
                ff[:nf] = nxt[:nf]
                lf += 1
            else:
                nb, nvb, met, degb = _expand(fb, nb, nxt, in_indptr, in_indices, db, sb,
                                             df, lf, vis_b, nvb)
                fb[:nb] = nxt[:nb]
                lb += 1
            if met:
                break
        if met and lf + lb > 1:
            # Meeting nodes: on the level just grown, at the other side's radius.
            total = 0.0
            front = ff if forward else fb
            size = nf if forward else nb
            for i in range(size):
                v = front[i]
                if df[v] == lf and db[v] == lb:
                    total += sf[v] * sb[v]
            target = _uniform(rng) * total
            acc = 0.0
            pick = -1
            for i in range(size):
                v = front[i]
                if df[v] == lf and db[v] == lb:
                    pick = v
                    acc += sf[v] * sb[v]
                    if acc > target:
                        break
            if pick != s and pick != t:
                counts[pick] += 1.0
            _walk_back(pick, s, in_indptr, in_indices, df, sf, rng, counts)
            _walk_back(pick, t, out_indptr, out_indices, db, sb, rng, counts)
        for i in range(nvf):
            df[vis_f[i]] = -1
            sf[vis_f[i]] = 0.0
        for i in range(nvb):
            db[vis_b[i]] = -1
            sb[vis_b[i]] = 0.0


@njit(cache=True)
def _eccentricities(
    n: int,
    indptr: np.ndarray,
    indices: np.ndarray,
    labels: np.ndarray,
    roots: np.ndarray,
) -> np.ndarray:
    """BFS eccentricity of each component root, restricted to its component."""
    ecc = np.zeros(roots.shape[0], dtype=np.int64)
    dist = np.full(n, -1, dtype=np.int64)
    queue = np.empty(n, dtype=np.int64)
    for c in range(roots.shape[0]):
        root = roots[c]
        dist[root] = 0
        queue[0] = root
        head = 0
        tail = 1
        while head < tail:
            u = queue[head]
            head += 1
            if dist[u] > ecc[c]:
                ecc[c] = dist[u]
            for k in range(indptr[u], indptr[u + 1]):
                v = indices[k]
                if dist[v] < 0 and labels[v] == c:
                    dist[v] = dist[u] + 1
                    queue[tail] = v
                    tail += 1
    return ecc


@njit(cache=True)
def _longest_chain(
    ncomp: int, bound: np.ndarray, c_indptr: np.ndarray, c_indices: np.ndarray
) -> int:
    """Heaviest path in the component DAG, node weights ``bound`` (Kahn order)."""
    indeg = np.zeros(ncomp, dtype=np.int64)
    for k in range(c_indices.shape[0]):
        indeg[c_indices[k]] += 1
    best = bound.copy()
    queue = np.empty(ncomp, dtype=np.int64)
    tail = 0
    for c in range(ncomp):
        if indeg[c] == 0:
            queue[tail] = c
            tail += 1
    head = 0
    top = 0
    while head < tail:
        c = queue[head]
        head += 1
        if best[c] > top:
            top = best[c]
        for k in range(c_indptr[c], c_indptr[c + 1]):
            d = c_indices[k]
            if best[c] + bound[d] > best[d]:
                best[d] = best[c] + bound[d]
            indeg[d] -= 1
            if indeg[d] == 0:
                queue[tail] = d
                tail += 1
    return top


def vertex_diameter_bound(
    n: int,
    out_indptr: np.ndarray,
    out_indices: np.ndarray,
    in_indptr: np.ndarray,
    in_indices: np.ndarray,
    labels: np.ndarray,
    ncomp: int,
    *,
    length_ratio: float = 1.0,
) -> int:
    """Upper bound on the number of vertices of any shortest path.

    ``labels`` are strongly connected components (connected components for an
    undirected graph, whose in- and out-CSR are the same); ``length_ratio``
    is the longest arc length over the shortest (1 when unweighted).

    Inside component ``C`` with root ``x``, one BFS each way gives a path of at
    most ``h = ecc_in(x) + ecc_out(x)`` hops between any two of its nodes, so
    of length at most ``h * l_max``; a shortest path, whose hops are each at
    least ``l_min`` long, has at most ``h * l_max / l_min`` hops. Shortest
    paths between two nodes of ``C`` never leave ``C``, so ``C`` contributes
    at most ``min(|C|, floor(h * ratio) + 1)`` vertices (``2 ecc + 1``
    unweighted and undirected). A shortest path visits a chain of components
    of the condensation; the bound is the heaviest such chain.
    """
    sizes = np.bincount(labels, minlength=ncomp).astype(np.int64)
    roots = np.full(ncomp, n, dtype=np.int64)
    np.minimum.at(roots, labels, np.arange(n, dtype=np.int64))
    lab = labels.astype(np.int64)
    e_out = _eccentricities(n, out_indptr, out_indices, lab, roots)
    e_in = _eccentricities(n, in_indptr, in_indices, lab, roots)
    hops = np.floor((e_out + e_in) * float(length_ratio) + 1e-9).astype(np.int64)
    bound = np.minimum(sizes, hops + 1)
    src = np.repeat(np.arange(n, dtype=np.int64), np.diff(out_indptr))
    cu = labels[src].astype(np.int64)
    cv = labels[out_indices].astype(np.int64)
    cross = cu != cv
    cu, cv = cu[cross], cv[cross]
    order = group_order(cu, ncomp)
    c_indptr = np.zeros(ncomp + 1, dtype=np.int64)
    np.cumsum(np.bincount(cu, minlength=ncomp), out=c_indptr[1:])
    return int(_longest_chain(ncomp, bound, c_indptr, cv[order]))


@njit(cache=True)
def bfs_distance_counts(
    n: int, indptr: np.ndarray, indices: np.ndarray, sources: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Hop distances from each source by BFS, summarised in O(n) memory.

    Returns ``counts`` (``counts[d]``: reachable (source, target) pairs at
    distance ``d >= 1``; the source itself is not counted), and per source the
    sum of its distances and the number of nodes it reaches.
    """
    counts = np.zeros(n + 1, dtype=np.int64)
    sums = np.zeros(sources.shape[0], dtype=np.float64)
    reached = np.zeros(sources.shape[0], dtype=np.int64)
    dist = np.full(n, -1, dtype=np.int64)
    queue = np.empty(n, dtype=np.int64)
    for i in range(sources.shape[0]):
        s = sources[i]
        dist[s] = 0
        queue[0] = s
        head = 0
        tail = 1
        total = 0
        while head < tail:
            u = queue[head]
            head += 1
            du = dist[u] + 1
            for k in range(indptr[u], indptr[u + 1]):
                v = indices[k]
                if dist[v] < 0:
                    dist[v] = du
                    counts[du] += 1
                    total += du
                    queue[tail] = v
                    tail += 1
        sums[i] = total
        reached[i] = tail - 1
        for j in range(tail):
            dist[queue[j]] = -1
    return counts, sums, reached
