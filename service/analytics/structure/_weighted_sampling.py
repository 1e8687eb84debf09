"""Compiled sampling of shortest paths on positive arc lengths, for sampled
betweenness (Riondato and Kornaropoulos 2014) on weighted graphs.

Each sample is a balanced bidirectional Dijkstra search (the weighted form of
Borassi and Natale 2016; the argument that it draws every shortest path with
probability 1 / sigma_st is in :func:`rk_sample_weighted`). The one-directional
Dijkstra sampler, ``_rk_sample_weighted_dijkstra``, stays as the reference the
tests and ``tests/bench/bench_betweenness.py`` compare against.

Private to ``service.analytics``; the random streams come from the caller-owned
state of :func:`._kernels.seed_state`, one stream per sample (see :mod:`._kernels`).
"""

from __future__ import annotations

import numpy as np
from numba import njit

from ._kernels import _below, _uniform, sample_stream

__all__ = ["rk_sample_weighted"]


@njit(cache=True)
def _heap_push(hd: np.ndarray, hv: np.ndarray, size: int, d: float, v: int) -> int:
    i = size
    hd[i] = d
    hv[i] = v
    while i > 0:
        p = (i - 1) // 2
        if hd[p] <= hd[i]:
            break
        hd[p], hd[i] = hd[i], hd[p]
        hv[p], hv[i] = hv[i], hv[p]
        i = p
    return size + 1


@njit(cache=True)
def _heap_pop(hd: np.ndarray, hv: np.ndarray, size: int) -> int:
    size -= 1
    hd[0] = hd[size]
    hv[0] = hv[size]
    i = 0
    while True:
        a = 2 * i + 1
        b = a + 1
        m = i
        if a < size and hd[a] < hd[m]:
            m = a
        if b < size and hd[b] < hd[m]:
            m = b
        if m == i:
            break
        hd[m], hd[i] = hd[i], hd[m]
        hv[m], hv[i] = hv[i], hv[m]
        i = m
    return size


@njit(cache=True, inline="always")
def _ties(a: float, b: float, rtol: float) -> bool:
    """Two path lengths count as equal within ``rtol`` of the larger."""
    return abs(a - b) <= rtol * max(a, b)


@njit(cache=True, inline="always")
def _grow(
    u: int, du: float, forward: bool, indptr: np.ndarray, indices: np.ndarray,
    length: np.ndarray, dist: np.ndarray, sigma: np.ndarray, done: np.ndarray,
    hd: np.ndarray, hv: np.ndarray, size: int, touched: np.ndarray, ntouched: int,
    frontier: int, other_dist: np.ndarray, other_done: np.ndarray, skip: int,
    mu: float, best: float, rec_tail: np.ndarray, rec_head: np.ndarray,
    rec_len: np.ndarray, nrec: int, rtol: float,
) -> tuple[int, int, int, float, float, int]:
    """Settle ``u`` on one side of the bidirectional search and relax its arcs.

    ``forward`` scans out-arcs (``u`` is an arc's tail), otherwise in-arcs
    (``u`` is its head). Every arc whose far end carries a label of the other
    side bounds the s-t distance ``mu``; an arc whose far end is already
    settled there is a candidate meeting arc, kept (tail, head, length) while
    its length ties the shortest such arc ``best``. The far end ``skip`` (the
    other side's root) is never labelled. Returns the new heap size, touched
    count, frontier degree sum, ``mu``, ``best`` and candidate count.
    """
    done[u] = True
    frontier -= indptr[u + 1] - indptr[u]
    for k in range(indptr[u], indptr[u + 1]):
        v = indices[k]
        w = length[k]
        ov = other_dist[v]
        if ov < np.inf:
            total = du + w + ov
            if total < mu:
                mu = total
            if other_done[v]:
                if nrec == 0 or total < best - rtol * total:
                    best = total
                    nrec = 0
                if _ties(total, best, rtol):
                    rec_tail[nrec] = u if forward else v
                    rec_head[nrec] = v if forward else u
                    rec_len[nrec] = total
                    nrec += 1
        if v == skip or done[v]:
            continue
        alt = du + w
        if dist[v] == np.inf:
            touched[ntouched] = v
            ntouched += 1
            frontier += indptr[v + 1] - indptr[v]
        if alt < dist[v] - rtol * alt:
            dist[v] = alt
            sigma[v] = sigma[u]
            size = _heap_push(hd, hv, size, alt, v)
        elif _ties(alt, dist[v], rtol):
            sigma[v] += sigma[u]
    return size, ntouched, frontier, mu, best, nrec


