"""The ``backtest`` job kind: a door over :mod:`service.usecases.backtests`."""

from __future__ import annotations

from service.usecases.backtest_plots import forecast_vs_actual
from service.usecases.backtests import BacktestParams, backtest_table, precheck, run_backtest
from service.usecases.learning_results import BacktestResult

from .. import admission
from ..kinds import JobKind, TaskContext, TaskOutput

__all__ = ["KIND", "run"]


def run(ctx: TaskContext, params: BacktestParams) -> TaskOutput:
    return run_backtest(ctx.load(), params, tenant=ctx.tenant_id, progress=ctx.progress)


KIND = JobKind(
    name="backtest",
    params=BacktestParams,
    result=BacktestResult,
    run=run,
    csv=backtest_table,
    plots={"forecast_vs_actual": forecast_vs_actual},
    precheck=precheck,
    estimate=admission.forecast_estimate,
    summary="How right the forecasts were: past campaigns held out, learned on the rest and forecast from their "
            "real seeds, per scheme",
    result_description=(
        "verdict (plain words); summary [{scheme, name, campaigns, mean_abs_error, mean_rel_error, inside, "
        "log_likelihood, mean_auc}]; campaigns [{id, name, actual, learned_method, forecasts [{scheme, expected, "
        "p5, p95, inside_band, abs_error, rel_error, log_likelihood, auc}]}]; holdout; round_hours."
    ),
)
