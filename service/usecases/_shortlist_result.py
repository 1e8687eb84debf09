"""The shortlist's answer document (private): seeds, curves, forecasts, guarantee in words.

See :mod:`service.usecases.shortlists` for what each figure is computed from.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, Any

import numpy as np

if TYPE_CHECKING:
    from service.analytics.diffusion.forecasts import ForecastResult
    from service.analytics.diffusion.paired import Interval, PairedComparison
    from service.analytics.seeding.shortlists import Shortlist
    from service.usecases.loading import LoadedVersion

    from .contact_rules import ResolvedRules
    from .shortlist_params import ShortlistParams

__all__ = ["LABELS", "result_document", "verdict"]

BASELINE_METHODS = ("degree_discount", "top_degree", "top_pagerank", "top_betweenness")


def result_document(
    params: ShortlistParams,
    v: LoadedVersion,
    prep: ResolvedRules,
    chosen: Shortlist,
    evaluated: dict[str, Shortlist],
    fc: dict[str, ForecastResult],
    cmp: PairedComparison | None = None,
    used: str | None = None,
) -> dict[str, Any]:
    """The job's result (the worker adds graph_id, version, params, random_seed).

    ``used`` names the list returned (the chosen method's, or a baseline that reached
    clearly more on the same simulated campaigns); ``cmp`` is that comparison.
    """
    attrs, ids, labels = v.attrs, v.ids, v.labels
    used = used or params.method
    swapped = used != params.method
    ev = evaluated[used]
    targeted = prep.weights is not None
    unit = _unit(prep)
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
    own = fc.get(used)
    baselines = {}
    for name, sl in evaluated.items():
        if name == params.method:
            continue
        f = fc.get(name)
        baselines[name] = {
            "method": sl.method,
            "label": _label(name, len(sl.seeds)),
            "seeds": [ids[x] for x in sl.nodes],
            "expected_reach": _reach(f, params.confidence, weighted=False),
            "target_reach": _reach(f, params.confidence, weighted=True) if targeted else None,
            "reach_curve": list(sl.reach_curve),
            "guarantee": _plain(sl.guarantee, sl.method),
        }
    guarantee = dict(chosen.guarantee)
    guarantee["summary"] = _plain(chosen.guarantee, chosen.method)
    method_note = None
    replaced = None
    if swapped:
        label = _label(used, len(ev.seeds))
        method_note = (
            f"{label[0].upper()}{label[1:]} reached more {unit} than the optimised list on this "
            "graph, in the same simulated campaigns; they are returned instead."
        )
        notes = guarantee.get("notes")
        guarantee["notes"] = [
            *(notes if isinstance(notes, list) else []),
            "the returned list reached more than the optimised list in the same simulated "
            "campaigns, so the optimised list's guarantee applies to it as well",
        ]
        guarantee["summary"] = (
            f"{guarantee['summary']} The returned list ({label}) reached more than the "
            "optimised list in the same simulated campaigns, so the guarantee applies to it "
            "as well."
        )
        mine = evaluated[params.method]
        replaced = {
            "method": params.method,
            "seeds": [ids[x] for x in mine.nodes],
            "expected_reach": _reach(fc.get(params.method), params.confidence, weighted=False),
            "target_reach": _reach(fc.get(params.method), params.confidence, weighted=True)
            if targeted
            else None,
            "reach_curve": list(mine.reach_curve),
        }
    comparisons = _comparisons(cmp, used, evaluated, params, unit)
    gains = [s.marginal_gain for s in ev.seeds]
    rises = [
        i + 2 for i, (a, b) in enumerate(zip(gains, gains[1:])) if b > a + 1e-9 * max(abs(a), 1)
    ]
    doc: dict[str, Any] = {
        **params.describe(),
        "method": params.method,
        "method_used": used,
        "method_note": method_note,
        "replaced": replaced,
        "nodes": v.graph.n,
        "edges": v.graph.m,
        "eligible": prep.contactable,
        "budget": params.budget,
        "cost_budget": params.cost_budget,
        "total_cost": (
            float(np.nansum(attrs.cost[list(ev.nodes)]))
            if params.cost_budget is not None
            else None
        ),
        "target": prep.target,
        "reach_unit": "audience value" if targeted else "people",
        "seeds": seeds,
        "reach_curve": list(ev.reach_curve),
        "reach_curve_source": ev.reach_curve_source
        + ("; the same sets for the shortlist and every baseline" if baselines else ""),
        "marginal_gains_note": _gains_note(rises, params, swapped),
        "selection_reach_curve": list(chosen.reach_curve) if not swapped else list(ev.reach_curve),
        "selection_reach_curve_source": chosen.reach_curve_source
        if not swapped
        else "the returned list was not chosen on samples; the same as reach_curve",
        "expected_reach": _reach(own, params.confidence, weighted=False),
        "target_reach": _reach(own, params.confidence, weighted=True) if targeted else None,
        "percentiles": {f"p{k}": x for k, x in own.percentiles.items()} if own else None,
        "segment_reach": sorted(
            ({"segment": s, "expected": e} for s, e in own.segment_reach.items()),
            key=lambda d: -d["expected"],
        )
        if own
        else [],
        "evaluation": _evaluation(cmp, params),
        "comparisons": comparisons,
        "guarantee": guarantee,
        "theta": chosen.theta,
        "samples": chosen.samples,
        "timings": {k: t for k, t in chosen.timings.items() if k != "forecast"},
        "details": dict(chosen.details),
        "baselines": baselines,
        "gain_over_best_baseline": _gain(cmp, used, fc, targeted, params.confidence),
        "warnings": prep.warnings,
    }
    return doc


LABELS = {
    "top_degree": "the {k} best-connected people",
    "top_pagerank": "the {k} people with the highest PageRank",
    "top_betweenness": "the {k} people who most often link other people (betweenness)",
    "degree_discount": "the {k} people picked by degree discount",
    "imm": "the optimised list (IMM)",
    "opim": "the optimised list (OPIM-C)",
    "celf": "the optimised list (greedy on simulations)",
}


def _label(name: str, k: int) -> str:
    return LABELS.get(name, name).format(k=f"{k:,}")


def _unit(prep: ResolvedRules) -> str:
    if prep.weights is None:
        return "people"
    target = prep.target or {}
    if target.get("weights") == "value":
        return "audience value"
    return "people in the target audience"


def _whole(x: float) -> str:
    return f"{x:,.0f}".replace("-0", "0") if abs(x) < 0.5 else f"{x:,.0f}"


def verdict(diff: Interval, label: str, unit: str, confidence: float) -> str:
    """The paired difference (returned list minus ``label``) in plain words, whole numbers."""
    level = f"{confidence:.0%}"
    if diff.ci_low > 0:
        return (
            f"The shortlist reaches {_whole(diff.mean)} more {unit} than {label} "
            f"({level} interval {_whole(diff.ci_low)} to {_whole(diff.ci_high)})."
        )
    if diff.ci_high < 0:
        return (
            f"The shortlist reaches {_whole(-diff.mean)} fewer {unit} than {label} "
            f"({level} interval {_whole(-diff.ci_high)} to {_whole(-diff.ci_low)} fewer)."
        )
    lo, hi = _whole(diff.ci_low), _whole(diff.ci_high)
    return (
        f"No clear difference from {label} (difference {_whole(diff.mean)} {unit}, "
        f"{level} interval {lo if lo.startswith('-') or lo == '0' else '+' + lo} to "
        f"{hi if hi.startswith('-') or hi == '0' else '+' + hi})."
    )


def _comparisons(
    cmp: PairedComparison | None,
    used: str,
    evaluated: dict[str, Shortlist],
    params: ShortlistParams,
    unit: str,
) -> list[dict[str, Any]]:
    from service.analytics.diffusion.paired import paired_interval

    if cmp is None:
        return []
    out = []
    for name, other in cmp.per_world.items():
        if name == used:
            continue
        d = paired_interval(cmp.per_world[used], other, params.confidence)
        label = _label(name, len(evaluated[name].seeds))
        out.append(
            {
                "baseline": name,
                "label": label,
                "reach": cmp.reach[name].mean,
                "difference": {
                    "mean": d.mean,
                    "stderr": d.stderr,
                    "ci_low": d.ci_low,
                    "ci_high": d.ci_high,
                    "confidence": params.confidence,
                },
                "verdict": verdict(d, label, unit, params.confidence),
            }
        )
    return out


def _evaluation(cmp: PairedComparison | None, params: ShortlistParams) -> dict[str, Any] | None:
    if cmp is None:
        return None
    return {
        "simulations": cmp.simulations,
        "random_seed": cmp.random_seed,
        "confidence": cmp.confidence,
        "stopped_because": cmp.stopped_because,
        "note": (
            f"The shortlist and every baseline were simulated on the same {cmp.simulations:,} "
            "campaigns, so their differences come from the people chosen, not from chance in "
            "the simulation. expected_reach is the mean over these campaigns: a forecast of the "
            "same people with the same random_seed and "
            f"simulations={cmp.simulations} gives the same figure."
            + (
                ""
                if cmp.stopped_because == "precision_reached" or len(cmp.per_world) < 2
                else " The simulation cap was reached before every comparison was within 1% "
                "of the reach; raise forecast_max_runs for narrower intervals."
            )
        ),
    }


def _gains_note(rises: list[int], params: ShortlistParams, swapped: bool) -> str | None:
    if not rises:
        return None
    where = ", ".join(str(r) for r in rises[:5]) + (" and more" if len(rises) > 5 else "")
    if swapped or params.method in BASELINE_METHODS:
        why = "the list is ordered by its own score, not by added reach"
    elif params.cost_budget is not None:
        why = "under a cost budget the list is ordered by reach added per unit of cost"
    else:
        why = (
            "the list was chosen on one set of samples and its gains are measured on fresh "
            "ones, so close calls can come out in either order"
        )
    if len(rises) == 1:
        return f"The seed at rank {where} adds more than the seed before it: {why}."
    return f"The seeds at ranks {where} add more than the seed before each: {why}."


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
    cmp: PairedComparison | None,
    used: str,
    fc: dict[str, ForecastResult],
    targeted: bool,
    confidence: float,
) -> dict[str, Any] | None:
    """The returned list against the best other list, paired on the same campaigns."""
    from service.analytics.diffusion.paired import paired_interval

    if cmp is None or len(cmp.per_world) < 2:
        return None
    others = [k for k in cmp.per_world if k != used and k in fc]
    if not others:
        return None
    best = max(others, key=lambda k: cmp.reach[k].mean)
    a, b = cmp.reach[used].mean, cmp.reach[best].mean
    d = paired_interval(cmp.per_world[used], cmp.per_world[best], confidence)
    return {
        "baseline": best,
        "shortlist_mean": a,
        "baseline_mean": b,
        "difference": d.mean,
        "relative": d.mean / b if b > 0 else None,
        "stderr": d.stderr,  # paired: both lists ran on the same simulated campaigns
        "ci_low": d.ci_low,
        "ci_high": d.ci_high,
        "confidence": confidence,
        "unit": "audience value" if targeted else "people",
    }


def _at_least(p: Any) -> str:
    """A probability as a percentage rounded down, so "at least" stays true as printed (never "1")."""
    if p is None or not math.isfinite(float(p)):
        return "an unstated level"
    pct = math.floor(float(p) * 10_000) / 100  # 0.99999 -> 99.99, never rounded up to 100
    return f"{min(pct, 99.99):.2f}%"


def _floor_pct(x: float) -> str:
    """A share as a whole percent, rounded down: an "at least" never overstates (0.405 -> 40%)."""
    return f"{math.floor(float(x) * 100)}%"


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
            text += (f" The method's worst-case guarantee also holds: at least {_floor_pct(approx)} of the best "
                     f"({g.get('approximation_formula')}).")
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
            f"Greedy: at least {_floor_pct(approx)} of the best shortlist's reach under the same rules if the reach "
            f"estimates were exact ({g.get('approximation_formula')}); with simulated estimates, up to their error."
        )
    return (
        f"With probability at least {_at_least(prob)}, this shortlist's expected reach is at least {_floor_pct(approx)} "
        f"of the best possible shortlist's under the same rules (the method's worst-case guarantee, "
        f"{g.get('approximation_formula')})."
    )