@njit(cache=True)
def _trace(
    v: int, end: int, indptr: np.ndarray, indices: np.ndarray, length: np.ndarray,
    dist: np.ndarray, sigma: np.ndarray, done: np.ndarray, state: np.ndarray,
    path: np.ndarray, npath: int, rtol: float,
) -> int:
    """Walk from settled ``v`` to ``end``, each step to a settled neighbour ``p``
    on a shortest path with probability ``sigma[p] / sigma[v]``; appends the
    nodes passed (not ``end``) to ``path`` and returns its new length."""
    while v != end:
        target = _uniform(state) * sigma[v]
        acc = 0.0
        pick = -1
        for k in range(indptr[v], indptr[v + 1]):
            p = indices[k]
            if done[p] and p != v and _ties(dist[p] + length[k], dist[v], rtol):
                pick = p
                acc += sigma[p]
                if acc > target:
                    break
        if pick < 0:  # rounding left no predecessor: drop the sample's tail
            break
        v = pick
        if v != end:
            path[npath] = v
            npath += 1
    return npath


@njit(cache=True)
def _bidirectional_path(
    s: int, t: int,
    out_indptr: np.ndarray, out_indices: np.ndarray, out_length: np.ndarray,
    in_indptr: np.ndarray, in_indices: np.ndarray, in_length: np.ndarray,
    df: np.ndarray, sf: np.ndarray, done_f: np.ndarray, tf: np.ndarray,
    hdf: np.ndarray, hvf: np.ndarray,
    db: np.ndarray, sb: np.ndarray, done_b: np.ndarray, tb: np.ndarray,
    hdb: np.ndarray, hvb: np.ndarray,
    rec_tail: np.ndarray, rec_head: np.ndarray, rec_len: np.ndarray,
    state: np.ndarray, path: np.ndarray, rtol: float,
) -> tuple[int, int]:
    """One uniformly random shortest ``s``-``t`` path by balanced bidirectional Dijkstra.

    Writes its interior nodes, in order from ``s``, to ``path`` and returns
    (their number, or -1 when ``t`` is unreachable; nodes settled). Leaves
    the work arrays as it found them (labels infinite, counts zero).
    """
    inf = np.inf
    df[s] = 0.0
    sf[s] = 1.0
    tf[0] = s
    db[t] = 0.0
    sb[t] = 1.0
    tb[0] = t
    mu = inf
    best = inf
    nrec = 0
    sizef, ntf, frontf, mu, best, nrec = _grow(
        s, 0.0, True, out_indptr, out_indices, out_length, df, sf, done_f, hdf, hvf, 0,
        tf, 1, out_indptr[s + 1] - out_indptr[s], db, done_b, t, mu, best,
        rec_tail, rec_head, rec_len, nrec, rtol)
    sizeb, ntb, frontb, mu, best, nrec = _grow(
        t, 0.0, False, in_indptr, in_indices, in_length, db, sb, done_b, hdb, hvb, 0,
        tb, 1, in_indptr[t + 1] - in_indptr[t], df, done_f, s, mu, best,
        rec_tail, rec_head, rec_len, nrec, rtol)
    settled = 2
    while True:
        while sizef > 0 and (done_f[hvf[0]] or hdf[0] > df[hvf[0]]):
            sizef = _heap_pop(hdf, hvf, sizef)
        while sizeb > 0 and (done_b[hvb[0]] or hdb[0] > db[hvb[0]]):
            sizeb = _heap_pop(hdb, hvb, sizeb)
        if sizef == 0 or sizeb == 0:
            break
        top = hdf[0] + hdb[0]
        if top > mu and not _ties(top, mu, rtol):
            break
        if frontf <= frontb:
            u = hvf[0]
            du = hdf[0]
            sizef = _heap_pop(hdf, hvf, sizef)
            sizef, ntf, frontf, mu, best, nrec = _grow(
                u, du, True, out_indptr, out_indices, out_length, df, sf, done_f, hdf, hvf,
                sizef, tf, ntf, frontf, db, done_b, t, mu, best,
                rec_tail, rec_head, rec_len, nrec, rtol)
        else:
            u = hvb[0]
            du = hdb[0]
            sizeb = _heap_pop(hdb, hvb, sizeb)
            sizeb, ntb, frontb, mu, best, nrec = _grow(
                u, du, False, in_indptr, in_indices, in_length, db, sb, done_b, hdb, hvb,
                sizeb, tb, ntb, frontb, df, done_f, s, mu, best,
                rec_tail, rec_head, rec_len, nrec, rtol)
        settled += 1
    # Meeting arcs: forward-settled tail, head settled backward but not forward.
    npath = -1
    total = 0.0
    for i in range(nrec):
        if not done_f[rec_head[i]] and _ties(rec_len[i], best, rtol):
            total += sf[rec_tail[i]] * sb[rec_head[i]]
    if total > 0.0:
        target = _uniform(state) * total
        acc = 0.0
        pick = -1
        for i in range(nrec):
            if not done_f[rec_head[i]] and _ties(rec_len[i], best, rtol):
                pick = i
                acc += sf[rec_tail[i]] * sb[rec_head[i]]
                if acc > target:
                    break
        u = rec_tail[pick]
        v = rec_head[pick]
        npath = 0
        if u != s:
            path[0] = u
            npath = _trace(u, s, in_indptr, in_indices, in_length, df, sf, done_f, state,
                           path, 1, rtol)
            for i in range(npath // 2):
                path[i], path[npath - 1 - i] = path[npath - 1 - i], path[i]
        if v != t:
            path[npath] = v
            npath = _trace(v, t, out_indptr, out_indices, out_length, db, sb, done_b, state,
                           path, npath + 1, rtol)
    for i in range(ntf):
        w = tf[i]
        df[w] = inf
        sf[w] = 0.0
        done_f[w] = False
    for i in range(ntb):
        w = tb[i]
        db[w] = inf
        sb[w] = 0.0
        done_b[w] = False
    return npath, settled


@njit(cache=True)
def _workspace(n: int, m: int) -> tuple[
    np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray,
    np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray,
    np.ndarray, np.ndarray, np.ndarray, np.ndarray,
]:
    """Labels, counts, settled flags, touched lists and heaps of both sides; candidate arcs."""
    cap = m + 1
    return (np.full(n, np.inf), np.zeros(n), np.zeros(n, dtype=np.bool_),
            np.empty(n, dtype=np.int64), np.empty(cap), np.empty(cap, dtype=np.int64),
            np.full(n, np.inf), np.zeros(n), np.zeros(n, dtype=np.bool_),
            np.empty(n, dtype=np.int64), np.empty(cap), np.empty(cap, dtype=np.int64),
            np.empty(cap, dtype=np.int64), np.empty(cap, dtype=np.int64), np.empty(cap),
            np.empty(n, dtype=np.int64))


@njit(cache=True, nogil=True)
def rk_sample_weighted(
    n: int,
    out_indptr: np.ndarray,
    out_indices: np.ndarray,
    out_length: np.ndarray,
    in_indptr: np.ndarray,
    in_indices: np.ndarray,
    in_length: np.ndarray,
    r: int,
    state: np.ndarray,
    counts: np.ndarray,
    rtol: float,
) -> int:
    """As :func:`rk_sample_unweighted` over positive arc lengths (samples ``state[1] ..
    state[1] + r - 1``, advancing ``state[1]``); returns nodes settled.

    Two path lengths count as equal when they differ by at most ``rtol``
    times the larger one, so sums like 1/2 + 1/2 and 1 tie.

    Each sample draws an ordered pair ``s != t`` uniformly, then runs a
    balanced bidirectional Dijkstra search: forward from ``s`` over out-arcs
    (labels ``d_s``, path counts ``sigma_s``), backward from ``t`` over
    in-arcs (``d_t``, ``sigma_t``); one node is settled per step, on the side
    whose frontier (labelled, unsettled nodes) has the smaller degree sum,
    as Borassi and Natale (2016) balance their BFS. The forward side never
    labels ``t`` and the backward side never labels ``s``; every shortest
    ``s``-``t`` path avoids them inside, so the labels and counts of the nodes
    on such paths are those of the whole graph.

    *Stopping.* With ``a``, ``b`` the smallest keys left in the two heaps and
    ``mu`` the shortest ``s``-``t`` length seen through any labelled arc end,
    the search stops once ``a + b > mu`` by more than the tolerance (or a
    heap is empty). The usual test ``a + b >= mu`` finds one shortest path
    but not all: with ``a + b = L`` a node at forward distance ``a`` may
    still be unscanned and begin shortest paths whose last arc into the
    backward ball has not been seen. Once ``a + b > L`` (``L`` the true
    distance), take any shortest path ``s = x_0 .. x_k = t``. Settled nodes
    on it form a prefix (``d_s`` increases strictly along it and a Dijkstra
    search settles in order of ``d_s``), which ends before ``t``; let
    ``(x_i, x_{i+1})`` be the arc leaving it. ``x_{i+1}`` is unsettled
    forward, so ``d_s(x_{i+1}) >= a`` and ``d_t(x_{i+1}) <= L - a < b``:
    it is settled backward. Both ends of this arc being settled, the later
    one's scan saw the arc, so ``mu = L`` then and the stop is correct.

    *Meeting arcs.* The arcs ``(u, v)`` with ``u`` settled forward, ``v``
    settled backward but not forward and ``d_s(u) + l(u, v) + d_t(v) = L``
    are, by the prefix argument, exactly one arc of every shortest path
    (each arc is recorded once, by the scan of whichever end settles last).
    ``sigma_s(u) sigma_t(v)`` shortest paths use ``(u, v)``, and both labels
    and counts are final, so drawing the arc in proportion to that product
    and tracing each half back by path counts (each predecessor ``p`` with
    probability ``sigma[p] / sigma[node]``) yields every shortest path with
    probability ``1 / sigma_st``, as the one-directional search does, which
    is what the Riondato-Kornaropoulos bound needs.
    """
    (df, sf, done_f, tf, hdf, hvf, db, sb, done_b, tb, hdb, hvb,
     rec_tail, rec_head, rec_len, path) = _workspace(n, out_indices.shape[0])
    settled = 0
    first = int(state[1])
    state[1] += np.uint64(r)
    rng = np.empty(1, dtype=np.uint64)
    for i in range(r):
        sample_stream(state, first + i, rng)
        s = _below(rng, n)
        t = _below(rng, n - 1)
        if t >= s:
            t += 1
        npath, work = _bidirectional_path(
            s, t, out_indptr, out_indices, out_length, in_indptr, in_indices, in_length,
            df, sf, done_f, tf, hdf, hvf, db, sb, done_b, tb, hdb, hvb,
            rec_tail, rec_head, rec_len, rng, path, rtol)
        settled += work
        for i in range(npath):
            counts[path[i]] += 1.0
    return settled


@njit(cache=True)
def _weighted_paths_between(
    n: int,
    out_indptr: np.ndarray,
    out_indices: np.ndarray,
    out_length: np.ndarray,
    in_indptr: np.ndarray,
    in_indices: np.ndarray,
    in_length: np.ndarray,
    s: int,
    t: int,
    r: int,
    state: np.ndarray,
    rtol: float,
) -> np.ndarray:
    """``r`` draws of :func:`rk_sample_weighted`'s path for the fixed pair (s, t).

    Row ``i`` holds the interior nodes of draw ``i`` in order, padded with -1
    (all -1 when ``t`` is unreachable, or the path is one arc). For tests.
    """
    (df, sf, done_f, tf, hdf, hvf, db, sb, done_b, tb, hdb, hvb,
     rec_tail, rec_head, rec_len, path) = _workspace(n, out_indices.shape[0])
    out = np.full((r, n), -1, dtype=np.int64)
    for j in range(r):
        npath, _ = _bidirectional_path(
            s, t, out_indptr, out_indices, out_length, in_indptr, in_indices, in_length,
            df, sf, done_f, tf, hdf, hvf, db, sb, done_b, tb, hdb, hvb,
            rec_tail, rec_head, rec_len, state, path, rtol)
        for i in range(npath):
            out[j, i] = path[i]
    return out


@njit(cache=True)
def _rk_sample_weighted_dijkstra(
    n: int,
    out_indptr: np.ndarray,
    out_indices: np.ndarray,
    out_length: np.ndarray,
    in_indptr: np.ndarray,
    in_indices: np.ndarray,
    in_length: np.ndarray,
    r: int,
    state: np.ndarray,
    counts: np.ndarray,
    rtol: float,
) -> int:
    """Reference for :func:`rk_sample_weighted`: one Dijkstra search from ``s`` per sample.

    The search runs until ``t`` is settled, then walks back from ``t`` choosing
    each predecessor by path count. Same distribution as the bidirectional
    kernel, but it settles every node closer to ``s`` than ``t`` is; kept for
    the tests and the benchmark. Returns the number of nodes settled.
    """
    dist = np.full(n, np.inf)
    sigma = np.zeros(n, dtype=np.float64)
    done = np.zeros(n, dtype=np.bool_)
    touched = np.empty(n, dtype=np.int64)
    cap = out_indices.shape[0] + 1
    hd = np.empty(cap, dtype=np.float64)
    hv = np.empty(cap, dtype=np.int64)
    settled = 0
    for _ in range(r):
        s = _below(state, n)
        t = _below(state, n - 1)
        if t >= s:
            t += 1
        ntouched = 1
        touched[0] = s
        dist[s] = 0.0
        sigma[s] = 1.0
        size = _heap_push(hd, hv, 0, 0.0, s)
        while size > 0:
            du = hd[0]
            u = hv[0]
            size = _heap_pop(hd, hv, size)
            if done[u] or du > dist[u]:
                continue
            done[u] = True
            settled += 1
            if u == t:
                break
            for k in range(out_indptr[u], out_indptr[u + 1]):
                v = out_indices[k]
                if done[v]:
                    continue
                alt = du + out_length[k]
                if dist[v] == np.inf:
                    touched[ntouched] = v
                    ntouched += 1
                if alt < dist[v] - rtol * alt:
                    dist[v] = alt
                    sigma[v] = sigma[u]
                    size = _heap_push(hd, hv, size, alt, v)
                elif abs(alt - dist[v]) <= rtol * max(alt, dist[v]):
                    sigma[v] += sigma[u]
        if done[t]:
            v = t
            while v != s:
                target = _uniform(state) * sigma[v]
                acc = 0.0
                pick = -1
                for k in range(in_indptr[v], in_indptr[v + 1]):
                    u = in_indices[k]
                    if done[u] and u != v:
                        want = dist[u] + in_length[k]
                        if abs(want - dist[v]) <= rtol * max(want, dist[v]):
                            pick = u
                            acc += sigma[u]
                            if acc > target:
                                break
                if pick < 0:  # rounding left no predecessor: drop the sample's tail
                    break
                v = pick
                if v != s:
                    counts[v] += 1.0
        for i in range(ntouched):
            w = touched[i]
            dist[w] = np.inf
            sigma[w] = 0.0
            done[w] = False
    return settled
