"""Contact rules: who may be chosen and how many, from any door, checked once.

:class:`ContactRules` is what a caller asks for (a budget or a cost budget,
must-include and excluded people by id, caps per segment by label, the target
audience); it checks what needs no graph. :func:`resolve_rules` resolves it
against a loaded version into the analytics' :class:`SeedRules`: ids become node
indices, consent and exclusions an eligibility mask, segment labels codes, and
what cannot be met an error naming the rule in ``field``. Nobody without contact
consent is ever a seed. Only counting here, no sampling, so it is cheap enough to
run when a job is created.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any, Literal

import numpy as np
from numpy.typing import NDArray

from service.analytics.errors import InfeasibleRequest, InvalidParameter, UnknownNode
from service.analytics.seeding.rules import SeedRules
from service.usecases.integrity_rules import FlaggedRule, flagged_ids, flagged_warning
from service.usecases.loading import LoadedVersion

if TYPE_CHECKING:
    from .shortlist_params import ShortlistParams

__all__ = [
    "LISTED",
    "ContactRules",
    "ResolvedRules",
    "budget_problem",
    "caps_problem",
    "resolve_rules",
    "target_problem",
]

LISTED = 20  # ids listed in an error or warning; the count says how many there were


def budget_problem(budget: int | None, cost_budget: float | None) -> str | None:
    """What is wrong with the budgets, in the caller's words, or None."""
    if (budget is None) == (cost_budget is None):
        return "give exactly one of budget (a number of seeds) or cost_budget (a total cost)"
    return None


def caps_problem(caps: int | Mapping[str, int] | None) -> str | None:
    if (isinstance(caps, int) and caps < 0) or (
        isinstance(caps, Mapping) and any(v < 0 for v in caps.values())
    ):
        return "max_per_segment caps must be >= 0"
    return None


def target_problem(target: str | Sequence[str] | None) -> str | None:
    if target is not None and not isinstance(target, str) and not target:
        return "target_segment must name at least one segment"
    return None


@dataclass(frozen=True)
class ContactRules:
    """Who may be chosen and how many: built and checked once, from any door.

    Exactly one of ``budget`` (seeds) and ``cost_budget`` (summed node cost;
    people without a cost are never chosen). ``must_include`` people are placed
    first; ``exclude`` people (and everyone without contact consent) are never
    seeds; ``max_per_segment`` caps the seeds of every segment (an integer,
    people without a segment forming one more group) or of the segments it names;
    ``target_segment`` and ``weights="value"`` make only the target audience's
    reach count.
    """

    budget: int | None = None
    cost_budget: float | None = None
    must_include: tuple[str, ...] = ()
    exclude: tuple[str, ...] = ()
    max_per_segment: int | Mapping[str, int] | None = None
    target_segment: tuple[str, ...] | None = None
    weights: Literal["value"] | None = None
    flagged: FlaggedRule | None = None  # people an integrity job flagged, never seeds

    def __post_init__(self) -> None:
        for name, problem in (
            ("budget", budget_problem(self.budget, self.cost_budget)),
            ("max_per_segment", caps_problem(self.max_per_segment)),
            ("target_segment", target_problem(self.target_segment)),
        ):
            if problem:
                raise InvalidParameter(problem, field=name)

    @classmethod
    def from_params(cls, params: ShortlistParams) -> ContactRules:
        """The rules of a shortlist request (already checked by its model)."""
        target = params.target_segment
        return cls(
            budget=params.budget,
            cost_budget=params.cost_budget,
            must_include=tuple(params.must_include),
            exclude=tuple(params.exclude),
            max_per_segment=params.max_per_segment,
            target_segment=(target,) if isinstance(target, str) else
            None if target is None else tuple(target),
            weights=params.weights,
            flagged=params.exclude_flagged,
        )


@dataclass(frozen=True)
class ResolvedRules:
    """The rules resolved against a version: the analytics' rules, audience weights, warnings."""

    rules: SeedRules  # eligible: contactable, not excluded, segment not already full
    contactable: int  # people with consent who are not excluded
    weights: NDArray[np.float64] | None
    target: dict[str, Any] | None
    warnings: list[dict[str, Any]] = field(default_factory=list)


