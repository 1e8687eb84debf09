"""Reverse-reachable (RR) set collections.

Private helpers of :mod:`service.analytics.seeding.shortlists`. A :class:`RRSampler`
prepares a :class:`~service.analytics.graph.DiffusionGraph` once (per-node
sampling modes, the root distribution); an :class:`RRCollection` grows a
flat store of RR sets reproducibly. Greedy coverage of the stored sets under
the contact rules is in :mod:`._cover`.

Memory per stored entry (one node in one RR set): 4 bytes in the set store
(int32 node), 4 bytes in the node -> sets index (int32 set id); per set
8 bytes of offsets and 1 byte of covered flag; per node 16 bytes of index
pointers and counts. Sampling with lanes (large graphs) adds per node
2 bytes of visit marks (and for IC 16 bytes of node records), and reserves 4 bytes per node
per lane of queue space, of which only the pages the largest sets reach are
ever committed.

Threads. A sampler cuts each batch of sets into contiguous index ranges, a few per
thread, which the threads take in turn; each is sampled into its thread's buffers and
the ranges are appended to the store in index order (:mod:`._rr_parts`): the store is
bit-identical whatever the thread count and is never held twice. Coverage counts
(:meth:`RRSampler.count_hits`) are split into one range per thread and added.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from typing import Any

import numpy as np
from numpy.typing import NDArray

from . import _rr_kernels as K
from . import _rr_lanes
from . import _rr_parts as P
from .._chunks import ChunkSizer, check_memory, map_ordered, split_range, thread_count
from ..errors import InvalidParameter
from ..graph import DiffusionGraph

__all__ = [
    "BYTES_PER_ENTRY",
    "RRSampler",
    "RRCollection",
]

BYTES_PER_ENTRY = 8  # int32 node in the store + int32 set id in the inverted index


# Graphs whose in-arcs and node records take more than this many bytes are sampled
# with several sets in flight (service.analytics.seeding._rr_lanes). Measured with weighted
# cascade, kernel time, lanes against one set at a time, IC then LT: 0.63 and 0.68 on
# ca-GrQc (0.2 MiB, in cache), 1.35 and 3.86 on soc-Slashdot0902 (4.8 MiB), 1.89 and
# 2.18 on com-DBLP (9.2 MiB). 1 MiB is the per-core L2 cache of the 2-core machine these
# were measured on: a graph that fits there gains nothing from lanes (ca-GrQc above).
LANES_MIN_BYTES = 1 << 20

# Past that threshold the better kernel depends on the machine's caches and the thread
# count as much as on the graph: measured on a 2-core machine with 2 MiB of L2 per core
# and 32 MiB of L3 (one set at a time / lanes, 5 alternating runs): soc-Slashdot0902 1.12
# on one thread and 1.19 on two, com-DBLP 0.86 and 1.08. So a sampler times both on its
# first batches (about TRIAL_SECONDS each; those of at least TRIAL_MIN_SECONDS count),
# TRIAL_BATCHES each, and keeps the faster. The sets are the same either way; only the
# time differs.
TRIAL_SECONDS = 0.03
TRIAL_MIN_SECONDS = 0.01
TRIAL_BATCHES = 2


Progress = Callable[[float, str], None]


class RRSampler:
    """A diffusion graph prepared for RR sampling (IC or LT, optional horizon,
    optional target-audience weights for the roots)."""

    def __init__(
        self,
        dg: DiffusionGraph,
        *,
        weights: NDArray[np.float64] | None = None,
        rounds: int | None = None,
        threads: int | None = None,
    ) -> None:
        self.n = int(dg.n)
        self.threads = thread_count(threads)
        # Per-thread buffers, used by its collections in turn (never two at once).
        self.scratch: list[P.Scratch] = []
        self.model = dg.model
        self.indptr = np.ascontiguousarray(dg.in_indptr, dtype=np.int64)
        self.indices = np.ascontiguousarray(dg.in_indices, dtype=np.int32)
        prob = np.ascontiguousarray(dg.in_prob, dtype=np.float64)
        if self.model == "ic":
            self.mode, self.aux, self.arc = K.prepare_ic(self.indptr, prob)
        elif self.model == "lt":
            self.mode, self.aux, self.arc = K.prepare_lt(self.indptr, prob)
        else:
            raise InvalidParameter(f"unknown model {dg.model!r}", field="model")
        self.horizon = -1 if rounds is None else int(rounds)
        footprint = self.indices.nbytes + 16 * (self.n + 1)
        # Both kernels give the same sets. On a graph past the threshold the sampler starts
        # with lanes and times both on its first batches (see pick_kernel / record_batch).
        self.lanes_ok = footprint > LANES_MIN_BYTES
        self.lanes = self.lanes_ok
        self._trials: dict[bool, list[float]] | None = (  # seconds per (set + arc)
            {True: [], False: []} if self.lanes_ok else None)
        self.trial_costs: dict[bool, float] | None = None  # seconds per (set + arc), once timed
        self._trial_pace = 0.0  # sets per second of the last batch while on trial
        if self.lanes_ok and self.model == "ic":
            self.rec, self.recf = _rr_lanes.lane_records(self.indptr, self.mode, self.aux)
            max_in = int(np.diff(self.indptr).max()) if self.n else 0
            self.pend_size = _rr_lanes.LANES * (max_in + 1)
        if weights is None:
            self.total_weight = float(self.n)
            self.accept = np.empty(0, dtype=np.float64)
            self.alias = np.empty(0, dtype=np.int32)
        else:
            self.total_weight = float(weights.sum())
            self.accept, self.alias = K.build_alias(np.ascontiguousarray(weights, np.float64))

    def pick_kernel(self, want: int) -> int:
        """Before a batch of ``want`` sets: while the kernels are on trial, the one timed on
        fewer batches so far (lanes first), and a batch of about ``TRIAL_SECONDS`` at the
        last batch's pace, so the slower kernel costs little. Returns the batch size."""
        if self._trials is None:
            return want
        self.lanes = len(self._trials[True]) <= len(self._trials[False])
        if self._trial_pace > 0.0:
            return max(1, min(want, int(self._trial_pace * TRIAL_SECONDS)))
        return want

    def record_batch(self, seconds: float, sets: int, examined: int) -> None:
        """After a batch: while on trial, time it (batches of at least
        ``TRIAL_MIN_SECONDS`` count); once each kernel has ``TRIAL_BATCHES`` of them, keep
        the one whose best batch took less time per set and arc examined (the best, so that
        one batch slowed by something else does not decide)."""
        if self._trials is None or seconds <= 0.0:
            return
        self._trial_pace = sets / seconds
        if seconds < TRIAL_MIN_SECONDS:
            return
        self._trials[self.lanes].append(seconds / max(sets + examined, 1))
        if min(len(v) for v in self._trials.values()) >= TRIAL_BATCHES:
            cost = {k: min(v) for k, v in self._trials.items()}
            self.lanes = cost[True] <= cost[False]
            self.trial_costs = cost
            self._trials = None

    def _args(self) -> tuple[object, ...]:
        return (self.indptr, self.indices, self.mode, self.aux, self.arc, self.accept, self.alias)

    def count_hits(
        self, is_seed: NDArray[np.bool_], key: np.uint64, first: int, count: int
    ) -> tuple[int, int]:
        """Sets ``first..first+count-1`` that contain a seed (not stored); the range is
        split over the sampler's threads and the counts added."""
        fn: Any = K.hits_ic if self.model == "ic" else K.hits_lt  # numba dispatchers are untyped

        def part(a: int, c: int) -> tuple[int, int]:
            stamp = P.marks(self.n, a + c)
            hits, examined = fn(*self._args(), key, a, c, self.horizon, is_seed, stamp)
            return int(hits), int(examined)

        parts = split_range(first, count, self._parts(count))
        out = map_ordered(part, parts)
        return sum(h for h, _ in out), sum(e for _, e in out)

    def _parts(self, count: int) -> int:
        """How many threads a batch of ``count`` sets is split over."""
        return P.parts_for(self.threads, count)


