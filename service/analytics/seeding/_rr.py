"""Reverse-reachable (RR) set collections and greedy maximum coverage under rules.

Private helpers of :mod:`service.analytics.seeding.shortlists`. A :class:`RRSampler`
prepares a :class:`~service.analytics.graph.DiffusionGraph` once (per-node
sampling modes, the root distribution); an :class:`RRCollection` grows a
flat store of RR sets reproducibly; :func:`greedy_cover` picks seeds that
cover many stored sets under the contact rules of :class:`Rules`, and can
report the online upper bound on the best achievable coverage used by
OPIM-C.

Memory per stored entry (one node in one RR set): 4 bytes in the set store
(int32 node), 4 bytes in the node -> sets index (int32 set id); per set
8 bytes of offsets and 1 byte of covered flag; per node 16 bytes of index
pointers and counts. Sampling with lanes (large graphs) adds per node
2 bytes of visit marks (and for IC 16 bytes of node records), and reserves 4 bytes per node
per lane of queue space, of which only the pages the largest sets reach are
ever committed.

Threads. A sampler splits each batch of sets into one contiguous index range per
thread, sampled into per-thread buffers and appended to the store in index order
(:mod:`._rr_parts`): the store is bit-identical whatever the thread count and is
never held twice. Coverage counts (:meth:`RRSampler.count_hits`) are split the
same way and added.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable
from dataclasses import dataclass
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
    "Rules",
    "GreedyResult",
    "greedy_cover",
    "best_of_cost_greedy",
]

BYTES_PER_ENTRY = 8  # int32 node in the store + int32 set id in the inverted index


# Graphs whose in-arcs and node records take more than this many bytes are sampled
# with several sets in flight (service.analytics.seeding._rr_lanes). Measured with weighted
# cascade, kernel time, lanes against one set at a time, IC then LT: 0.63 and 0.68 on
# ca-GrQc (0.2 MiB, in cache), 1.35 and 3.86 on soc-Slashdot0902 (4.8 MiB), 1.89 and
# 2.18 on com-DBLP (9.2 MiB). 1 MiB is the per-core L2 cache of the 2-core machine these
# were measured on: a graph that fits there gains nothing from lanes (ca-GrQc above).
LANES_MIN_BYTES = 1 << 20


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
        self.lanes = footprint > LANES_MIN_BYTES
        if self.lanes and self.model == "ic":
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
            want = sizer.next(target - self.count)
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


@dataclass(frozen=True, eq=False)
class Rules:
    """Validated contact rules, in the form the greedy routines use.

    ``candidates`` excludes must-include nodes, barred people and (with a
    cost budget) people whose cost is unknown. ``group`` maps each node to a
    cap group (segment code + 1, so a missing segment is group 0) and
    ``caps_left`` holds each group's cap after the must-include nodes are
    counted; both are None without caps. ``k_left`` is the count budget
    left after the must-include nodes (None: cost budget only) and
    ``budget_left`` the cost budget left (None: count only).
    """

    n: int
    must: tuple[int, ...]
    candidates: NDArray[np.bool_]
    group: NDArray[np.int64] | None
    caps_left: NDArray[np.int64] | None
    costs: NDArray[np.float64] | None
    k_left: int | None
    budget_left: float | None
    tiebreak: NDArray[np.float64]

    @property
    def kind(self) -> str:
        if self.budget_left is not None:
            return "cost"
        if self.caps_left is not None:
            return "caps"
        return "count"

    @property
    def max_free(self) -> int:
        """Most seeds the greedy may add beyond the must-include ones."""
        cand = int(self.candidates.sum())
        return cand if self.k_left is None else min(self.k_left, cand)


@dataclass(frozen=True)
class GreedyResult:
    seeds: tuple[int, ...]
    gains: tuple[int, ...]  # sets newly covered by each seed, in order
    covered: int
    upper_bound: float | None  # bound on the coverage of the best feasible set
    rule: str  # "unit" or "ratio" (which greedy produced the set)


def greedy_cover(
    coll: RRCollection, rules: Rules, *, ratio: bool = False, bound: bool = False
) -> GreedyResult:
    """Greedy maximum coverage of the stored sets under ``rules``.

    Must-include nodes are placed first, in the given order; then each step
    adds the available node covering the most still-uncovered sets (per
    unit cost when ``ratio``), skipping nodes whose cap group is full or who
    no longer fit the cost budget. With ``bound`` it also returns
    min over steps i of [coverage(S_i) + the best feasible sum of marginal
    coverages w.r.t. S_i], an upper bound on the best feasible coverage by
    submodularity (the online bound of Leskovec et al. 2007, used by
    OPIM-C); evaluated at every step for small budgets, on a geometric
    schedule of steps for large ones (any subset of steps gives a valid bound).
    """
    inv_indptr, inv_sets, counts0 = coll.index()
    nodes, offsets = coll.nodes, coll.offsets
    counts = counts0.copy()
    covered = np.zeros(coll.count, dtype=np.uint8)
    seeds: list[int] = []
    gains: list[int] = []
    total = 0
    for v in rules.must:
        g = int(K.cover_node(v, inv_indptr, inv_sets, offsets, nodes, covered, counts))
        seeds.append(v)
        gains.append(g)
        total += g
    avail = rules.candidates.copy()
    _close_full_groups(avail, rules)
    caps_used = np.zeros(0 if rules.caps_left is None else rules.caps_left.shape[0], np.int64)
    budget_left = math.inf if rules.budget_left is None else float(rules.budget_left)
    costs = rules.costs if rules.costs is not None else np.empty(0, dtype=np.float64)
    limit = rules.max_free
    schedule = _bound_schedule(limit) if bound else set()
    best_bound = math.inf
    step = 0
    while True:
        if bound and step in schedule:
            best_bound = min(best_bound, total + _modular_bound(counts, rules))
        if step >= limit:
            break
        v = int(K.best_candidate(counts, avail, rules.tiebreak, costs, ratio, budget_left))
        if v < 0:
            break
        g = int(K.cover_node(v, inv_indptr, inv_sets, offsets, nodes, covered, counts))
        seeds.append(v)
        gains.append(g)
        total += g
        avail[v] = False
        step += 1
        if rules.costs is not None:
            budget_left -= float(rules.costs[v])
        if rules.caps_left is not None and rules.group is not None:
            grp = int(rules.group[v])
            caps_used[grp] += 1
            if caps_used[grp] >= rules.caps_left[grp]:
                avail[rules.group == grp] = False
    if bound:
        best_bound = min(best_bound, total + _modular_bound(counts, rules))
    return GreedyResult(
        tuple(seeds), tuple(gains), total, best_bound if bound else None,
        "ratio" if ratio else "unit",
    )


def best_of_cost_greedy(
    coll: RRCollection, rules: Rules, *, bound: bool = False
) -> tuple[GreedyResult, GreedyResult, GreedyResult]:
    """(better, ratio greedy, unit greedy): under a cost budget the better of
    benefit/cost greedy and unit-cost greedy (Leskovec et al. 2007), which
    dominates "ratio greedy or the best single seed", 0.405-approximate
    (K. Tang et al. 2021)."""
    r = greedy_cover(coll, rules, ratio=True, bound=bound)
    u = greedy_cover(coll, rules, ratio=False, bound=False)
    better = r if r.covered >= u.covered else u
    if bound and better is u:
        better = GreedyResult(u.seeds, u.gains, u.covered, r.upper_bound, u.rule)
    return better, r, u


def _bound_schedule(limit: int) -> set[int]:
    if limit <= 64:
        return set(range(limit + 1))
    steps = {0, limit}
    x = 1.0
    while x < limit:
        steps.add(int(x))
        x *= 1.25
    return steps


def _modular_bound(counts: NDArray[np.int64], rules: Rules) -> float:
    """Largest total marginal coverage a feasible completion could add (an
    upper bound: rule-feasible sets of nodes, counts summed, relaxing
    overlaps). Counts of chosen nodes are already 0, so including them is harmless."""
    c = np.where(rules.candidates, counts, 0)
    pos = np.flatnonzero(c > 0)
    if pos.size == 0:
        return 0.0
    vals = c[pos].astype(np.float64)
    bounds: list[float] = []
    k = rules.k_left
    if k == 0:
        return 0.0
    if k is not None:
        if rules.caps_left is not None and rules.group is not None:
            order = pos[np.argsort(-vals, kind="stable")]
            bounds.append(float(K.capped_top_sum(order, c, rules.group, rules.caps_left, k)))
        elif k < vals.size:
            bounds.append(float(np.partition(vals, vals.size - k)[vals.size - k:].sum()))
        else:
            bounds.append(float(vals.sum()))
    if rules.budget_left is not None and rules.costs is not None:
        cost = rules.costs[pos]
        free = cost <= 0
        total = float(vals[free].sum())
        cv, vv = cost[~free], vals[~free]
        order = np.argsort(-(vv / cv), kind="stable")
        cv, vv = cv[order], vv[order]
        room = float(rules.budget_left)
        # Fractional knapsack (the LP relaxation bound): whole items while
        # they fit, then the fitting fraction of the next one.
        whole = int(np.searchsorted(np.cumsum(cv), room, side="right"))
        total += float(vv[:whole].sum())
        if whole < cv.size:
            total += float(vv[whole]) * (room - float(cv[:whole].sum())) / float(cv[whole])
        bounds.append(total)
    if not bounds:
        bounds.append(float(vals.sum()))
    return min(bounds)


def _close_full_groups(avail: np.ndarray, rules: Rules) -> None:
    """Bar every group whose cap is already used up (by must-include people, or a cap of 0)."""
    if rules.caps_left is not None and rules.group is not None:
        full = np.flatnonzero(np.asarray(rules.caps_left) <= 0)
        if full.size:
            avail[np.isin(rules.group, full)] = False