def resolve_rules(contact: ContactRules, version: LoadedVersion) -> ResolvedRules:
    """Resolve ids and rules against ``version``; raise the 422 errors naming the rule."""
    attrs, ids, n = version.attrs, version.ids, version.graph.n
    warnings: list[dict[str, Any]] = []
    must = _resolve(version, list(contact.must_include), "must_include", warnings)
    excluded = _resolve(version, list(contact.exclude), "exclude", warnings)
    flagged = _flagged(contact, version, must, warnings)
    consent = attrs.contactable()
    eligible = consent.copy()
    eligible[excluded] = False
    eligible[flagged] = False
    for rule, bad in (
        ("consent", [v for v in must if not consent[v]]),
        ("exclude", sorted(set(must) & set(excluded))),
    ):
        if bad:
            names = [ids[v] for v in bad]
            why = "have no contact consent" if rule == "consent" else "are also listed in exclude"
            raise InfeasibleRequest(
                f"{len(names)} must-include person(s) {why}: {_show(names)}",
                field="must_include",
                node_ids=names[:LISTED],
                count=len(names),
            )
    barred = int(n - consent.sum())
    if barred:
        warnings.append(
            {
                "code": "not_contactable",
                "count": barred,
                "message": f"{barred} people without contact consent are never seeds",
            }
        )
    caps = _caps(contact, version, must)
    contactable = int(eligible.sum())
    costs = None
    if contact.cost_budget is not None:
        costs = np.asarray(attrs.cost, dtype=np.float64)
        known = np.isfinite(costs)
        if not known.any():
            raise InfeasibleRequest(
                "cost_budget needs node costs; this version has none (upload a cost column)",
                field="cost_budget",
            )
        nocost = [v for v in must if not known[v]]
        if nocost:
            names = [ids[v] for v in nocost]
            raise InfeasibleRequest(
                f"must-include people without a cost under a cost budget: {_show(names)}",
                field="must_include",
                node_ids=names[:LISTED],
                count=len(names),
            )
        if (costs[known] < 0).any():
            v = int(np.flatnonzero(known & (costs < 0))[0])
            raise InfeasibleRequest(
                f"node {ids[v]!r} has a negative cost", field="cost_budget", node_id=ids[v]
            )
        missing = int((~known & eligible).sum())
        if missing:
            warnings.append(
                {
                    "code": "nodes_without_cost",
                    "count": missing,
                    "message": f"{missing} eligible people have no cost and are never chosen",
                }
            )
    _feasible(contact, version, must, eligible, caps, costs)
    if caps is not None:
        # A segment whose cap the must-include people already fill (or a cap of 0) is closed
        # here: the analytics' greedy only closes a segment after one of its own picks.
        seg = attrs.segment
        open_cap = (
            {int(c): caps for c in np.unique(seg).tolist()} if isinstance(caps, int) else caps
        )
        is_must = np.zeros(n, dtype=bool)
        is_must[must] = True
        for code, cap in open_cap.items():
            if cap - int(np.count_nonzero(seg[must] == code)) <= 0:
                eligible[(seg == code) & ~is_must] = False
    rules = SeedRules.build(
        n,
        budget=contact.budget,
        cost_budget=contact.cost_budget,
        costs=costs,
        eligible=eligible,
        must_include=must,
        segments=attrs.segment if caps is not None else None,
        max_per_segment=caps,
        segment_labels=attrs.segment_labels,
    )
    weights, target = _target(contact, version, warnings)
    return ResolvedRules(rules, contactable, weights, target, warnings)


def _flagged(contact: ContactRules, version: LoadedVersion, must: list[int],
             warnings: list[dict[str, Any]]) -> list[int]:
    """The people ``exclude_flagged`` leaves out; a must-include person among them is refused."""
    rule = contact.flagged
    if rule is None:
        return []
    flagged = _resolve(version, flagged_ids(rule), "exclude_flagged", warnings)
    both = sorted(set(must) & set(flagged))
    if both:
        names = [version.ids[v] for v in both]
        raise InfeasibleRequest(
            f"{len(names)} must-include person(s) are flagged for review by job {rule.job}: {_show(names)}; "
            "review them, then drop them from must_include or leave exclude_flagged out",
            field="must_include", node_ids=names[:LISTED], count=len(names))
    note = flagged_warning(rule, len(flagged))
    if note is not None:
        warnings.append(note)
    return flagged


def _feasible(
    contact: ContactRules,
    v: LoadedVersion,
    must: list[int],
    eligible: NDArray[np.bool_],
    caps: int | dict[int, int] | None,
    costs: NDArray[np.float64] | None,
) -> None:
    """The counting checks of the rules (the analytics check them again): cheap, no sampling."""
    free = eligible.copy()
    free[must] = False
    if costs is not None:
        assert contact.cost_budget is not None
        free &= np.isfinite(costs)
        left = contact.cost_budget - float(costs[must].sum())
        if left < 0:
            raise InfeasibleRequest(
                f"the must-include people alone cost {contact.cost_budget - left:.6g}, more "
                f"than the cost budget of {contact.cost_budget:.6g}",
                field="cost_budget",
            )
        if not must and not (free & (costs <= left)).any():
            raise InfeasibleRequest(
                f"no eligible person costs at most the cost budget of {contact.cost_budget:.6g}",
                field="cost_budget",
            )
        return
    budget = contact.budget
    assert budget is not None
    # More must-include people than the budget is refused by SeedRules.build (same words).
    if len(must) > budget:
        return
    available = int(free.sum()) + len(must)
    if budget > available:
        raise InfeasibleRequest(
            f"budget {budget} exceeds the {available} people who may be contacted (consent given, not excluded)",
            field="budget",
            budget=budget,
            available=available,
        )
    if caps is not None:
        group = v.attrs.segment.astype(np.int64)
        codes, counts = np.unique(group[free], return_counts=True)
        room = 0
        for code, count in zip(codes.tolist(), counts.tolist()):
            cap = caps if isinstance(caps, int) else caps.get(code)
            used = sum(1 for x in must if int(group[x]) == code)
            room += count if cap is None else max(min(count, cap - used), 0)
        if room + len(must) < budget:
            raise InfeasibleRequest(
                f"the segment caps allow at most {room + len(must)} seeds, fewer than the "
                f"budget of {budget}",
                field="max_per_segment",
                budget=budget,
                available=room + len(must),
            )