class RRCollection:
    """A growing, reproducible store of RR sets: set ``j`` depends only on
    ``(key, j)``, so a collection grown in any batches holds the same sets."""

    #: What to tell the caller when the store would pass the memory limit.
    relax = "lower max_samples, raise epsilon, or lower the probabilities"

    def __init__(self, sampler: RRSampler, key: np.uint64) -> None:
        self.sampler = sampler
        self.key = key
        n = sampler.n
        self._nodes = np.empty(max(4 * n, 1 << 16), dtype=np.int32)
        self._ends = np.empty(1 << 12, dtype=np.int64)
        self._sizer = ChunkSizer(first=256, most=1 << 22)
        self.count = 0
        self.entries = 0
        self.examined = 0
        self.seconds = 0.0
        self._index: tuple[NDArray[np.int64], NDArray[np.int32], NDArray[np.int64]] | None = None

    @property
    def nodes(self) -> NDArray[np.int32]:
        return self._nodes[: self.entries]

    @property
    def offsets(self) -> NDArray[np.int64]:
        out = np.empty(self.count + 1, dtype=np.int64)
        out[0] = 0
        out[1:] = self._ends[: self.count]
        return out

    @property
    def nbytes(self) -> int:
        """Bytes held for the stored sets and their inverted index."""
        return self.entries * BYTES_PER_ENTRY + self.count * 9 + self.sampler.n * 16

    def extend_to(
        self,
        target: int,
        *,
        progress: Progress | None = None,
        span: tuple[float, float] = (0.0, 1.0),
        message: str = "sampling RR sets",
    ) -> None:
        """Sample sets until ``count == target`` (never shrinks)."""
        fn = K.sample_ic if self.sampler.model == "ic" else K.sample_lt
        n = self.sampler.n
        start_count = self.count
        sizer = self._sizer  # kept across calls: IMM's estimation rounds need no new ramp-up
        while self.count < target:
            want = self.sampler.pick_kernel(sizer.next(target - self.count))
            if self.count >= 256:  # the mean set size is known: check the whole target's store
                mean_now = self.entries / self.count
                check_memory((self.entries + mean_now * (target - self.count)) * BYTES_PER_ENTRY
                             + 9 * target + 16 * n, what=f"{target:,} RR sets (about {mean_now:,.0f} "
                             "people each)", relax=self.relax)
            if self._ends.shape[0] < self.count + want:
                # Set ends are 8 bytes per set: size them for the whole target at once.
                self._ends = P.grow(self._ends, target)
            mean = self.entries / self.count if self.count else 8.0
            need = self.entries + int(mean * want * 1.25) + n + 16
            if self._nodes.shape[0] < need:
                # Size for the whole target once the mean set size is known,
                # so a long run copies the store only a few times.
                whole = self.entries + int(mean * (target - self.count) * 1.1) + n + 16
                self._nodes = P.grow(self._nodes, max(need, whole if self.count >= 1000 else 0))
            t0 = time.perf_counter()
            parts = self.sampler._parts(want)
            if parts > 1:
                done, pos, examined = self._sample_parallel(fn, want, parts)
            else:
                done, pos, examined = self._sample(fn, want)
            dt = time.perf_counter() - t0
            self.sampler.record_batch(dt, int(done), int(examined))
            self.seconds += dt
            self.count += int(done)
            self.entries = int(pos)
            self.examined += int(examined)
            self._index = None
            sizer.took(int(done), dt)
            if done < want:  # the store ran out of room: grow it before the next call
                self._nodes = P.grow(self._nodes, self._nodes.shape[0] + n + 16)
            if progress is not None:
                frac = (self.count - start_count) / max(target - start_count, 1)
                progress(span[0] + (span[1] - span[0]) * frac, message)

    def _sample(self, fn: Callable[..., tuple[int, int, int]], want: int) -> tuple[int, int, int]:
        """Sets ``count .. count+want-1`` into the store, in this thread."""
        sc = P.take_scratch(self.sampler, self, 0, self.count + want)
        return P.call_kernel(fn, self.sampler, sc, self.key, self.count, want, self._nodes,
                             self.entries, self._ends[self.count:])

    def _sample_parallel(self, fn: Callable[..., tuple[int, int, int]], want: int,
                         parts: int) -> tuple[int, int, int]:
        """Sets ``count .. count+want-1`` over ``parts`` threads (:mod:`._rr_parts`),
        appended to the store in index order (always all ``want``)."""
        mean = self.entries / self.count if self.count else 8.0
        results = P.sample_parts(fn, self.sampler, self, self.key, self.count, want, parts, mean)
        size = sum(len(nodes) for nodes, _, _ in results)
        if self._nodes.shape[0] < self.entries + size:
            self._nodes = P.grow(self._nodes, self.entries + size)
        pos, done, examined = self.entries, 0, 0
        for nodes, ends, ex in results:
            self._nodes[pos: pos + nodes.shape[0]] = nodes
            self._ends[self.count + done: self.count + done + ends.shape[0]] = ends + pos
            pos += nodes.shape[0]
            done += ends.shape[0]
            examined += ex
        return done, pos, examined

    def index(self) -> tuple[NDArray[np.int64], NDArray[np.int32], NDArray[np.int64]]:
        """(node -> sets indptr, set ids, per-node set counts), cached until the next extend.

        Built over the sampler's threads when the sets hold enough entries
        (:func:`._rr_parts.index_parallel`, the same index); each part costs 8 bytes per
        person, so the parts together take at most half the bytes of the set ids.
        """
        if self._index is None:
            n = self.sampler.n
            parts = min(P.parts_for(self.sampler.threads, self.count), self.entries // max(4 * n, 1))
            if parts <= 1:
                self._index = K.inverted_index(self.nodes, self.offsets, n)
            else:
                self._index = P.index_parallel(self.nodes, self.offsets, n, self.count, parts)
        return self._index

    def hits(self, seeds: NDArray[np.int64]) -> int:
        """Stored sets containing at least one of ``seeds``."""
        mask = np.zeros(self.sampler.n, dtype=np.bool_)
        mask[seeds] = True
        return int(K.covered_by(self.nodes, self.offsets, mask))

    def scale(self) -> float:
        """People (or audience value) represented by one stored set."""
        return self.sampler.total_weight / max(self.count, 1)


