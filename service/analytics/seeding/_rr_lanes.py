"""Independent Cascade RR-set sampling with several sets in flight ("lanes").

Private to ``service.analytics``; :class:`~service.analytics.seeding._rr.RRCollection`
calls :func:`sample_ic_lanes` instead of :func:`._rr_kernels.sample_ic` when the
graph is too large for the core's cache.

Why. One RR set is a reverse breadth-first search whose every step is a chain
of dependent memory reads (the node's row, its in-arcs, their visit marks, the
next node's row). On a graph larger than the cache each read waits for memory,
and a single search leaves the core idle most of the time. Here ``LANES``
independent sets are searched in turn, one node per turn, and every read a lane
will need on its next turn is requested ahead with a software prefetch, so the
waits of different lanes overlap (memory-level parallelism).

One turn of a lane: (1) push the in-neighbours of the arcs its previous turn
found live (their rows were prefetched then), prefetching each pushed node's
row; (2) pop one node pushed before this turn, decide which of its in-arcs are
live (geometric skipping, coins or all) and prefetch those arcs' sources. A
lane whose queue and pending arcs are exhausted stores its set and starts the
next one. (Lane queues have room for n nodes each, so a queue never moves: growing
one inside the loop cost 7 to 23% in reference counting, measured on com-DBLP and
ca-GrQc.)

Same sets, bit for bit. Each lane draws from the set's own stream and visits
nodes in the same breadth-first order as :func:`sample_ic`, so set ``j`` has
the same nodes in the same order; sets finish out of order and are put back in
index order before the call returns. Visit marks are one bit per lane in a
``uint16`` per node, cleared from the lane's queue when its set is stored, so the
mark array is all zero between calls.

Node records. Row ``v`` is described by ``rec[2v]`` (first in-arc) and
``rec[2v + 2]`` (one past its last), and ``recf[2v + 1]`` (the same memory seen as
float64) encodes the row's mode: ``1 / log(1 - p) < 0`` for geometric skipping,
``8 + t`` for a block row with 32-bit coin threshold ``t``, ``0`` when every
in-arc is live, ``1`` for per-arc coins, ``2`` when none can be live. One prefetch
brings a node's whole description.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from numba import njit
from numpy.typing import NDArray

from . import _rr_kernels as K
from .._rng import GAMMA, S11, ctz, mix64, prefetch, unit_open0

__all__ = ["LANES", "lane_records", "sample_ic_lanes", "sample_lt_lanes"]

# 8 lanes: measured on soc-Slashdot0902 and com-DBLP (weighted cascade) against 4, 16
# and 32: 16 was no faster and 32 slower (more queues compete for the L1 cache).
LANES = 8
_REC_ALL, _REC_COIN, _REC_NONE, _REC_BLOCK = 0.0, 1.0, 2.0, 8.0


def lane_records(
    indptr: NDArray[np.int64], mode: NDArray[np.int8], param: NDArray[np.float64]
) -> tuple[NDArray[np.int64], NDArray[np.float64]]:
    """The packed node records (int64 view, float64 view of the same buffer) for
    the IC modes of :func:`._rr_kernels.prepare_ic`."""
    n = indptr.shape[0] - 1
    rec = np.zeros(2 * (n + 1), dtype=np.int64)
    recf = rec.view(np.float64)
    rec[0::2] = indptr
    code = np.full(n, _REC_NONE)
    code[mode == K.IC_ALL] = _REC_ALL
    code[mode == K.IC_COIN] = _REC_COIN
    skip = mode == K.IC_SKIP
    code[skip] = param[skip]
    block = mode == K.IC_BLOCK
    code[block] = _REC_BLOCK + param[block]  # the 32-bit coin threshold
    recf[1:-1:2] = code
    return rec, recf


@njit(inline="always")
def _store(
    queues: Any, qb: Any, t: Any, vis: Any, bit: Any, set_of: Any, j: Any, out_nodes: Any,
    pos: Any, n: Any, drop_from: Any, starts: Any, lens: Any,
) -> Any:  # pragma: no cover - compiled
    """Clear the lane's marks and store its finished set ``j`` (``t`` nodes from
    ``queues[qb:]``) at ``pos``, or drop it. A set finishing before a lower one is
    stored only if room for a whole set (n slots) remains after it, so the lowest
    unfinished set always fits and every call stores at least one. Returns (new
    pos, drop_from): the lowest set dropped so far, ``len(starts)`` if none."""
    for i in range(t):
        vis[queues[qb + i]] &= ~bit
    lowest = j
    for x in range(LANES):
        if set_of[x] >= 0 and set_of[x] < lowest:
            lowest = set_of[x]
    room = out_nodes.shape[0] - pos
    if j < drop_from and (room - t >= n or (j == lowest and room >= t)):
        starts[j] = pos
        lens[j] = t
        for i in range(t):
            out_nodes[pos + i] = queues[qb + i]
        return pos + t, drop_from
    return pos, min(drop_from, j)


@njit(inline="always")
def _in_set_order(
    out_nodes: Any, pos0: Any, pos: Any, starts: Any, lens: Any, started: Any, out_ends: Any,
) -> Any:  # pragma: no cover - compiled
    """Move the stored sets, written in the order they finished, back into set order;
    keep only the unbroken run ``0 .. done-1``. Returns (done, new pos)."""
    done = 0
    while done < started and lens[done] >= 0:
        done += 1
    tmp = out_nodes[pos0:pos].copy()
    p = pos0
    for j in range(done):
        s0 = starts[j] - pos0
        for i in range(lens[j]):
            out_nodes[p + i] = tmp[s0 + i]
        p += lens[j]
        out_ends[j] = p
    return done, p


@njit(cache=True, nogil=True)
def sample_ic_lanes(
    rec: Any, recf: Any, indices: Any, thr: Any, accept: Any, alias: Any, key: Any, first: Any,
    count: Any, horizon: Any, out_nodes: Any, pos: Any, out_ends: Any, vis: Any, queues: Any,
    pend: Any,
) -> Any:  # pragma: no cover - compiled
    """Sample IC RR sets ``first .. first+count-1`` into the flat buffers, as
    :func:`._rr_kernels.sample_ic` does (same sets, same buffers and order).

    ``vis`` is a zeroed ``uint16`` array of length n (left zeroed);
    ``queues`` an int32 scratch of ``LANES * n`` entries (lane i queues its set
    in ``queues[i*n : (i+1)*n]``; allocate it with ``np.empty``, whose pages the
    system provides only as they are first written, so the memory used follows
    the largest sets, not n); ``pend`` an int64 scratch of
    ``LANES * (max in-degree + 1)`` entries. No set is started when
    fewer than n slots remain in ``out_nodes``, and a set finishing before a
    lower-numbered one is stored only if room for a whole set (n slots) remains
    after it, so set ``first`` is always stored; a set that cannot be stored is
    dropped with every later one, so the sets stored are always
    ``first .. first+done-1``. Returns (done, new pos, in-arcs examined for the sets
    stored: the same count as :func:`._rr_kernels.sample_ic`, whatever was dropped).
    """
    n = rec.shape[0] // 2 - 1
    cap = out_nodes.shape[0]
    if queues.shape[0] < LANES * n:
        raise ValueError("queues needs LANES * n entries")
    qcap = n
    pcap = pend.shape[0] // LANES
    head = np.zeros(LANES, np.int64)
    tail = np.zeros(LANES, np.int64)
    level_end = np.zeros(LANES, np.int64)
    depth = np.zeros(LANES, np.int64)
    npend = np.zeros(LANES, np.int64)
    set_of = np.full(LANES, -1, np.int64)
    state = np.zeros(LANES, np.uint64)
    starts = np.empty(count, np.int64)
    lens = np.full(count, -1, np.int64)
    exs = np.zeros(count, np.int64)  # in-arcs examined per set: dropped sets do not count
    lane_ex = np.zeros(LANES, np.int64)
    pos0 = pos
    started = 0
    finished = 0
    full = False
    drop_from = count
    while finished < started or (started < count and not full):
        for ln in range(LANES):
            bit = np.uint16(1 << ln)
            qb = ln * qcap
            pb = ln * pcap
            t = tail[ln]
            t_before = t
            k = npend[ln]
            if k > 0:  # (1) push the sources of last turn's live arcs
                for i in range(k):
                    u = indices[pend[pb + i]]
                    if vis[u] & bit == 0:
                        vis[u] |= bit
                        queues[qb + t] = u
                        t += 1
                        prefetch(rec, 2 * u)
                tail[ln] = t
                npend[ln] = 0
            h = head[ln]
            if h < t_before:  # (2) expand one node pushed before this turn
                m = 0
                s = state[ln]
                while m == 0 and h < t_before:
                    if horizon >= 0:
                        if h == level_end[ln]:
                            depth[ln] += 1
                            level_end[ln] = t
                        if depth[ln] >= horizon:
                            h = t
                            break
                    v = queues[qb + h]
                    h += 1
                    a = rec[2 * v]
                    b = rec[2 * v + 2]
                    d = b - a
                    lane_ex[ln] += d
                    c = recf[2 * v + 1]
                    if c >= _REC_BLOCK:
                        s, live = K.block_coins(s, np.uint32(c - _REC_BLOCK), d)
                        while live != 0:
                            pend[pb + m] = a + ctz(live)
                            live &= live - 1
                            m += 1
                        prefetch(indices, a)
                    elif c < 0.0:
                        at = np.int64(-1)  # the last live arc's offset in the row
                        while True:
                            s += GAMMA
                            g = math.log(unit_open0(mix64(s))) * c
                            if g >= d - 1 - at:
                                break
                            at += 1 + np.int64(g)
                            pend[pb + m] = a + at
                            m += 1
                            prefetch(indices, a + at)
                    elif c == _REC_COIN:
                        for e in range(a, b):
                            s += GAMMA
                            if np.int64(mix64(s) >> S11) < thr[e]:
                                pend[pb + m] = e
                                m += 1
                        prefetch(indices, a)
                    elif c == _REC_ALL:
                        for e in range(a, b):
                            pend[pb + m] = e
                            m += 1
                        prefetch(indices, a)
                state[ln] = s
                head[ln] = h
                npend[ln] = m
            elif k == 0 and h >= t:  # store the finished set, start the next
                j = set_of[ln]
                if j >= 0:
                    exs[j] = lane_ex[ln]
                    pos, drop_from = _store(queues, qb, t, vis, bit, set_of, j, out_nodes, pos,
                                            n, drop_from, starts, lens)
                    full = full or drop_from < count
                    set_of[ln] = -1
                    finished += 1
                if started < count and not full:
                    if cap - pos < n:
                        full = True
                        continue
                    j = started
                    started += 1
                    s, r = K._root(K._set_state(key, first + j), n, accept, alias)
                    state[ln] = s
                    set_of[ln] = j
                    lane_ex[ln] = 0
                    queues[qb] = r
                    vis[r] |= bit
                    head[ln] = 0
                    tail[ln] = 1
                    level_end[ln] = 1
                    depth[ln] = 0
                    prefetch(rec, 2 * r)
    done, p = _in_set_order(out_nodes, pos0, pos, starts, lens, started, out_ends)
    return done, p, exs[:done].sum()


@njit(cache=True, nogil=True)
def sample_lt_lanes(
    indptr: Any, indices: Any, mode: Any, w: Any, cum: Any, accept: Any, alias: Any, key: Any,
    first: Any, count: Any, horizon: Any, out_nodes: Any, pos: Any, out_ends: Any, vis: Any,
    queues: Any,
) -> Any:  # pragma: no cover - compiled
    """Sample LT RR sets ``first .. first+count-1`` as :func:`._rr_kernels.sample_lt`
    does (same sets, same order), with ``LANES`` reverse random walks in flight.

    A walk step takes two turns of its lane: (1) pick the in-arc the current
    node keeps (:func:`._rr_kernels._lt_pick`, the same draws) and prefetch its
    source; (2) read the source, stop if the set already holds it, else add it
    and prefetch its row. ``vis`` and ``queues`` are as for
    :func:`sample_ic_lanes`, and so are the storing rules and return values.
    """
    n = indptr.shape[0] - 1
    cap = out_nodes.shape[0]
    if queues.shape[0] < LANES * n:
        raise ValueError("queues needs LANES * n entries")
    tail = np.zeros(LANES, np.int64)
    steps = np.zeros(LANES, np.int64)
    arc = np.full(LANES, -1, np.int64)
    cur = np.zeros(LANES, np.int64)
    ended = np.zeros(LANES, np.bool_)
    set_of = np.full(LANES, -1, np.int64)
    state = np.zeros(LANES, np.uint64)
    starts = np.empty(count, np.int64)
    lens = np.full(count, -1, np.int64)
    exs = np.zeros(count, np.int64)  # in-arcs examined per set: dropped sets do not count
    lane_ex = np.zeros(LANES, np.int64)
    pos0 = pos
    started = 0
    finished = 0
    full = False
    drop_from = count
    while finished < started or (started < count and not full):
        for ln in range(LANES):
            bit = np.uint16(1 << ln)
            qb = ln * n
            if set_of[ln] >= 0 and not ended[ln]:
                if arc[ln] >= 0:  # (2) take the kept arc's source
                    u = indices[arc[ln]]
                    arc[ln] = -1
                    if vis[u] & bit != 0:
                        ended[ln] = True
                    else:
                        vis[u] |= bit
                        queues[qb + tail[ln]] = u
                        tail[ln] += 1
                        cur[ln] = u
                        steps[ln] += 1
                        prefetch(indptr, u)
                        prefetch(w, u)
                        if horizon >= 0 and steps[ln] >= horizon:
                            ended[ln] = True
                else:  # (1) the arc the current node keeps, if any
                    v = cur[ln]
                    lane_ex[ln] += indptr[v + 1] - indptr[v]
                    s, e = K._lt_pick(state[ln], v, indptr, mode, w, cum)
                    state[ln] = s
                    if e < 0:
                        ended[ln] = True
                    else:
                        arc[ln] = e
                        prefetch(indices, e)
                continue
            j = set_of[ln]
            if j >= 0:  # store the finished set
                exs[j] = lane_ex[ln]
                pos, drop_from = _store(queues, qb, tail[ln], vis, bit, set_of, j, out_nodes,
                                        pos, n, drop_from, starts, lens)
                full = full or drop_from < count
                set_of[ln] = -1
                finished += 1
            if started < count and not full:
                if cap - pos < n:
                    full = True
                    continue
                j = started
                started += 1
                s, r = K._root(K._set_state(key, first + j), n, accept, alias)
                state[ln] = s
                set_of[ln] = j
                lane_ex[ln] = 0
                queues[qb] = r
                vis[r] |= bit
                tail[ln] = 1
                steps[ln] = 0
                arc[ln] = -1
                cur[ln] = r
                ended[ln] = horizon == 0
                prefetch(indptr, r)
                prefetch(w, r)
    done, p = _in_set_order(out_nodes, pos0, pos, starts, lens, started, out_ends)
    return done, p, exs[:done].sum()
