"""RR sampling over threads: per-thread buffers, pieces of index ranges taken by the threads
in turn, pieces merged in index order.

Private to :mod:`service.analytics.seeding._rr`, whose :class:`~._rr.RRCollection` calls
these. A batch of sets ``count .. count+want-1`` is cut into contiguous index ranges, a few
per thread (:func:`.._chunks.split_range`), which the threads take in turn
(:func:`.._chunks.map_shared`); every thread samples its pieces into buffers of its own (:class:`Scratch`:
visit marks, lane marks and queues, a store for that batch only) and the pieces are
appended to the collection's store in index order. Set ``j`` depends only
on ``(key, j)``, so the store is bit-identical whatever the thread count, and the extra
memory is one batch of sets per thread (its share of about a quarter second of work), never
a second copy of the store. The sampler keeps the buffers, so the next collection reuses
their pages: first writes to fresh pages cost far more than the sampling on some machines.

The inverted index (node -> sets) is built over one range per thread (:func:`index_parallel`): thread
``t`` counts, then fills, the members of its range of sets into its own slots of every row,
which start after those of the threads before it, so every row lists its sets in ascending
order, as one thread would.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import TYPE_CHECKING, Any

import numpy as np
from numpy.typing import NDArray

from . import _rr_kernels as K
from . import _rr_lanes
from .._chunks import map_ordered, map_shared, split_range

if TYPE_CHECKING:
    from ._rr import RRSampler

__all__ = [
    "PARALLEL_MIN_SETS",
    "PIECES_PER_THREAD",
    "MARK32_LIMIT",
    "Scratch",
    "marks",
    "grow",
    "parts_for",
    "take_scratch",
    "call_kernel",
    "sample_parts",
    "index_parallel",
]

# Batches smaller than this many sets per thread run in one thread: splitting costs
# a few buffers per thread and a copy, which pays only once each part has some work.
PARALLEL_MIN_SETS = 64

# A batch is cut into up to this many pieces per thread, taken in turn, so a thread
# whose sets were larger, or whose core ran slower, holds the others up by one piece at
# most. Measured on com-DBLP at 2 threads, one piece per thread: the two halves of a
# batch took 210 and 255 ms, 124 and 159 ms, and the faster thread waited.
PIECES_PER_THREAD = 8

# Visit marks are set numbers + 1. int32 marks halve the mark array (on com-DBLP it
# then fits in a core's L2 cache: about 15% faster sampling, measured); a collection
# or count that would pass this bound switches to int64 marks.
MARK32_LIMIT = 2**31 - 2

Kernel = Callable[..., tuple[int, int, int]]


def marks(n: int, last: int) -> NDArray[np.int32] | NDArray[np.int64]:
    """A zeroed mark array able to hold marks up to ``last + 1``."""
    if last < MARK32_LIMIT:
        return np.zeros(n, dtype=np.int32)
    return np.zeros(n, dtype=np.int64)


def grow(a: NDArray, need: int) -> NDArray:  # type: ignore[type-arg]
    """A copy of ``a`` with room for at least ``need`` entries (and 1.6 times as many)."""
    out = np.empty(max(need, int(a.shape[0] * 1.6)), dtype=a.dtype)
    out[: a.shape[0]] = a
    return out


def parts_for(threads: int, count: int) -> int:
    """How many threads a batch of ``count`` sets is split over."""
    return max(1, min(threads, count // PARALLEL_MIN_SETS))


class Scratch:
    """One thread's sampling buffers: visit marks (or lane marks and queues) and a
    store for one batch of sets; ``owner`` is the collection whose marks they hold."""

    def __init__(self, smp: RRSampler) -> None:
        n = smp.n
        self.owner: object = None
        self.fill = 0  # entries of the current batch in ``nodes``
        self.stamp: NDArray[np.int32] | NDArray[np.int64] = marks(n, 0)
        self.nodes = np.empty(1 << 12, dtype=np.int32)
        if smp.lanes_ok:
            self.vis = np.zeros(n, dtype=np.uint16)
            # Pages are only committed as lanes write to them (see sample_ic_lanes).
            self.queues = np.empty(_rr_lanes.LANES * max(n, 1), dtype=np.int32)
            if smp.model == "ic":
                self.pend = np.empty(smp.pend_size, dtype=np.int64)


def take_scratch(smp: RRSampler, owner: object, i: int, last: int) -> Scratch:
    """Thread ``i``'s buffers of ``smp`` for ``owner`` (a collection), able to mark sets up
    to ``last``; marks left by another collection are cleared."""
    while len(smp.scratch) <= i:
        smp.scratch.append(Scratch(smp))
    sc = smp.scratch[i]
    if sc.stamp.dtype == np.int32 and last >= MARK32_LIMIT:
        sc.stamp = np.zeros(smp.n, dtype=np.int64)
    elif sc.owner is not owner:
        sc.stamp.fill(0)
    sc.owner = owner
    return sc


def call_kernel(fn: Kernel, smp: RRSampler, sc: Scratch, key: np.uint64, first: int, count: int,
                out_nodes: NDArray[np.int32], pos: int,
                out_ends: NDArray[np.int64]) -> tuple[int, int, int]:
    """One kernel call: sets ``first .. first+count-1`` written from ``out_nodes[pos]``,
    with lanes when the sampler uses them. Returns (sets done, new pos, in-arcs examined)."""
    if smp.lanes and smp.model == "ic":
        done, pos, examined = _rr_lanes.sample_ic_lanes(
            smp.rec, smp.recf, smp.indices, smp.arc, smp.accept, smp.alias, key,
            first, count, smp.horizon, out_nodes, pos, out_ends, sc.vis, sc.queues, sc.pend,
        )
    elif smp.lanes:
        walk: Any = _rr_lanes.sample_lt_lanes  # numba dispatchers are untyped
        done, pos, examined = walk(
            *smp._args(), key, first, count, smp.horizon, out_nodes, pos, out_ends,
            sc.vis, sc.queues,
        )
    else:
        done, pos, examined = fn(*smp._args(), key, first, count, smp.horizon, out_nodes, pos,
                                 out_ends, sc.stamp)
    return int(done), int(pos), int(examined)


def sample_parts(fn: Kernel, smp: RRSampler, owner: object, key: np.uint64, first: int,
                 want: int, parts: int, mean: float
                 ) -> list[tuple[NDArray[np.int32], NDArray[np.int64], int]]:
    """Sets ``first .. first+want-1`` over ``parts`` threads: cut into up to
    ``PIECES_PER_THREAD`` index ranges per thread, which the threads take in turn
    (:func:`.._chunks.map_shared`), each appended to its thread's batch store. Per piece,
    in index order: (nodes, set ends relative to the piece, in-arcs examined). The node
    arrays are views of the batch stores: copy them before the next batch. ``mean`` is
    the expected set size (to size the batch stores)."""
    scratch = [take_scratch(smp, owner, i, first + want) for i in range(parts)]
    share = int(mean * (want / parts) * 1.25)
    for sc in scratch:
        sc.fill = 0
        if sc.nodes.shape[0] < share + smp.n + 16:
            sc.nodes = np.empty(share + smp.n + 16, dtype=np.int32)
    pieces = max(parts, min(parts * PIECES_PER_THREAD, want // PARALLEL_MIN_SETS))
    calls = [(fn, smp, scratch, key, a, c) for a, c in split_range(first, want, pieces)]
    return map_shared(_sample_piece, calls, parts)


def _sample_piece(w: int, fn: Kernel, smp: RRSampler, scratch: list[Scratch], key: np.uint64,
                  first: int, count: int) -> tuple[NDArray[np.int32], NDArray[np.int64], int]:
    """Sets ``first .. first+count-1`` appended to thread ``w``'s batch store, grown as
    needed (a view taken before a growth keeps the old array). Runs in a pool thread."""
    n = smp.n
    sc = scratch[w]
    ends = np.empty(count, dtype=np.int64)
    start = pos = sc.fill
    done, examined = 0, 0
    while done < count:
        if sc.nodes.shape[0] - pos < n + 16:
            sc.nodes = grow(sc.nodes, pos + n + 16)
        d, pos, ex = call_kernel(fn, smp, sc, key, first + done, count - done, sc.nodes, pos,
                                 ends[done:])
        done += d
        examined += ex
        if done < count:  # the batch store ran out of room: grow it and go on
            sc.nodes = grow(sc.nodes, sc.nodes.shape[0] + n + 16)
    sc.fill = pos
    return sc.nodes[start:pos], ends - start, examined


def index_parallel(nodes: NDArray[np.int32], offsets: NDArray[np.int64], n: int, count: int,
                   parts: int) -> tuple[NDArray[np.int64], NDArray[np.int32], NDArray[np.int64]]:
    """:func:`._rr_kernels.inverted_index` of sets ``0 .. count-1`` over ``parts`` threads,
    identical to one thread's; each part holds 8 bytes per person."""
    ranges = [(a, a + c) for a, c in split_range(0, count, parts)]
    per = np.zeros((len(ranges), n), dtype=np.int64)
    map_ordered(K.count_members, [(nodes, offsets, a, b, per[t]) for t, (a, b) in enumerate(ranges)])
    np.cumsum(per, axis=0, out=per)  # row t: members in the ranges up to t
    counts = per[-1].copy()
    indptr = np.zeros(n + 1, dtype=np.int64)
    np.cumsum(counts, out=indptr[1:])
    for t in range(len(ranges) - 1, 0, -1):  # row t: members in the ranges before t
        per[t] = per[t - 1]
    per[0] = 0
    per += indptr[:-1]  # row t: where thread t starts writing in each node's row
    sets = np.empty(int(offsets[count]), dtype=np.int32)
    map_ordered(K.fill_members, [(nodes, offsets, a, b, per[t], sets)
                                 for t, (a, b) in enumerate(ranges)])
    return indptr, sets, counts
