"""``shortlist``: whom to contact first, under the campaign's contact rules, with a guarantee.

The job kind only: the params model, the checks at creation and the work are the
shortlist use case's (:mod:`service.usecases.shortlists`).
"""

from __future__ import annotations

from service.usecases import result_models, result_plots, result_tables
from service.usecases.shortlist_params import (
    BASELINES,
    CELF_MAX_WORK,
    METHODS,
    PRECHECK_MAX_EDGES,
    ShortlistParams,
)
from service.usecases.integrity_rules import resolve_exclude_flagged
from service.usecases.shortlists import build_shortlist, precheck, prepare


from .. import admission
from ..kinds import JobKind, TaskContext, TaskOutput

__all__ = [
    "BASELINES",
    "CELF_MAX_WORK",
    "KIND",
    "METHODS",
    "PRECHECK_MAX_EDGES",
    "ShortlistParams",
    "precheck",
    "prepare",
    "run",
]


def run(ctx: TaskContext, params: ShortlistParams) -> TaskOutput:
    return TaskOutput(data=build_shortlist(ctx.load(), params, progress=ctx.progress))


KIND = JobKind(
    name="shortlist",
    params=ShortlistParams,
    result=result_models.ShortlistResult,
    run=run,
    csv=result_tables.shortlist_table,
    plots={"reach_curve": result_plots.reach_curve, "segment_reach": result_plots.segment_reach},
    estimate=admission.shortlist_estimate,
    precheck=precheck,
    resolve=resolve_exclude_flagged,
    summary="Seed shortlist under contact rules: whom to contact first, with its guarantee and baselines",
    result_description=(
        "method (asked for) and method_used (the list returned: a baseline when it reached clearly more on the "
        "same simulated campaigns, then method_note says so and replaced holds the optimised list {method, seeds, "
        "expected_reach, target_reach, reach_curve}); "
        "seeds [{rank, node_id, label, marginal_gain, cumulative_reach, reason, segment, region, cost, required}]; "
        "marginal_gains_note (why a later seed adds more, when one does); evaluation {simulations, random_seed, "
        "confidence, stopped_because, note}; comparisons [{baseline, label, reach, difference {mean, stderr, "
        "ci_low, ci_high, confidence}, verdict}], paired on the same simulated campaigns; "
        "reach_curve (k = 1..budget, on fresh RR sets shared with the baselines) and reach_curve_source; "
        "selection_reach_curve (the method's own estimate); expected_reach and, with a target, target_reach "
        "{mean, stderr, ci_low, ci_high, confidence, simulations, method} by forward Monte Carlo independent of "
        "the choice, the mean over the evaluation's campaigns; percentiles; segment_reach; guarantee {method, approximation, approximation_formula, "
        "probability, certified_ratio, notes, summary}; theta; samples; timings; details; baselines {name: "
        "{method, seeds, expected_reach, target_reach, reach_curve, guarantee}}; gain_over_best_baseline "
        "{baseline, shortlist_mean, baseline_mean, difference, relative, stderr, ci_low, ci_high, confidence, "
        "unit} (paired); baselines also carry a label; model, probability, "
        "rounds, nodes, edges, eligible, budget, cost_budget, total_cost, target, reach_unit, warnings."
    ),
)
