"""The ``shortlist`` kind's result document (private): seeds, curves, forecasts, guarantee in words.

See :mod:`service.jobs.tasks.shortlist` for what each figure is computed from.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, Any

import numpy as np

if TYPE_CHECKING:
    from service.analytics.forecasts import ForecastResult
    from service.analytics.seeding import Shortlist
    from service.loader import LoadedVersion

    from ._shortlist_rules import Prepared
    from .shortlist import ShortlistParams

__all__ = ["result_document"]


def result_document(
    params: ShortlistParams,
    v: LoadedVersion,
    prep: Prepared,
    chosen: Shortlist,
    evaluated: dict[str, Shortlist],
    fc: dict[str, ForecastResult],
) -> dict[str, Any]:
    """The job's result (the worker adds graph_id, version, params, random_seed)."""
    attrs, ids, labels = v.attrs, v.ids, v.labels
    ev = evaluated[params.method]
    targeted = prep.weights is not None
    seeds = []
    for rank, s in enumerate(ev.seeds, start=1):
        code = int(attrs.segment[s.node])
        region = int(attrs.region[s.node])
        cost = float(attrs.cost[s.node])
        seeds.append(
            {
                "rank": rank,
                "node_id": ids[s.node],
                "label": labels[s.node] or None,
                "marginal_gain": s.marginal_gain,
                "cumulative_reach": s.cumulative_reach,
                "reason": s.reason,
                "segment": attrs.segment_labels[code] if code >= 0 else None,
                "region": attrs.region_labels[region] if region >= 0 else None,
                "cost": cost if math.isfinite(cost) else None,
                "required": s.required,
            }
        )
    own = fc.get(params.method)
    baselines = {}
    for name, sl in evaluated.items():
        if name == params.method:
            continue
        f = fc.get(name)
        baselines[name] = {
            "method": sl.method,
            "seeds": [ids[x] for x in sl.nodes],
            "expected_reach": _reach(f, params.confidence, weighted=False),
            "target_reach": _reach(f, params.confidence, weighted=True) if targeted else None,
            "reach_curve": list(sl.reach_curve),
            "guarantee": _plain(sl.guarantee, sl.method),
        }
    guarantee = dict(chosen.guarantee)
    guarantee["summary"] = _plain(chosen.guarantee, chosen.method)
    doc: dict[str, Any] = {
        **params.describe(),
        "method": params.method,
        "nodes": v.graph.n,
        "edges": v.graph.m,
        "eligible": prep.contactable,
        "budget": params.budget,
        "cost_budget": params.cost_budget,
        "total_cost": (
            float(np.nansum(attrs.cost[list(chosen.nodes)]))
            if params.cost_budget is not None
            else None
        ),
        "target": prep.target,
        "reach_unit": "audience value" if targeted else "people",
        "seeds": seeds,
        "reach_curve": list(ev.reach_curve),
        "reach_curve_source": ev.reach_curve_source
        + ("; the same sets for the shortlist and every baseline" if baselines else ""),
        "selection_reach_curve": list(chosen.reach_curve),
        "selection_reach_curve_source": chosen.reach_curve_source,
        "expected_reach": _reach(own, params.confidence, weighted=False),
        "target_reach": _reach(own, params.confidence, weighted=True) if targeted else None,
        "percentiles": {f"p{k}": x for k, x in own.percentiles.items()} if own else None,
        "segment_reach": sorted(
            ({"segment": s, "expected": e} for s, e in own.segment_reach.items()),
            key=lambda d: -d["expected"],
        )
        if own
        else [],
        "guarantee": guarantee,
        "theta": chosen.theta,
        "samples": chosen.samples,
        "timings": {k: t for k, t in chosen.timings.items() if k != "forecast"},
        "details": dict(chosen.details),
        "baselines": baselines,
        "gain_over_best_baseline": _gain(own, {k: fc.get(k) for k in baselines}, targeted),
        "warnings": prep.warnings,
    }
    return doc


def _reach(f: ForecastResult | None, confidence: float, *, weighted: bool) -> dict[str, Any] | None:
    if f is None:
        return None
    e = f.weighted_reach if weighted else f.expected_reach
    if e is None:
        return None
    return {
        "mean": e.mean,
        "stderr": e.stderr,
        "ci_low": e.ci_low,
        "ci_high": e.ci_high,
        "confidence": confidence,
        "simulations": f.simulations,
        "method": "forward_monte_carlo",
    }


def _gain(
    own: ForecastResult | None, others: dict[str, ForecastResult | None], targeted: bool
) -> dict[str, Any] | None:
    def est(f: ForecastResult) -> Any:
        return f.weighted_reach if targeted and f.weighted_reach is not None else f.expected_reach

    have = {k: f for k, f in others.items() if f is not None}
    if own is None or not have:
        return None
    best = max(have, key=lambda k: est(have[k]).mean)
    a, b = est(own), est(have[best])
    diff = a.mean - b.mean
    return {
        "baseline": best,
        "shortlist_mean": a.mean,
        "baseline_mean": b.mean,
        "difference": diff,
        "relative": diff / b.mean if b.mean > 0 else None,
        # Both lists ran on the same random stream, whose positive correlation makes this an overestimate.
        "stderr": math.hypot(a.stderr, b.stderr),
        "unit": "audience value" if targeted else "people",
    }


def _at_least(p: Any) -> str:
    """A probability as a percentage rounded down, so "at least" stays true as printed (never "1")."""
    if p is None or not math.isfinite(float(p)):
        return "an unstated level"
    pct = math.floor(float(p) * 10_000) / 100  # 0.99999 -> 99.99, never rounded up to 100
    return f"{min(pct, 99.99):.2f}%"


def _plain(g: Any, method: str) -> str:
    """The guarantee in plain words."""
    approx, prob, ratio = g.get("approximation"), g.get("probability"), g.get("certified_ratio")
    if method == "opim" and ratio is not None:
        text = (
            f"Certified on this graph: with probability at least {_at_least(prob)}, this shortlist's expected reach is "
            f"at least {ratio:.1%} of the best possible shortlist under the same rules (at least "
            f"{g.get('certified_lower_bound', float('nan')):,.1f}, while no shortlist exceeds "
            f"{g.get('optimum_upper_bound', float('nan')):,.1f})."
        )
        if approx is not None and approx > ratio:
            text += f" The worst-case guarantee ({g.get('approximation_formula')}) also holds: {approx:.3f}."
        return text
    if approx is None:
        notes = [n for n in g.get("notes", []) if "no guarantee" not in n]
        why = f" ({'; '.join(notes)})" if notes and method in ("imm", "opim") else ""
        if method in ("imm", "opim", "celf"):
            return f"No approximation guarantee{why}; compare its forecast with the baselines'."
        return "A heuristic baseline: no approximation guarantee."
    if approx >= 1.0:
        return "Exact: there was no choice to make."
    if method == "celf":
        return (
            f"Greedy: at least {approx:.3f} ({g.get('approximation_formula')}) of the best shortlist under the "
            "same rules if the reach estimates were exact; with Monte Carlo estimates, up to their error."
        )
    return (
        f"With probability at least {_at_least(prob)}, this shortlist's expected reach is at least {approx:.3f} "
        f"({g.get('approximation_formula')}) of the best possible shortlist under the same rules "
        "(a worst-case guarantee of the method)."
    )
