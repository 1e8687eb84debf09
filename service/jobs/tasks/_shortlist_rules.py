"""The ``shortlist`` kind's contact rules, resolved against a version (private).

Caller ids become node indices, consent and exclusions an eligibility mask,
segment labels codes, and what cannot be met an error naming the rule in
``field`` (see :mod:`service.jobs.tasks.shortlist`). Only counting here, no
sampling, so it is cheap enough to run at job creation.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np
from numpy.typing import NDArray

if TYPE_CHECKING:
    from service.usecases.loading import LoadedVersion

    from .shortlist import ShortlistParams

__all__ = ["LISTED", "Prepared", "resolve_rules"]

LISTED = 20  # ids listed in an error or warning; the count says how many there were


@dataclass(frozen=True)
class Prepared:
    """The rules resolved against a version: indices, masks, caps, audience weights, warnings."""

    must: list[int]
    eligible: NDArray[np.bool_]  # may be chosen: contactable, not excluded, segment not full
    contactable: int  # people with consent who are not excluded
    caps: int | dict[int, int] | None
    costs: NDArray[np.float64] | None
    weights: NDArray[np.float64] | None
    target: dict[str, Any] | None
    warnings: list[dict[str, Any]]


def resolve_rules(
    params: ShortlistParams, version: LoadedVersion, *, check_settings: bool = False
) -> Prepared:
    """Resolve ids and rules against ``version``; raise the 422 errors naming the rule."""
    from service.analytics.errors import InfeasibleRequest

    if check_settings:
        params.check_version(version)
    attrs, ids, n = version.attrs, version.ids, version.graph.n
    warnings: list[dict[str, Any]] = []
    must = _resolve(version, params.must_include, "must_include", warnings)
    excluded = _resolve(version, params.exclude, "exclude", warnings)
    consent = attrs.contactable()
    eligible = consent.copy()
    eligible[excluded] = False
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
    caps = _caps(params, version, must)
    contactable = int(eligible.sum())
    costs = None
    if params.cost_budget is not None:
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
    _feasible(params, version, must, eligible, caps, costs)
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
    weights, target = _target(params, version, warnings)
    return Prepared(must, eligible, contactable, caps, costs, weights, target, warnings)


def _feasible(
    params: ShortlistParams,
    v: LoadedVersion,
    must: list[int],
    eligible: NDArray[np.bool_],
    caps: int | dict[int, int] | None,
    costs: NDArray[np.float64] | None,
) -> None:
    """The counting checks of the rules (the analytics check them again): cheap, no sampling."""
    from service.analytics.errors import InfeasibleRequest

    free = eligible.copy()
    free[must] = False
    if costs is not None:
        assert params.cost_budget is not None
        free &= np.isfinite(costs)
        left = params.cost_budget - float(costs[must].sum())
        if left < 0:
            raise InfeasibleRequest(
                f"the must-include people alone cost {params.cost_budget - left:.6g}, more "
                f"than the cost budget of {params.cost_budget:.6g}",
                field="cost_budget",
            )
        if not must and not (free & (costs <= left)).any():
            raise InfeasibleRequest(
                f"no eligible person costs at most the cost budget of {params.cost_budget:.6g}",
                field="cost_budget",
            )
        return
    k = params.budget
    assert k is not None
    if len(must) > k:
        raise InfeasibleRequest(
            f"{len(must)} must-include people exceed the budget of {k}",
            field="must_include",
            budget=k,
        )
    available = int(free.sum()) + len(must)
    if k > available:
        raise InfeasibleRequest(
            f"budget {k} exceeds the {available} people who may be contacted (consent given, not excluded)",
            field="budget",
            budget=k,
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
        if room + len(must) < k:
            raise InfeasibleRequest(
                f"the segment caps allow at most {room + len(must)} seeds, fewer than the "
                f"budget of {k}",
                field="max_per_segment",
                budget=k,
                available=room + len(must),
            )


def _show(names: Sequence[str]) -> str:
    return ", ".join(repr(s) for s in names[:5]) + (" ..." if len(names) > 5 else "")


def _resolve(
    v: LoadedVersion, names: list[str], field: str, warnings: list[dict[str, Any]]
) -> list[int]:
    from service.analytics.errors import UnknownNode

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
    from service.analytics.errors import InfeasibleRequest

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
    params: ShortlistParams, v: LoadedVersion, must: list[int]
) -> int | dict[int, int] | None:
    from service.analytics.errors import InfeasibleRequest

    spec = params.max_per_segment
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
    params: ShortlistParams, v: LoadedVersion, warnings: list[dict[str, Any]]
) -> tuple[NDArray[np.float64] | None, dict[str, Any] | None]:
    """Per-node weights of the reach that counts: segment membership, node value, or both."""
    from service.analytics.errors import InfeasibleRequest

    if params.target_segment is None and params.weights is None:
        return None, None
    n = v.graph.n
    w = np.ones(n, dtype=np.float64)
    target: dict[str, Any] = {"segments": None, "weights": params.weights}
    if params.target_segment is not None:
        labels = (
            [params.target_segment]
            if isinstance(params.target_segment, str)
            else params.target_segment
        )
        codes = _labels_to_codes(v, labels, "target_segment")
        w *= np.isin(v.attrs.segment, codes)
        target["segments"] = labels
        target["members"] = int(np.count_nonzero(w))
    if params.weights == "value":
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
            field="target_segment" if params.target_segment is not None else "weights",
        )
    target["total"] = float(w.sum())
    return w, target
