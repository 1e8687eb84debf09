"""Contact rules as the seeding methods see them: one value, checked once.

:class:`SeedRules` holds who may be chosen and how many: a count budget or a
cost budget with per-person costs, an eligibility mask (consent, not barred),
must-include people, segment codes with caps per segment. :meth:`SeedRules.build`
validates them once, raising :class:`InfeasibleRequest` / :class:`UnknownNode` /
:class:`InvalidParameter` with ``field=`` naming the rule that cannot be met, and
works out the forms the greedy routines use (free candidates, cap groups, what
is left of each budget). :meth:`SeedRules.guarantee` derives the approximation
ratio the rules allow, in this one place, for every method.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace

import numpy as np
from numpy.typing import NDArray

from ..errors import EmptyGraph, InfeasibleRequest, InvalidParameter, UnknownNode

__all__ = ["SeedRules", "SeedGuarantee"]

ONE_MINUS_INV_E = 1.0 - 1.0 / math.e  # Nemhauser, Wolsey, Fisher 1978
KNAPSACK_RATIO = 0.405  # K. Tang et al. 2021 (arXiv 2008.05391), published
MATROID_RATIO = 0.5  # Fisher, Nemhauser, Wolsey 1978 (from memory)

Caps = int | Mapping[int, int] | Sequence[int] | NDArray[np.int64] | None


@dataclass(frozen=True)
class SeedGuarantee:
    """The worst-case ratio of greedy under a set of rules.

    ``ratio`` sizes the samples (IMM's lambda*, OPIM-C's theta_max); ``proven``
    says whether the ratio is claimed for the chosen set; ``formula`` writes it
    ("1 - 1/e", "1/2", "0.405" or "none proven"); ``caveat`` says why nothing
    is claimed; ``notes`` name the rules the ratio is relative to.
    """

    ratio: float
    formula: str
    proven: bool
    caveat: str | None
    notes: tuple[str, ...]

    @property
    def approximation(self) -> float | None:
        """The ratio claimed for an exact oracle, or None."""
        return self.ratio if self.proven else None

    def formula_with(self, slack: str) -> str:
        """The formula less a sampling slack, e.g. ``"1 - 1/e - epsilon"``."""
        return f"{self.formula} - {slack}" if self.proven else self.formula


@dataclass(frozen=True, eq=False)
class SeedRules:
    """Validated contact rules for seed selection (build with :meth:`build`).

    ``budget`` counts seeds and ``cost_budget`` sums ``costs`` (either or both);
    ``budget_left`` / ``cost_left`` are what remains of each after the
    must-include people (None: no such budget). ``candidates`` are the people
    the greedy may add: eligible, not must-include and, under a cost budget,
    with a known cost. ``group`` maps each person to a cap group (segment code
    + 1, so no segment is group 0) and ``caps_left`` holds each group's cap
    after the must-include people; both None without caps. ``tiebreak`` orders
    equal gains (higher first; the methods set it to degrees or scores).
    """

    n: int
    budget: int | None
    cost_budget: float | None
    must: tuple[int, ...]
    eligible: NDArray[np.bool_]
    candidates: NDArray[np.bool_]
    costs: NDArray[np.float64] | None
    segments: NDArray[np.int64] | None
    segment_labels: tuple[str, ...] | None
    group: NDArray[np.int64] | None
    caps_left: NDArray[np.int64] | None
    budget_left: int | None
    cost_left: float | None
    tiebreak: NDArray[np.float64]

    @classmethod
    def build(
        cls,
        n: int,
        *,
        budget: int | None = None,
        cost_budget: float | None = None,
        costs: NDArray[np.float64] | None = None,
        eligible: NDArray[np.bool_] | None = None,
        must_include: Sequence[int] = (),
        segments: NDArray[np.integer] | None = None,
        max_per_segment: Caps = None,
        segment_labels: Sequence[str] | None = None,
    ) -> SeedRules:
        """Check the rules for a graph of ``n`` people and return them.

        A person with an unknown (NaN) cost cannot be priced, so under a cost
        budget they are never chosen; listing one in ``must_include`` is an
        :class:`InfeasibleRequest` naming ``field="costs"``. Without segments a
        cap has nothing to apply to (``InvalidParameter``, ``field="segments"``).
        An integer ``max_per_segment`` caps every segment, including the group
        of people with no segment (code -1); a mapping caps only the codes it
        names (-1 allowed); a sequence caps code i at entry i.
        ``segment_labels`` name the codes in the seeds' reasons.

        Examples
        --------
        >>> r = SeedRules.build(5, budget=2, must_include=[3])
        >>> r.must, r.budget_left, r.guarantee().formula
        ((3,), 1, '1 - 1/e')
        """
        if n <= 0:
            raise EmptyGraph("the graph has no nodes", field="graph")
        if budget is None and cost_budget is None:
            raise InvalidParameter("give a budget (count) or a cost_budget", field="budget")
        if budget is not None:
            if isinstance(budget, bool) or not isinstance(budget, (int, np.integer)) or budget < 1:
                raise InvalidParameter(f"budget must be a positive integer, got {budget!r}",
                                       field="budget")
            budget = int(budget)
        if eligible is None:
            elig = np.ones(n, dtype=bool)
        else:
            elig = np.asarray(eligible)
            if elig.shape != (n,) or elig.dtype != np.bool_:
                raise InvalidParameter(f"eligible must be a boolean array of length {n}",
                                       field="eligible")
        must = check_seed_list(n, must_include, field="must_include")
        for v in must:
            if not elig[v]:
                raise InfeasibleRequest(
                    f"node index {v} is listed as must include but may not be contacted",
                    field="must_include", node_index=v)
        if budget is not None and len(must) > budget:
            raise InfeasibleRequest(
                f"{len(must)} must-include people exceed the budget of {budget}",
                field="must_include", budget=budget)
        cand = elig.copy()
        cand[must] = False
        cost_arr, cost_left = _cost_rules(n, costs, cost_budget, must, cand)
        seg_arr: NDArray[np.int64] | None = None
        group: NDArray[np.int64] | None = None
        caps_left: NDArray[np.int64] | None = None
        if max_per_segment is not None:
            if segments is None:
                raise InvalidParameter("max_per_segment needs segment codes", field="segments")
            group, caps = _caps(n, segments, max_per_segment)
            seg_arr = group - 1
            used = np.bincount(group[must], minlength=caps.shape[0]) if must else \
                np.zeros(caps.shape[0], np.int64)
            over = np.flatnonzero(used > caps)
            if over.size:
                raise InfeasibleRequest(
                    f"must-include people exceed the cap of segment {int(over[0]) - 1}",
                    field="max_per_segment", segment=int(over[0]) - 1)
            caps_left = (caps - used).astype(np.int64)
        elif segments is not None:
            seg_arr = np.asarray(segments).astype(np.int64)
        budget_left = None if budget is None else budget - len(must)
        if budget is not None and budget_left is not None:
            _count_fits(n, budget, budget_left, len(must), cand, group, caps_left,
                        cost_budget is not None)
        return cls(n, budget, None if cost_budget is None else float(cost_budget), tuple(must),
                   elig, cand, cost_arr, seg_arr,
                   None if segment_labels is None else tuple(segment_labels), group, caps_left,
                   budget_left, cost_left, np.zeros(n))

    def with_tiebreak(self, tiebreak: NDArray[np.float64]) -> SeedRules:
        """The same rules, equal gains ordered by ``tiebreak`` (higher first)."""
        tb = np.asarray(tiebreak, dtype=np.float64)
        if tb.shape != (self.n,):
            raise InvalidParameter(f"degrees must have length {self.n}", field="degrees")
        return replace(self, tiebreak=tb)

    def check_size(self, n: int) -> None:
        """Refuse rules built for a graph of another size."""
        if n != self.n:
            raise InvalidParameter(
                f"the rules were built for {self.n} people, the graph has {n}", field="rules")

    @property
    def kind(self) -> str:
        if self.cost_left is not None:
            return "cost"
        if self.caps_left is not None:
            return "caps"
        return "count"

    @property
    def free_places(self) -> int:
        """Most seeds the greedy may add beyond the must-include ones."""
        cand = int(self.candidates.sum())
        return cand if self.budget_left is None else min(self.budget_left, cand)

    def guarantee(self) -> SeedGuarantee:
        """The greedy ratio these rules allow, relative to the best set obeying them.

        A count budget: 1 - 1/e (Nemhauser, Wolsey, Fisher 1978). Segment caps
        form a partition matroid: 1/2 (Fisher, Nemhauser, Wolsey 1978). A cost
        budget, greedy by benefit/cost and by unit taking the better: 0.405
        (K. Tang et al. 2021). A cost budget with a count budget or caps has no
        proven ratio here; samples are then sized as for the cost budget alone.
        """
        notes = []
        if self.must:
            notes.append("ratio is to the best set that contains the must-include people")
        if self.caps_left is not None:
            notes.append("segment caps form a partition matroid; greedy is 1/2-approximate "
                         "(Fisher, Nemhauser, Wolsey 1978)")
        if self.cost_left is not None:
            notes.append("cost budget: the better of benefit/cost greedy and unit greedy; "
                         "0.405-approximate (K. Tang et al. 2021, arXiv 2008.05391)")
        if self.cost_left is not None:
            if self.budget_left is not None or self.caps_left is not None:
                return SeedGuarantee(KNAPSACK_RATIO, "none proven", False, (
                    "a cost budget combined with a count budget or segment caps has no proven "
                    "ratio here; samples are sized as for the cost budget alone"), tuple(notes))
            return SeedGuarantee(KNAPSACK_RATIO, "0.405", True, None, tuple(notes))
        if self.caps_left is not None:
            return SeedGuarantee(MATROID_RATIO, "1/2", True, None, tuple(notes))
        return SeedGuarantee(ONE_MINUS_INV_E, "1 - 1/e", True, None, tuple(notes))

    def log_feasible_sets(self) -> float:
        """ln of the number of seed sets the greedy could return (the union bound
        of IMM / OPIM-C): ln C(N, k) for N candidates and k free places; under a
        cost budget, ln of the number of sets of at most K people, K the most
        that fit in the budget."""
        cand = int(self.candidates.sum())
        if self.cost_left is None:
            return _ln_choose(cand, min(self.free_places, cand))
        assert self.costs is not None
        c = np.sort(self.costs[self.candidates])
        most = int(np.searchsorted(np.cumsum(c), self.cost_left, side="right"))
        if self.budget_left is not None:
            most = min(most, self.budget_left)
        terms = np.array([_ln_choose(cand, j) for j in range(most + 1)])
        top = float(terms.max())
        return top + math.log(float(np.exp(terms - top).sum()))


def check_seed_list(n: int, seeds: object, *, field: str) -> list[int]:
    """Node indices from ``seeds``, in order, without repeats; unknown -> UnknownNode."""
    out: list[int] = []
    seen: set[int] = set()
    for s in np.atleast_1d(np.asarray(seeds if seeds is not None else [], dtype=object)).tolist():
        if isinstance(s, bool) or not isinstance(s, (int, np.integer)):
            raise InvalidParameter(f"{field} must list node indices, got {s!r}", field=field)
        v = int(s)
        if not 0 <= v < n:
            raise UnknownNode(f"node index {v} is not in the graph (0..{n - 1})",
                              field=field, node_index=v)
        if v not in seen:
            seen.add(v)
            out.append(v)
    return out


def _cost_rules(n: int, costs: object, cost_budget: float | None, must: list[int],
                cand: NDArray[np.bool_]) -> tuple[NDArray[np.float64] | None, float | None]:
    """Check costs and the cost budget; bar people without a cost from ``cand`` (in place)."""
    if cost_budget is None and costs is None:
        return None, None
    if costs is None:
        raise InvalidParameter("cost_budget needs node costs", field="costs")
    cost_arr = np.asarray(costs, dtype=np.float64)
    if cost_arr.shape != (n,):
        raise InvalidParameter(f"costs must have length {n}", field="costs")
    bad = np.flatnonzero(cost_arr < 0)
    if bad.size:
        raise InvalidParameter(f"node index {int(bad[0])} has a negative cost",
                               field="costs", node_index=int(bad[0]))
    if cost_budget is None:
        return None, None
    if not np.isfinite(cost_budget) or cost_budget <= 0:
        raise InvalidParameter(f"cost_budget must be a positive number, got {cost_budget!r}",
                               field="cost_budget")
    for v in must:
        if not np.isfinite(cost_arr[v]):
            raise InfeasibleRequest(f"node index {v} is must include but has no known cost",
                                    field="costs", node_index=v)
    cand &= np.isfinite(cost_arr)
    cost_left = float(cost_budget) - float(cost_arr[must].sum())
    if cost_left < 0:
        raise InfeasibleRequest("the must-include people alone cost more than the cost budget",
                                field="cost_budget")
    if not must and not np.any(cand & (cost_arr <= cost_left)):
        raise InfeasibleRequest("no eligible person fits within the cost budget",
                                field="cost_budget")
    return cost_arr, cost_left


def _count_fits(n: int, budget: int, budget_left: int, musts: int, cand: NDArray[np.bool_],
                group: NDArray[np.int64] | None, caps_left: NDArray[np.int64] | None,
                priced: bool) -> None:
    """Refuse a count budget larger than the people the rules leave (unless a cost budget
    also applies: then the count is only an upper limit)."""
    if budget > n:
        raise InfeasibleRequest(f"budget {budget} exceeds the {n} people in the graph",
                                field="budget", budget=budget, available=n)
    if priced:
        return
    available = int(cand.sum())
    if budget_left > available:
        raise InfeasibleRequest(
            f"budget {budget} exceeds the {available + musts} people who may be "
            "contacted", field="budget", budget=budget, available=available + musts)
    if caps_left is not None and group is not None:
        per = np.bincount(group[cand], minlength=caps_left.shape[0])
        room = int(np.minimum(per, caps_left).sum())
        if room < budget_left:
            raise InfeasibleRequest(
                f"the segment caps allow at most {room + musts} seeds, fewer than "
                f"the budget of {budget}", field="max_per_segment",
                budget=budget, available=room + musts)


def _caps(n: int, segments: object, spec: Caps) -> tuple[NDArray[np.int64], NDArray[np.int64]]:
    seg = np.asarray(segments)
    if (seg.shape != (n,) or not np.issubdtype(seg.dtype, np.integer)
            or (seg.size and seg.min() < -1)):
        raise InvalidParameter(f"segments must be integer codes (-1 = none) of length {n}",
                               field="segments")
    ncodes = int(seg.max()) + 1 if seg.size else 0
    group = seg.astype(np.int64) + 1
    big = np.iinfo(np.int64).max // 4
    if isinstance(spec, (int, np.integer)) and not isinstance(spec, bool):
        if spec < 0:
            raise InvalidParameter("max_per_segment must be >= 0", field="max_per_segment")
        return group, np.full(ncodes + 1, int(spec), dtype=np.int64)
    assert spec is not None
    caps = np.full(ncodes + 1, big, dtype=np.int64)
    items = spec.items() if isinstance(spec, Mapping) else enumerate(np.asarray(spec).tolist())
    for code, cap in items:
        if isinstance(code, bool) or not isinstance(code, (int, np.integer)) or code < -1:
            raise InvalidParameter(f"unknown segment code {code!r} in max_per_segment",
                                   field="max_per_segment")
        if isinstance(cap, bool) or not isinstance(cap, (int, np.integer)) or cap < 0:
            raise InvalidParameter(f"cap for segment {code} must be an integer >= 0",
                                   field="max_per_segment", segment=int(code))
        if int(code) < ncodes:
            caps[int(code) + 1] = int(cap)
    return group, caps


def _ln_choose(n: int, k: int) -> float:
    if k < 0 or k > n:
        return 0.0
    return math.lgamma(n + 1) - math.lgamma(k + 1) - math.lgamma(n - k + 1)
