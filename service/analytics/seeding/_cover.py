"""Greedy maximum coverage of stored RR sets under the contact rules.

Private to :mod:`service.analytics.seeding`. :func:`greedy_cover` picks seeds
that cover many stored sets under a :class:`~service.analytics.seeding.rules.SeedRules`
and can report the online upper bound on the best achievable coverage used by
OPIM-C; :func:`best_of_cost_greedy` is its form for a cost budget and
:func:`select` picks the right one for the rules.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from . import _rr_kernels as K
from ._rr import RRCollection
from .rules import SeedRules

__all__ = ["GreedyResult", "greedy_cover", "best_of_cost_greedy", "select", "close_full_groups"]


@dataclass(frozen=True)
class GreedyResult:
    seeds: tuple[int, ...]
    gains: tuple[int, ...]  # sets newly covered by each seed, in order
    covered: int
    upper_bound: float | None  # bound on the coverage of the best feasible set
    rule: str  # "unit" or "ratio" (which greedy produced the set)


def greedy_cover(
    coll: RRCollection, rules: SeedRules, *, ratio: bool = False, bound: bool = False
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
    close_full_groups(avail, rules)
    caps_used = np.zeros(0 if rules.caps_left is None else rules.caps_left.shape[0], np.int64)
    cost_left = math.inf if rules.cost_left is None else float(rules.cost_left)
    costs = rules.costs if rules.costs is not None else np.empty(0, dtype=np.float64)
    places = rules.free_places
    schedule = _bound_schedule(places) if bound else set()
    best_bound = math.inf
    step = 0
    while True:
        if bound and step in schedule:
            best_bound = min(best_bound, total + _modular_bound(counts, rules))
        if step >= places:
            break
        v = int(K.best_candidate(counts, avail, rules.tiebreak, costs, ratio, cost_left))
        if v < 0:
            break
        g = int(K.cover_node(v, inv_indptr, inv_sets, offsets, nodes, covered, counts))
        seeds.append(v)
        gains.append(g)
        total += g
        avail[v] = False
        step += 1
        if rules.costs is not None:
            cost_left -= float(rules.costs[v])
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
    coll: RRCollection, rules: SeedRules, *, bound: bool = False
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


def select(coll: RRCollection, rules: SeedRules, *, bound: bool = False) -> GreedyResult:
    """The greedy choice the rules call for: under a cost budget the better of ratio and
    unit greedy, otherwise unit greedy."""
    if rules.cost_left is not None:
        return best_of_cost_greedy(coll, rules, bound=bound)[0]
    return greedy_cover(coll, rules, bound=bound)


def _bound_schedule(places: int) -> set[int]:
    if places <= 64:
        return set(range(places + 1))
    steps = {0, places}
    x = 1.0
    while x < places:
        steps.add(int(x))
        x *= 1.25
    return steps


def _modular_bound(counts: NDArray[np.int64], rules: SeedRules) -> float:
    """Largest total marginal coverage a feasible completion could add (an
    upper bound: rule-feasible sets of nodes, counts summed, relaxing
    overlaps). Counts of chosen nodes are already 0, so including them is harmless."""
    c = np.where(rules.candidates, counts, 0)
    pos = np.flatnonzero(c > 0)
    if pos.size == 0:
        return 0.0
    vals = c[pos].astype(np.float64)
    bounds: list[float] = []
    places = rules.budget_left
    if places == 0:
        return 0.0
    if places is not None:
        if rules.caps_left is not None and rules.group is not None:
            order = pos[np.argsort(-vals, kind="stable")]
            bounds.append(float(K.capped_top_sum(order, c, rules.group, rules.caps_left, places)))
        elif places < vals.size:
            bounds.append(float(np.partition(vals, vals.size - places)[vals.size - places:].sum()))
        else:
            bounds.append(float(vals.sum()))
    if rules.cost_left is not None and rules.costs is not None:
        cost = rules.costs[pos]
        free = cost <= 0
        total = float(vals[free].sum())
        cv, vv = cost[~free], vals[~free]
        order = np.argsort(-(vv / cv), kind="stable")
        cv, vv = cv[order], vv[order]
        room = float(rules.cost_left)
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


def close_full_groups(avail: NDArray[np.bool_], rules: SeedRules) -> None:
    """Bar every group whose cap is already used up (by must-include people, or a cap of 0)."""
    if rules.caps_left is not None and rules.group is not None:
        full = np.flatnonzero(np.asarray(rules.caps_left) <= 0)
        if full.size:
            avail[np.isin(rules.group, full)] = False
