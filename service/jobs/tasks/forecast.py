"""The ``forecast`` job kind: a door over :mod:`service.usecases.forecasts`."""

from __future__ import annotations

from service.usecases import result_models, result_plots, result_tables
from service.usecases.forecasts import forecast_reach, ForecastParams, precheck

from .. import admission
from ..kinds import JobKind, TaskContext, TaskOutput

__all__ = ["KIND", "run"]


def run(ctx: TaskContext, params: ForecastParams) -> TaskOutput:
    return forecast_reach(ctx.load(), params, progress=ctx.progress)


KIND = JobKind(
    result=result_models.ForecastResult,
    csv=result_tables.forecast_table,
    plots={"segment_reach": result_plots.segment_reach, "adoption": result_plots.adoption, "outcomes": result_plots.outcomes},
    name="forecast",
    params=ForecastParams,
    run=run,
    estimate=admission.forecast_estimate,
    precheck=precheck,
    summary="Reach forecast of one or several seed sets: mean with interval, percentiles, adoption curve",
    result_description=(
        "forecasts: one entry per seed set (name, seed_count, expected_reach {mean, stderr, ci_low, "
        "ci_high, confidence}, percentiles {p5, p25, p50, p75, p95}, by_round [{round, new_mean, "
        "cumulative_mean, ci_low, ci_high}], top_nodes [{node_id, label, probability, stderr}], "
        "segment_reach [{segment, expected}], outcome_histogram {edges, counts}, target_reach when asked, simulations, stopped_because "
        "(precision_reached or simulation_cap), half_width); with one set its fields also at the top "
        "level; with several, comparison {measure, ranking, pairs [{seed_set, versus, difference, "
        "stderr, ci_low, ci_high, clearly_different}]}; model, probability, rounds, confidence, target, "
        "warnings [{code, seed_set, message, node_ids, count}]. Model estimates, not promises."
    ),
)
