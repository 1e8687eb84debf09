"""Contact rules for seed selection: validation, feasibility, and seed reasons.

Private to :mod:`service.analytics.seeding.shortlists`. Turns the caller's rules
(eligible mask, must-include people, per-segment caps, costs and a cost
budget) into a validated :class:`~service.analytics.seeding._rr.Rules`, raising
:class:`InfeasibleRequest` / :class:`UnknownNode` / :class:`InvalidParameter`
with ``field=`` naming the rule that cannot be met; and writes the plain-words
reason for each chosen seed from the numbers behind the choice.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from ._rr import Rules
from ..errors import EmptyGraph, InfeasibleRequest, InvalidParameter, UnknownNode

__all__ = ["build_rules", "log_feasible_sets", "check_seed_list", "SeedFacts", "reasons"]

Caps = int | Mapping[int, int] | Sequence[int] | NDArray[np.int64] | None


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


def build_rules(
    n: int,
    *,
    budget: int | None,
    eligible: NDArray[np.bool_] | None,
    must_include: Sequence[int],
    segments: NDArray[np.integer] | None,
    max_per_segment: Caps,
    costs: NDArray[np.float64] | None,
    cost_budget: float | None,
    tiebreak: NDArray[np.float64] | None = None,
) -> Rules:
    """Validate the rules and return them in the greedy routines' form.

    A person with an unknown (NaN) cost cannot be priced, so under a cost
    budget they are never chosen; listing one in ``must_include`` is an
    :class:`InfeasibleRequest` naming ``field="costs"``. Without segments a
    cap has nothing to apply to (``InvalidParameter``, ``field="segments"``).
    An integer ``max_per_segment`` caps every segment, including the group
    of people with no segment (code -1); a mapping caps only the codes it
    names (-1 allowed); a sequence caps code i at entry i.
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

    cost_arr: NDArray[np.float64] | None = None
    budget_left: float | None = None
    if cost_budget is not None or costs is not None:
        if costs is None:
            raise InvalidParameter("cost_budget needs node costs", field="costs")
        cost_arr = np.asarray(costs, dtype=np.float64)
        if cost_arr.shape != (n,):
            raise InvalidParameter(f"costs must have length {n}", field="costs")
        bad = np.flatnonzero(cost_arr < 0)
        if bad.size:
            raise InvalidParameter(f"node index {int(bad[0])} has a negative cost",
                                   field="costs", node_index=int(bad[0]))
        if cost_budget is not None:
            if not np.isfinite(cost_budget) or cost_budget <= 0:
                raise InvalidParameter(
                    f"cost_budget must be a positive number, got {cost_budget!r}",
                    field="cost_budget")
            for v in must:
                if not np.isfinite(cost_arr[v]):
                    raise InfeasibleRequest(
                        f"node index {v} is must include but has no known cost",
                        field="costs", node_index=v)
            cand &= np.isfinite(cost_arr)
            budget_left = float(cost_budget) - float(cost_arr[must].sum())
            if budget_left < 0:
                raise InfeasibleRequest(
                    "the must-include people alone cost more than the cost budget",
                    field="cost_budget")
            if not must and not np.any(cand & (cost_arr <= budget_left)):
                raise InfeasibleRequest("no eligible person fits within the cost budget",
                                        field="cost_budget")
        else:
            cost_arr = None

    group: NDArray[np.int64] | None = None
    caps_left: NDArray[np.int64] | None = None
    if max_per_segment is not None:
        if segments is None:
            raise InvalidParameter("max_per_segment needs segment codes", field="segments")
        group, caps = _caps(n, segments, max_per_segment)
        used = np.bincount(group[must], minlength=caps.shape[0]) if must else \
            np.zeros(caps.shape[0], np.int64)
        over = np.flatnonzero(used > caps)
        if over.size:
            raise InfeasibleRequest(
                f"must-include people exceed the cap of segment {int(over[0]) - 1}",
                field="max_per_segment", segment=int(over[0]) - 1)
        caps_left = (caps - used).astype(np.int64)

    k_left = None if budget is None else budget - len(must)
    if budget is not None:
        assert k_left is not None
        if budget > n:
            raise InfeasibleRequest(f"budget {budget} exceeds the {n} people in the graph",
                                    field="budget", budget=budget, available=n)
        available = int(cand.sum())
        if k_left > available and cost_budget is None:
            raise InfeasibleRequest(
                f"budget {budget} exceeds the {available + len(must)} people who may be "
                "contacted", field="budget", budget=budget, available=available + len(must))
        if caps_left is not None and group is not None and cost_budget is None:
            per = np.bincount(group[cand], minlength=caps_left.shape[0])
            reach = int(np.minimum(per, caps_left).sum())
            if reach < k_left:
                raise InfeasibleRequest(
                    f"the segment caps allow at most {reach + len(must)} seeds, fewer than "
                    f"the budget of {budget}", field="max_per_segment",
                    budget=budget, available=reach + len(must))
    tb = np.zeros(n) if tiebreak is None else np.asarray(tiebreak, dtype=np.float64)
    return Rules(n, tuple(must), cand, group, caps_left, cost_arr, k_left, budget_left, tb)


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


