"""The result documents of the ``learn_probabilities`` and ``backtest`` jobs.

Kept apart from :mod:`service.usecases.learning` and :mod:`service.usecases.backtests`
so that those use cases import nothing of the job layer (the result models' base,
:class:`service.usecases.result_models.Result`, sits beside the built-in kinds' params).
"""

from __future__ import annotations

from typing import Any, Literal

from pydantic import Field

from service.usecases.backtests import BacktestParams
from service.usecases.learning import LearnParams
from service.usecases.result_models import Result

__all__ = ["LearnResult", "BacktestResult"]


class LearnResult(Result):
    """A learned probability model; the job id is the model's id."""

    kind: Literal["learn_probabilities"] = "learn_probabilities"
    params: LearnParams
    model: dict[str, Any] = Field(description=(
        "method (per_edge, segment_pair, logistic, uniform, weighted_cascade or trivalency), reason, "
        "parameters [{name, value, low, high}], held_out {method: log-likelihood}, log_likelihood, "
        "iterations, converged, new_connection_method, typical_probability {median, p90}."))
    campaigns: list[dict[str, Any]] = Field(description="The campaigns learned from: id, name, started_at, people, seeds, unknown.")
    data: dict[str, Any] = Field(description="campaigns, trials, activations, unexplained adoptions, round_hours.")
    readings: list[str] = Field(description="What the model says, in plain sentences.")


class BacktestResult(Result):
    """Forecasts of held-out past campaigns against what they reached, per scheme."""

    kind: Literal["backtest"] = "backtest"
    params: BacktestParams
    verdict: str = Field(description="The backtest in plain words, the learned model first.")
    summary: list[dict[str, Any]] = Field(description=(
        "Per scheme: scheme, name, campaigns, mean_abs_error, mean_rel_error, inside (campaigns whose actual "
        "reach fell inside the 5-95% band), log_likelihood (higher is better), mean_auc."))
    campaigns: list[dict[str, Any]] = Field(description=(
        "Per held-out campaign: id, name, actual, learned_method, and forecasts [{scheme, expected, p5, p95, "
        "inside_band, abs_error, rel_error, log_likelihood, auc}]."))
    holdout: str
    round_hours: float
