"""Probabilities learned from past campaigns (EM and credit estimators) and
backtests that score forecasts against what happened.

Public names of this family; private modules (leading underscore) hold
the steps and the compiled kernels.
"""

from __future__ import annotations

from .backtest import (
    adoption_auc,
    adoption_log_likelihood,
    backtest,
    BACKTEST_SCHEMES,
    backtest_verdict,
    BacktestResult,
    band_covers,
    CampaignScore,
    reach_error,
    SchemeSummary,
)

from .probabilities import (
    adoption_chance,
    bucket_rounds,
    Campaign,
    campaign_episodes,
    edge_features,
    em_probabilities,
    goyal_lt_weights,
    goyal_probabilities,
    learn_probabilities,
    learned_diffusion_graph,
    LearnedModel,
    LEARNING_METHODS,
    match_arcs,
    ParameterEstimate,
    transfer_probabilities,
)

__all__ = [
    "BACKTEST_SCHEMES",
    "BacktestResult",
    "CampaignScore",
    "SchemeSummary",
    "adoption_auc",
    "adoption_log_likelihood",
    "backtest",
    "backtest_verdict",
    "band_covers",
    "reach_error",
    "Campaign",
    "LEARNING_METHODS",
    "LearnedModel",
    "ParameterEstimate",
    "adoption_chance",
    "bucket_rounds",
    "campaign_episodes",
    "edge_features",
    "em_probabilities",
    "goyal_lt_weights",
    "goyal_probabilities",
    "learn_probabilities",
    "learned_diffusion_graph",
    "match_arcs",
    "transfer_probabilities",
]