def log_feasible_sets(rules: Rules) -> float:
    """ln of the number of seed sets the greedy could return (the union bound
    of IMM / OPIM-C): ln C(N, k) for N candidates and k free places; under a
    cost budget, ln of the number of sets of at most K people, K the most
    that fit in the budget."""
    cand = int(rules.candidates.sum())
    if rules.budget_left is None:
        return _lnC(cand, min(rules.max_free, cand))
    assert rules.costs is not None
    c = np.sort(rules.costs[rules.candidates])
    kmax = int(np.searchsorted(np.cumsum(c), rules.budget_left, side="right"))
    if rules.k_left is not None:
        kmax = min(kmax, rules.k_left)
    terms = np.array([_lnC(cand, j) for j in range(kmax + 1)])
    top = float(terms.max())
    return top + math.log(float(np.exp(terms - top).sum()))


def _lnC(n: int, k: int) -> float:
    if k < 0 or k > n:
        return 0.0
    return math.lgamma(n + 1) - math.lgamma(k + 1) - math.lgamma(n - k + 1)


@dataclass(frozen=True)
class SeedFacts:
    """The numbers one seed's reason is written from."""

    node: int
    required: bool
    gain: float  # reach no earlier seed has
    alone: float  # reach of this seed on its own
    best_alone: float  # the largest reach on its own among eligible people
    degree_rank: int  # 1 = highest degree
    segment: str | None  # label of its segment if it is the first seed there
    community: int | None  # its community if it is the first seed there
    cost: float | None


def reasons(facts: Sequence[SeedFacts], *, n: int, unit: str = "people") -> list[str]:
    """Plain-words reason for each seed, built from its numbers."""
    out = []
    for i, f in enumerate(facts):
        parts: list[str] = []
        if f.required:
            parts.append("already signed up (must include)")
        if i == 0 or (f.required and f.gain >= f.alone - 1e-9):
            text = f"reaches about {_num(f.gain)} {unit} on its own"
            if f.best_alone > 0 and f.alone >= 0.999 * f.best_alone:
                text += ", the most of anyone eligible"
            parts.append(text)
        elif f.gain < 0.05 * max(f.best_alone, 1e-12) and f.gain < 0.5:
            parts.append(f"adds almost no reach beyond earlier seeds ({_num(f.gain)} {unit})")
        else:
            share = f.gain / f.alone if f.alone > 0 else 1.0
            parts.append(
                f"reaches about {_num(f.gain)} {unit} no earlier seed reaches "
                f"({min(share, 1.0):.0%} of the {_num(f.alone)} it reaches alone)")
        if f.segment is not None:
            parts.append(f"first seed in segment '{f.segment}'")
        if f.community is not None:
            parts.append(f"first seed in community {f.community}")
        parts.append(f"degree rank {f.degree_rank:,} of {n:,}")
        if f.cost is not None and np.isfinite(f.cost):
            per = f"{f.gain / f.cost:.3g} {unit} per unit of cost" if f.cost > 0 else "no cost"
            parts.append(f"cost {f.cost:.3g} ({per})")
        out.append("; ".join(parts))
    return out


def _num(x: float) -> str:
    if not np.isfinite(x):
        return "?"
    return f"{x:.1f}" if abs(x) < 10 else f"{x:,.0f}"
