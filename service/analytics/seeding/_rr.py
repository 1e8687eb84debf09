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
"""

from __future__ import annotations

import time
from collections.abc import Callable
from typing import Any

import numpy as np
from numpy.typing import NDArray

from . import _rr_kernels as K
from . import _rr_lanes
from .._chunks import ChunkSizer, check_memory
from ..errors import InvalidParameter
from ..graph import DiffusionGraph

__all__ = [
    "BYTES_PER_ENTRY",
    "RRSampler",
    "RRCollection",
]

BYTES_PER_ENTRY = 8  # int32 node in the store + int32 set id in the inverted index
# Visit marks are set numbers + 1. int32 marks halve the mark array (on com-DBLP it
# then fits in a core's L2 cache: about 15% faster sampling, measured); a collection
# or count that would pass this bound switches to int64 marks.
_MARK32_LIMIT = 2**31 - 2


# Graphs whose in-arcs and node records take more than this many bytes are sampled
# with several sets in flight (service.analytics.seeding._rr_lanes). Measured with weighted
# cascade, kernel time, lanes against one set at a time, IC then LT: 0.63 and 0.68 on
# ca-GrQc (0.2 MiB, in cache), 1.35 and 3.86 on soc-Slashdot0902 (4.8 MiB), 1.89 and
# 2.18 on com-DBLP (9.2 MiB). 1 MiB is the per-core L2 cache of the 2-core machine these
# were measured on: a graph that fits there gains nothing from lanes (ca-GrQc above).
LANES_MIN_BYTES = 1 << 20


def _marks(n: int, last: int) -> NDArray[np.int32] | NDArray[np.int64]:
    """A zeroed mark array able to hold marks up to ``last + 1``."""
    if last < _MARK32_LIMIT:
        return np.zeros(n, dtype=np.int32)
    return np.zeros(n, dtype=np.int64)


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
    ) -> None:
        self.n = int(dg.n)
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
        self.lanes = footprint > LANES_MIN_BYTES
        if self.lanes and self.model == "ic":
            self.rec, self.recf = _rr_lanes.lane_records(self.indptr, self.mode, self.aux)
            max_in = int(np.diff(self.indptr).max()) if self.n else 0
            self.pend = np.empty(_rr_lanes.LANES * (max_in + 1), dtype=np.int64)
        if weights is None:
            self.total_weight = float(self.n)
            self.accept = np.empty(0, dtype=np.float64)
            self.alias = np.empty(0, dtype=np.int32)
        else:
            self.total_weight = float(weights.sum())
            self.accept, self.alias = K.build_alias(np.ascontiguousarray(weights, np.float64))

    def _args(self) -> tuple[object, ...]:
        return (self.indptr, self.indices, self.mode, self.aux, self.arc, self.accept, self.alias)

    def count_hits(
        self, is_seed: NDArray[np.bool_], key: np.uint64, first: int, count: int
    ) -> tuple[int, int]:
        """Sets ``first..first+count-1`` that contain a seed (not stored)."""
        stamp = _marks(self.n, first + count)
        fn: Any = K.hits_ic if self.model == "ic" else K.hits_lt  # numba dispatchers are untyped
        hits, examined = fn(*self._args(), key, first, count, self.horizon, is_seed, stamp)
        return int(hits), int(examined)


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
        self._stamp: NDArray[np.int32] | NDArray[np.int64] = _marks(n, 0)
        if sampler.lanes:
            self._vis = np.zeros(n, dtype=np.uint16)
            # Pages are only committed as lanes write to them (see sample_ic_lanes).
            self._queues = np.empty(_rr_lanes.LANES * max(n, 1), dtype=np.int32)
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
        sizer = ChunkSizer(first=256, most=1 << 22)
        while self.count < target:
            want = sizer.next(target - self.count)
            if self.count >= 256:  # the mean set size is known: check the whole target's store
                mean_now = self.entries / self.count
                check_memory((self.entries + mean_now * (target - self.count)) * BYTES_PER_ENTRY
                             + 9 * target + 16 * n, what=f"{target:,} RR sets (about {mean_now:,.0f} "
                             "people each)", relax=self.relax)
            if self._stamp.dtype == np.int32 and self.count + want >= _MARK32_LIMIT:
                self._stamp = self._stamp.astype(np.int64)
            if self._ends.shape[0] < self.count + want:
                # Set ends are 8 bytes per set: size them for the whole target at once.
                self._ends = _grow(self._ends, target)
            mean = self.entries / self.count if self.count else 8.0
            need = self.entries + int(mean * want * 1.25) + n + 16
            if self._nodes.shape[0] < need:
                # Size for the whole target once the mean set size is known,
                # so a long run copies the store only a few times.
                whole = self.entries + int(mean * (target - self.count) * 1.1) + n + 16
                self._nodes = _grow(self._nodes, max(need, whole if self.count >= 1000 else 0))
            t0 = time.perf_counter()
            done, pos, examined = self._sample(fn, want)
            dt = time.perf_counter() - t0
            self.seconds += dt
            self.count += int(done)
            self.entries = int(pos)
            self.examined += int(examined)
            self._index = None
            sizer.took(int(done), dt)
            if done < want:  # the store ran out of room: grow it before the next call
                self._nodes = _grow(self._nodes, self._nodes.shape[0] + n + 16)
            if progress is not None:
                frac = (self.count - start_count) / max(target - start_count, 1)
                progress(span[0] + (span[1] - span[0]) * frac, message)

    def _sample(self, fn: Callable[..., tuple[int, int, int]], want: int) -> tuple[int, int, int]:
        """Sets ``count .. count+want-1`` into the store, with lanes when the sampler uses them."""
        smp = self.sampler
        out_ends = self._ends[self.count:]
        if smp.lanes and smp.model == "ic":
            done, pos, examined = _rr_lanes.sample_ic_lanes(
                smp.rec, smp.recf, smp.indices, smp.arc, smp.accept, smp.alias, self.key,
                self.count, want, smp.horizon, self._nodes, self.entries, out_ends,
                self._vis, self._queues, smp.pend,
            )
            return int(done), int(pos), int(examined)
        if smp.lanes:
            walk: Any = _rr_lanes.sample_lt_lanes  # numba dispatchers are untyped
            done, pos, examined = walk(
                *smp._args(), self.key, self.count, want, smp.horizon, self._nodes,
                self.entries, out_ends, self._vis, self._queues,
            )
            return int(done), int(pos), int(examined)
        done, pos, examined = fn(
            *smp._args(), self.key, self.count, want, smp.horizon,
            self._nodes, self.entries, out_ends, self._stamp,
        )
        return int(done), int(pos), int(examined)

    def index(self) -> tuple[NDArray[np.int64], NDArray[np.int32], NDArray[np.int64]]:
        """(node -> sets indptr, set ids, per-node set counts), cached until the next extend."""
        if self._index is None:
            self._index = K.inverted_index(self.nodes, self.offsets, self.sampler.n)
        return self._index

    def hits(self, seeds: NDArray[np.int64]) -> int:
        """Stored sets containing at least one of ``seeds``."""
        mask = np.zeros(self.sampler.n, dtype=np.bool_)
        mask[seeds] = True
        return int(K.covered_by(self.nodes, self.offsets, mask))

    def scale(self) -> float:
        """People (or audience value) represented by one stored set."""
        return self.sampler.total_weight / max(self.count, 1)


def _grow(a: NDArray, need: int) -> NDArray:  # type: ignore[type-arg]
    out = np.empty(max(need, int(a.shape[0] * 1.6)), dtype=a.dtype)
    out[: a.shape[0]] = a
    return out
