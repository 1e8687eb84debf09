"""Compiled forward-simulation loops for Independent Cascade and Linear Threshold.

Private to :mod:`service.analytics`; :mod:`service.analytics.diffusion.cascades` is the
public face. Every loop here is a numba ``@njit(cache=True, nogil=True)``
function over compressed sparse rows, so no Python runs per edge or per node;
the Python drivers at the end cache the prepared arrays per graph
(:func:`kernel_graph`), split runs over threads (:func:`simulate`) and add up
chunks (:func:`merge`).

Random numbers. Run ``i`` of a stream with 64-bit key ``k`` draws from its own
SplitMix64 sequence [1]_ started at ``_run_state(k, i) = mix64(k ^ mix64((i + 1) * gamma))``.
A run's numbers therefore depend only on ``(k, i)``: runs ``i..j`` give the same
results in one batch or many, in one thread or several. Independent Cascade
takes two 32-bit coins from each 64-bit draw; an arc with probability ``p`` is
live when ``coin <= ceil(p * 2**32) - 1``, that is with probability
``ceil(p * 2**32) / 2**32``, within 2**-32 of ``p``: ``p = 1`` is always live, and
zero-probability arcs are removed beforehand (they can never be live).

Geometric skipping. When all out-arcs of a node share one probability
``0 < p <= SKIP_MAX_P`` (uniform ``p``) and the node has at least ``SKIP_MIN_DEGREE``
out-arcs, the gap to the next live arc is drawn as ``floor(log(U) / log(1 - p))``,
which has exactly the Geometric(p) law of the number of failed coins (up to the
2**-53 resolution of ``U``); it replaces ``deg`` coins by about ``deg * p + 1`` draws.

Memory layout. :func:`prepare` (in :mod:`._kernel_graph`) renumbers the nodes
by descending total degree (ties: smaller index first), so the hubs that most
cascades reach share cache lines and pages; :func:`run_chunk` and :func:`run_one` map seeds and node
weights in and per-node results out, so callers only ever see the original
indices. The Independent Cascade loop prefetches the rows of the nodes a few
places ahead in its queue, and on rows of at least ``_VEC_MIN_DEGREE`` arcs
computes the row's draws in one vectorised pass and collects the live arcs
without branches; the draws are the same as in the pairwise loop, so neither
changes any result.

Accumulators are integers (per-round sums of squares split into 32-bit halves),
so adding up chunks in any grouping gives bit-identical totals.

References
----------
.. [1] G. L. Steele, D. Lea, C. H. Flood (2014). Fast splittable pseudorandom
   number generators. OOPSLA '14.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable, Sequence
from typing import NamedTuple

import numpy as np
from numba import njit
from numpy.typing import NDArray

from .._chunks import map_ordered, split_range, thread_count
from .._rng import GAMMA, LO32, M1, M2, S11, S27, S30, S31, S32, TWO_M53, mix64, prefetch
from ._kernel_graph import SKIP_MAX_P, SKIP_MIN_DEGREE, KernelGraph, kernel_graph, prepare

__all__ = [
    "SKIP_MIN_DEGREE",
    "SKIP_MAX_P",
    "KernelGraph",
    "ChunkResult",
    "prepare",
    "kernel_graph",
    "run_chunk",
    "run_one",
    "simulate",
    "split_runs",
    "merge",
    "mean_var",
]

# Rows with at least this many arcs draw their coins in one vectorised pass (measured on
# soc-Slashdot0902, weighted cascade: about 10% faster from 32 on, slower below 8).
_VEC_MIN_DEGREE = 32
_PD = 8  # queue look-ahead of the software prefetches in _ic_cascade


class ChunkResult(NamedTuple):
    """What one chunk of runs ``run0 .. run0 + nruns - 1`` produced.

    Per run: ``reach`` (active nodes), ``weighted`` (sum of node weights of the
    active nodes, or the reach when no weights were given) and ``depth`` (last
    round with a new activation). Summed over the runs: ``count[v]`` (runs in
    which ``v`` became active), ``new[r]`` (new activations in round ``r``),
    and the sum of squared cumulative reach after round ``r`` split as
    ``sq_hi * 2**32 + sq_lo``, where runs that stopped before round ``r`` count
    with their final reach (``tail_hi``/``tail_lo`` at ``depth + 1`` carry that
    forward as a difference array).
    """

    reach: NDArray[np.int64]
    weighted: NDArray[np.float64]
    depth: NDArray[np.int32]
    count: NDArray[np.int64]  # type: ignore[assignment]  # shadows tuple.count; callers use it
    new: NDArray[np.int64]
    sq_hi: NDArray[np.int64]
    sq_lo: NDArray[np.int64]
    tail_hi: NDArray[np.int64]
    tail_lo: NDArray[np.int64]


@njit(cache=True, nogil=True)
def _run_state(key: np.uint64, run: int) -> np.uint64:
    return mix64(key ^ mix64(np.uint64(run + 1) * GAMMA))


@njit(cache=True, nogil=True)
def _grow(a, size):  # type: ignore[no-untyped-def]
    out = np.zeros(max(size, 2 * a.size), a.dtype)
    out[: a.size] = a
    return out


@njit(cache=True, nogil=True)
def _max_degree(indptr):  # type: ignore[no-untyped-def]
    best = 0
    for v in range(indptr.size - 1):
        best = max(best, indptr[v + 1] - indptr[v])
    return best


@njit(cache=True, nogil=True)
def _ic_cascade(  # type: ignore[no-untyped-def]
    g_indptr, g_indices, thr, skip, use_skip, seeds, state, mark, stamp, queue, lvl, horizon,
    rb, rb32,
):
    """One Independent Cascade run; ``queue[:lvl[r]]`` are the nodes active after round r."""
    tail = 0
    for s in seeds:
        if stamp[s] != mark:
            stamp[s] = mark
            queue[tail] = s
            tail += 1
    lvl[0] = tail
    nlev = 1
    start = 0
    while horizon < 0 or nlev <= horizon:
        end = tail
        for h in range(start, end):
            # Look ahead in the queue: the row offsets of the node _PD places on, and
            # the first arcs of the node _PD / 2 places on (whose offsets have arrived).
            if h + _PD < tail:
                prefetch(g_indptr, queue[h + _PD])
            if h + _PD // 2 < tail:
                o = g_indptr[queue[h + _PD // 2]]
                prefetch(g_indices, o)
                prefetch(thr, o)
            v = queue[h]
            e = g_indptr[v]
            e1 = g_indptr[v + 1]
            c = skip[v] if use_skip else 0.0
            if c != 0.0:
                while True:
                    state += GAMMA
                    u = (np.float64(mix64(state) >> S11) + 1.0) * TWO_M53
                    gap = math.log(u) * c
                    if gap >= np.float64(e1 - e):
                        break
                    e += np.int64(gap)
                    w = g_indices[e]
                    if stamp[w] != mark:
                        stamp[w] = mark
                        queue[tail] = w
                        tail += 1
                    e += 1
                continue
            # Long rows: draw j of the row (state + (j + 1) * gamma, the same as in the
            # pairwise loop below) computed independently so the loop vectorises, then
            # the live targets compacted into rb32 (written behind the read position).
            d = e1 - e
            if d >= _VEC_MIN_DEGREE:
                npairs = d >> 1
                for j in range(npairs):
                    z = state + np.uint64(j + 1) * GAMMA
                    z = (z ^ (z >> S30)) * M1
                    z = (z ^ (z >> S27)) * M2
                    rb[j] = z ^ (z >> S31)
                state += np.uint64(npairs) * GAMMA
                cnt = np.int64(0)
                for j in range(2 * npairs):
                    ok = np.int64(rb32[j] <= thr[e + j])
                    rb32[cnt] = g_indices[e + j]
                    cnt += ok
                for t in range(cnt):
                    w = rb32[t]
                    if stamp[w] != mark:
                        stamp[w] = mark
                        queue[tail] = w
                        tail += 1
                e += 2 * npairs
            while e + 1 < e1:
                state += GAMMA
                r = mix64(state)
                if np.uint32(r & LO32) <= thr[e]:
                    w = g_indices[e]
                    if stamp[w] != mark:
                        stamp[w] = mark
                        queue[tail] = w
                        tail += 1
                if np.uint32(r >> S32) <= thr[e + 1]:
                    w = g_indices[e + 1]
                    if stamp[w] != mark:
                        stamp[w] = mark
                        queue[tail] = w
                        tail += 1
                e += 2
            if e < e1:
                state += GAMMA
                if np.uint32(mix64(state) >> S32) <= thr[e]:
                    w = g_indices[e]
                    if stamp[w] != mark:
                        stamp[w] = mark
                        queue[tail] = w
                        tail += 1
        if tail == end:
            break
        if nlev == lvl.size:
            lvl = _grow(lvl, nlev + 1)
        lvl[nlev] = tail
        nlev += 1
        start = end
    return tail, nlev, lvl


@njit(cache=True, nogil=True)
def _lt_cascade(  # type: ignore[no-untyped-def]
    g_indptr, g_indices, weight, seeds, state, mark, stamp, tstamp, acc, theta, queue, lvl, horizon
):
    """One Linear Threshold run; thresholds are drawn in (0, 1] when a node is first reached."""
    tail = 0
    for s in seeds:
        if stamp[s] != mark:
            stamp[s] = mark
            queue[tail] = s
            tail += 1
    lvl[0] = tail
    nlev = 1
    start = 0
    while horizon < 0 or nlev <= horizon:
        end = tail
        for h in range(start, end):
            v = queue[h]
            for e in range(g_indptr[v], g_indptr[v + 1]):
                w = g_indices[e]
                if stamp[w] == mark:
                    continue
                if tstamp[w] != mark:
                    tstamp[w] = mark
                    state += GAMMA
                    theta[w] = (np.float64(mix64(state) >> S11) + 1.0) * TWO_M53
                    acc[w] = 0.0
                acc[w] += weight[e]
                if acc[w] >= theta[w]:
                    stamp[w] = mark
                    queue[tail] = w
                    tail += 1
        if tail == end:
            break
        if nlev == lvl.size:
            lvl = _grow(lvl, nlev + 1)
        lvl[nlev] = tail
        nlev += 1
        start = end
    return tail, nlev, lvl


@njit(cache=True, nogil=True)
def _chunk(  # type: ignore[no-untyped-def]
    lt, g_indptr, g_indices, thr, weight, skip, use_skip, seeds, key, run0, nruns, horizon,
    node_w, track,
):
    n = g_indptr.size - 1
    stamp = np.zeros(n, np.int32)
    queue = np.empty(max(n, 1), np.int32)
    m_lt = n if lt else 1
    tstamp = np.zeros(m_lt, np.int32)
    acc = np.zeros(m_lt, np.float64)
    theta = np.zeros(m_lt, np.float64)
    lvl = np.zeros(16, np.int64)
    rb = np.zeros(_max_degree(g_indptr) // 2 + 1, np.uint64)
    rb32 = rb.view(np.uint32)
    reach = np.zeros(nruns, np.int64)
    weighted = np.zeros(nruns, np.float64)
    depth = np.zeros(nruns, np.int32)
    count = np.zeros(n if track else 0, np.int64)
    size = 2
    new = np.zeros(size, np.int64)
    sq_hi = np.zeros(size, np.int64)
    sq_lo = np.zeros(size, np.int64)
    tail_hi = np.zeros(size + 1, np.int64)
    tail_lo = np.zeros(size + 1, np.int64)
    use_w = node_w.size > 0
    used = 0
    for i in range(nruns):
        state = _run_state(key, run0 + i)
        mark = np.int32(i + 1)
        if lt:
            tail, nlev, lvl = _lt_cascade(
                g_indptr, g_indices, weight, seeds, state, mark, stamp, tstamp, acc, theta, queue,
                lvl, horizon,
            )
        else:
            tail, nlev, lvl = _ic_cascade(
                g_indptr, g_indices, thr, skip, use_skip, seeds, state, mark, stamp, queue, lvl,
                horizon, rb, rb32,
            )
        if nlev > size:
            size = max(nlev, 2 * size)
            new = _grow(new, size)
            sq_hi = _grow(sq_hi, size)
            sq_lo = _grow(sq_lo, size)
            tail_hi = _grow(tail_hi, size + 1)
            tail_lo = _grow(tail_lo, size + 1)
        used = max(used, nlev)
        reach[i] = tail
        depth[i] = nlev - 1
        prev = 0
        for r in range(nlev):
            cum = lvl[r]
            new[r] += cum - prev
            prev = cum
            sq = cum * cum
            sq_hi[r] += sq >> 32
            sq_lo[r] += sq & 0xFFFFFFFF
        sq = np.int64(tail) * tail
        tail_hi[nlev] += sq >> 32
        tail_lo[nlev] += sq & 0xFFFFFFFF
        if track:
            for h in range(tail):
                count[queue[h]] += 1
        if use_w:
            total = 0.0
            for h in range(tail):
                total += node_w[queue[h]]
            weighted[i] = total
        else:
            weighted[i] = tail
    return (
        reach, weighted, depth, count, new[:used], sq_hi[:used], sq_lo[:used],
        tail_hi[: used + 1], tail_lo[: used + 1],
    )


@njit(cache=True, nogil=True)
def _one(  # type: ignore[no-untyped-def]
    lt, g_indptr, g_indices, thr, weight, skip, use_skip, seeds, key, horizon
):
    n = g_indptr.size - 1
    stamp = np.zeros(n, np.int32)
    queue = np.empty(max(n, 1), np.int32)
    m_lt = n if lt else 1
    tstamp = np.zeros(m_lt, np.int32)
    acc = np.zeros(m_lt, np.float64)
    theta = np.zeros(m_lt, np.float64)
    lvl = np.zeros(16, np.int64)
    rb = np.zeros(_max_degree(g_indptr) // 2 + 1, np.uint64)
    rb32 = rb.view(np.uint32)
    state = _run_state(key, 0)
    if lt:
        tail, nlev, lvl = _lt_cascade(
            g_indptr, g_indices, weight, seeds, state, np.int32(1), stamp, tstamp, acc, theta,
            queue, lvl, horizon,
        )
    else:
        tail, nlev, lvl = _ic_cascade(
            g_indptr, g_indices, thr, skip, use_skip, seeds, state, np.int32(1), stamp, queue, lvl,
            horizon, rb, rb32,
        )
    rounds = np.full(n, -1, np.int32)
    start = 0
    for r in range(nlev):
        for h in range(start, lvl[r]):
            rounds[queue[h]] = r
        start = lvl[r]
    return rounds


@njit(cache=True, nogil=True)
def _mean_var(x):  # type: ignore[no-untyped-def]
    n = x.size
    mean = 0.0
    for v in x:
        mean += v
    mean /= n
    ss = 0.0
    for v in x:
        ss += (v - mean) * (v - mean)
    return mean, ss / (n - 1) if n > 1 else np.nan


def mean_var(x: NDArray[np.float64]) -> tuple[float, float]:
    """Mean and sample variance (ddof = 1; NaN for one value), summed in run order."""
    mean, var = _mean_var(np.ascontiguousarray(x, dtype=np.float64))
    return float(mean), float(var)


def run_chunk(
    kg: KernelGraph,
    seeds: NDArray[np.int32],
    key: int,
    run0: int,
    nruns: int,
    horizon: int,
    node_weights: NDArray[np.float64],
    *,
    track_nodes: bool = True,
) -> ChunkResult:
    """Runs ``run0 .. run0 + nruns - 1`` of stream ``key`` (``horizon`` -1 = none).

    ``node_weights`` of length 0 means "count people"; ``track_nodes=False``
    leaves ``count`` empty (saves one memory access per activation). Releases
    the GIL, so callers may run chunks in threads.
    """
    if kg.renumbered:
        seeds = kg.rank[seeds]
        if node_weights.shape[0]:
            node_weights = node_weights[kg.order]
    out = _chunk(
        kg.lt, kg.indptr, kg.indices, kg.thr, kg.weight, kg.skip, kg.use_skip, seeds,
        np.uint64(key), np.int64(run0), np.int64(nruns), np.int64(horizon), node_weights,
        track_nodes,
    )
    res = ChunkResult(*out)
    if kg.renumbered and track_nodes:
        res = res._replace(count=res.count[kg.rank])
    return res


def run_one(kg: KernelGraph, seeds: NDArray[np.int32], key: int, horizon: int) -> NDArray[np.int32]:
    """Run 0 of stream ``key``: the activation round of every node, -1 if never."""
    if kg.renumbered:
        seeds = kg.rank[seeds]
    rounds = _one(
        kg.lt, kg.indptr, kg.indices, kg.thr, kg.weight, kg.skip, kg.use_skip, seeds,
        np.uint64(key), np.int64(horizon),
    )
    return rounds[kg.rank] if kg.renumbered else rounds  # type: ignore[no-any-return]


# ------------------------------------------------------------ Python drivers

_PILOT_RUNS = 16
_PARALLEL_MIN_SECONDS = 0.003
# Batches of at least this many pilots' worth of runs per thread are split without a
# pilot: the serial pilot would hold up the other threads for 1/_PILOT_SHARE of the work.
_PILOT_SHARE = 16


def simulate(
    kg: KernelGraph,
    seeds: NDArray[np.int32],
    key: int,
    run0: int,
    nruns: int,
    horizon: int,
    weights: NDArray[np.float64],
    *,
    track_nodes: bool = True,
    threads: int | None = None,
) -> ChunkResult:
    """Runs ``run0 .. run0 + nruns - 1`` of stream ``key``, merged (see :func:`split_runs`)."""
    return split_runs(run_chunk, kg, seeds, key, run0, nruns, horizon, weights,
                      track_nodes=track_nodes, threads=threads)


def split_runs(
    chunk: Callable[..., ChunkResult],
    kg: KernelGraph,
    seeds: NDArray[np.int32],
    key: int,
    run0: int,
    nruns: int,
    horizon: int,
    weights: NDArray[np.float64],
    *,
    track_nodes: bool = True,
    threads: int | None = None,
) -> ChunkResult:
    """Runs ``run0 .. run0 + nruns - 1`` of ``chunk`` (a ``run_chunk``), merged.

    A small batch first runs a serial pilot of a few runs to measure the cost (a
    large one is split at once); when the rest would take more than a few
    milliseconds it is split into one contiguous range per
    thread (``threads``, default :func:`.._chunks.thread_count`), run at once
    (the kernels release the GIL). The merged result is identical
    whatever the split, because each run's numbers depend only on its index
    and all accumulators are integers. The world kernels use the same split.
    """
    nthreads = thread_count(threads)
    if nthreads == 1 or nruns >= _PILOT_RUNS * _PILOT_SHARE * nthreads:
        pilot, parts, elapsed = 0, [], math.inf  # a large batch: split it all at once
    else:
        pilot = min(nruns, _PILOT_RUNS)
        t0 = time.perf_counter()
        parts = [chunk(kg, seeds, key, run0, pilot, horizon, weights, track_nodes=track_nodes)]
        elapsed = time.perf_counter() - t0
    rest = nruns - pilot
    if rest:
        if elapsed / max(pilot, 1) * rest < _PARALLEL_MIN_SECONDS:
            nthreads = 1
        jobs = split_range(run0 + pilot, rest, nthreads)
        parts.extend(map_ordered(
            lambda a, c: chunk(kg, seeds, key, a, c, horizon, weights, track_nodes=track_nodes),
            jobs))
    return merge(parts)


def merge(parts: Sequence[ChunkResult]) -> ChunkResult:
    """Concatenate per-run arrays and add up the accumulators of consecutive chunks."""
    if len(parts) == 1:
        return parts[0]

    def add(name: str) -> NDArray[np.int64]:
        arrays = [getattr(p, name) for p in parts]
        out = np.zeros(max(a.shape[0] for a in arrays), dtype=np.int64)
        for a in arrays:
            out[: a.shape[0]] += a
        return out

    return ChunkResult(
        np.concatenate([p.reach for p in parts]),
        np.concatenate([p.weighted for p in parts]),
        np.concatenate([p.depth for p in parts]),
        add("count"), add("new"), add("sq_hi"), add("sq_lo"), add("tail_hi"), add("tail_lo"),
    )
