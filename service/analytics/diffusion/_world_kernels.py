"""Forward simulation on common live-edge worlds: the same world for every seed set.

Private to :mod:`service.analytics`; :mod:`service.analytics.diffusion.forecasts` and
:mod:`service.analytics.diffusion.paired` run on it. The loops are those of
:mod:`._kernels` (same prepared graph, same results per run, same accumulators),
with one difference in where the random numbers come from.

In :mod:`._kernels` a run draws its coins in the order the cascade meets the
arcs, so two seed sets simulated as run ``i`` of one stream see different
coins for the same arc: their runs are independent, not paired. Here every
random number is keyed on what it decides, not on when it is drawn:

- Independent Cascade: node ``v``'s out-arcs in run ``i`` take their coins from
  the run's SplitMix64 sequence (start ``run_state(key, i)``, as in
  :mod:`._kernels`) at positions ``(v + 1) * 2**32 + 1, + 2, ...``, in row order
  (pairs of 32-bit coins, geometric gaps on uniform rows, exactly as in
  :mod:`._kernels`): a block of its own for every node. A node
  is expanded at most once per run, so whether arc ``(v, w)`` is live in run
  ``i`` depends on ``(key, i, v)`` only: run ``i`` is one live-edge world, the
  same whichever seeds start the cascade (Kempe, Kleinberg, Tardos 2003, the
  live-edge view of IC).
- Linear Threshold: node ``w``'s threshold in run ``i`` is the first number of
  its block, the same for every seed set; with fixed
  thresholds the process is deterministic.

So two seed sets evaluated on runs ``0..R-1`` of one key differ only because
their seeds differ (common random numbers), a set that contains another
reaches at least as many in every run (both models are monotone in a fixed
world), and a set gives the same result whatever other sets are evaluated.

Node numbers are those of the prepared graph (:mod:`._kernel_graph`), which is
a fixed function of the graph, so the worlds are reproducible from the key.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit
from numpy.typing import NDArray

from ._kernel_graph import KernelGraph
from ._kernels import ChunkResult, _grow, _max_degree, _run_state, split_runs
from .._rng import GAMMA, LO32, M1, M2, S11, S27, S30, S31, S32, TWO_M53, mix64, prefetch

__all__ = ["run_chunk", "simulate"]

_VEC_MIN_DEGREE = 32  # as in _kernels
_PD = 8


# Node v's numbers in a run are positions (v + 1) * 2**32 + j of the run's SplitMix64
# sequence: disjoint blocks for every node (a row has fewer than 2**32 arcs), found by one
# multiplication, so keying costs no extra hashing.
_STRIDE = np.uint64((0x9E3779B97F4A7C15 << 32) & 0xFFFFFFFFFFFFFFFF)


@njit(cache=True, nogil=True, inline="always")
def _node_state(rs: np.uint64, v: int) -> np.uint64:
    return rs + np.uint64(v + 1) * _STRIDE


@njit(cache=True, nogil=True)
def _ic_world(  # type: ignore[no-untyped-def]
    g_indptr, g_indices, thr, skip, use_skip, seeds, rs, mark, stamp, queue, lvl, horizon,
    rb, rb32,
):
    """One Independent Cascade run in world ``rs``; ``queue[:lvl[r]]`` active after round r."""
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
            if h + _PD < tail:
                prefetch(g_indptr, queue[h + _PD])
            if h + _PD // 2 < tail:
                o = g_indptr[queue[h + _PD // 2]]
                prefetch(g_indices, o)
                prefetch(thr, o)
            v = queue[h]
            state = _node_state(rs, v)  # the coins of v's out-arcs: keyed on (world, v)
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
def _lt_world(  # type: ignore[no-untyped-def]
    g_indptr, g_indices, weight, seeds, rs, mark, stamp, tstamp, acc, theta, queue, lvl, horizon
):
    """One Linear Threshold run in world ``rs``: node w's threshold keyed on (world, w)."""
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
                    z = mix64(_node_state(rs, w) + GAMMA)
                    theta[w] = (np.float64(z >> S11) + 1.0) * TWO_M53
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
    """Runs ``run0 .. run0 + nruns - 1``; the same accumulators as ``_kernels._chunk``."""
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
        rs = _run_state(key, run0 + i)
        mark = np.int32(i + 1)
        if lt:
            tail, nlev, lvl = _lt_world(
                g_indptr, g_indices, weight, seeds, rs, mark, stamp, tstamp, acc, theta, queue,
                lvl, horizon,
            )
        else:
            tail, nlev, lvl = _ic_world(
                g_indptr, g_indices, thr, skip, use_skip, seeds, rs, mark, stamp, queue, lvl,
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
    """Worlds ``run0 .. run0 + nruns - 1`` of key ``key``; as :func:`._kernels.run_chunk`."""
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
    """Worlds ``run0 .. run0 + nruns - 1`` of ``key``, merged; split over threads as
    :func:`._kernels.simulate` does (the result does not depend on the split)."""
    return split_runs(run_chunk, kg, seeds, key, run0, nruns, horizon, weights,
                      track_nodes=track_nodes, threads=threads)