def _show(names: Sequence[str]) -> str:
    return ", ".join(repr(s) for s in names[:5]) + (" ..." if len(names) > 5 else "")


def _resolve(
    v: LoadedVersion, names: list[str], field: str, warnings: list[dict[str, Any]]
) -> list[int]:
    unique = list(dict.fromkeys(names))
    if len(unique) < len(names):
        warnings.append(
            {
                "code": f"duplicate_{field}",
                "count": len(names) - len(unique),
                "message": f"{len(names) - len(unique)} repeated id(s) in {field}; each counts once",
            }
        )
    index = v.index
    got = [index.get(s, -1) for s in unique]
    unknown = [s for s, i in zip(unique, got) if i < 0]
    if unknown:
        raise UnknownNode(
            f"{len(unknown)} id(s) in {field} are not in this version: {_show(unknown)}",
            field=field,
            unknown=unknown[:LISTED],
            unknown_count=len(unknown),
        )
    return got


def _labels_to_codes(v: LoadedVersion, labels: list[str], field: str) -> list[int]:
    known = list(v.attrs.segment_labels)
    bad = [s for s in labels if s not in known]
    if bad:
        raise InfeasibleRequest(
            f"segment(s) {_show(bad)} named in {field} are not in this version (segments: "
            f"{_show(known) if known else 'none'})",
            field=field,
            unknown=bad[:LISTED],
            known=known[:50],
        )
    return [known.index(s) for s in labels]


def _caps(
    contact: ContactRules, v: LoadedVersion, must: list[int]
) -> int | dict[int, int] | None:
    spec = contact.max_per_segment
    if spec is None:
        return None
    seg = v.attrs.segment
    if not v.attrs.segment_labels:
        raise InfeasibleRequest(
            "max_per_segment needs segments; this version has none (upload a segment column)",
            field="max_per_segment",
        )
    caps: int | dict[int, int]
    if isinstance(spec, int):
        caps = spec
        limit = {int(c): spec for c in set(seg[must].tolist())}
    else:
        codes = _labels_to_codes(v, list(spec), "max_per_segment")
        caps = {c: spec[label] for c, label in zip(codes, spec)}
        limit = caps
    for code, cap in limit.items():
        inside = [v.ids[x] for x in must if int(seg[x]) == code]
        if len(inside) > cap:
            label = v.attrs.segment_labels[code] if code >= 0 else None
            where = f"segment {label!r}" if label is not None else "the people without a segment"
            raise InfeasibleRequest(
                f"{len(inside)} must-include people are in {where}, above its cap of {cap}",
                field="max_per_segment",
                segment=label,
                node_ids=inside[:LISTED],
            )
    return caps


def _target(
    contact: ContactRules, v: LoadedVersion, warnings: list[dict[str, Any]]
) -> tuple[NDArray[np.float64] | None, dict[str, Any] | None]:
    """Per-node weights of the reach that counts: segment membership, node value, or both."""
    if contact.target_segment is None and contact.weights is None:
        return None, None
    n = v.graph.n
    w = np.ones(n, dtype=np.float64)
    target: dict[str, Any] = {"segments": None, "weights": contact.weights}
    if contact.target_segment is not None:
        labels = list(contact.target_segment)
        codes = _labels_to_codes(v, labels, "target_segment")
        w *= np.isin(v.attrs.segment, codes)
        target["segments"] = labels
        target["members"] = int(np.count_nonzero(w))
    if contact.weights == "value":
        value = v.attrs.value
        given = np.isfinite(value)
        if not given.any():
            raise InfeasibleRequest(
                "weights 'value' needs node values; this version has none", field="weights"
            )
        if (value[given] < 0).any():
            x = int(np.flatnonzero(given & (value < 0))[0])
            raise InfeasibleRequest(
                f"node {v.ids[x]!r} has a negative value", field="weights", node_id=v.ids[x]
            )
        missing = int(n - np.count_nonzero(given))
        if missing:
            warnings.append(
                {
                    "code": "nodes_without_value",
                    "count": missing,
                    "message": f"{missing} people have no value and count 0 in the target reach",
                }
            )
        w *= np.where(given, value, 0.0)
    if w.sum() <= 0:
        raise InfeasibleRequest(
            "the target audience has no one of positive value",
            field="target_segment" if contact.target_segment is not None else "weights",
        )
    target["total"] = float(w.sum())
    return w, target
