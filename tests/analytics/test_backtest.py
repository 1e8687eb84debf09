"""Backtests: scoring forecasts of held-out campaigns against what they reached."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.stats import mannwhitneyu

from service.analytics.learning.backtest import (
    SchemeSummary,
    adoption_auc,
    adoption_log_likelihood,
    backtest,
    backtest_verdict,
    band_covers,
    reach_error,
)
from service.analytics.errors import InvalidParameter
from service.analytics.graph import GraphArrays
from service.analytics.learning.probabilities import Campaign
from tests.analytics.test_learning import _email_truth, simulate_campaigns


def test_reach_error_and_band() -> None:
    # Source: closed form |E - A| and |E - A| / A.
    assert reach_error(112.0, 100) == (12.0, pytest.approx(0.12))
    assert reach_error(40.0, 50) == (10.0, pytest.approx(0.2))
    assert band_covers(10, 20, 10) and band_covers(10, 20, 20) and not band_covers(10, 20, 21)
    with pytest.raises(InvalidParameter):
        reach_error(float("nan"), 10)


def test_auc_equals_mann_whitney_u_over_group_sizes() -> None:
    # Source: SciPy's Mann-Whitney U statistic, AUC = U / (n1 n0) (Hanley and McNeil 1982).
    rng = np.random.default_rng(0)
    prob = rng.integers(0, 6, 40) / 5.0  # many ties
    adopted = rng.random(40) < 0.3
    u = mannwhitneyu(prob[adopted], prob[~adopted]).statistic
    assert adoption_auc(prob, adopted) == pytest.approx(u / (adopted.sum() * (~adopted).sum()))
    assert math.isnan(adoption_auc([0.1, 0.2], [True, True]))


def test_adoption_log_likelihood_by_hand() -> None:
    # Source: Bernoulli log-likelihood, log 0.5 + log 0.75 + log(1 - eps) for a clipped zero.
    got = adoption_log_likelihood([0.5, 0.25, 0.0], [True, False, False], eps=1e-3)
    assert got == pytest.approx(math.log(0.5) + math.log(0.75) + math.log(1 - 1e-3))
    assert adoption_log_likelihood([0.0], [True], eps=1e-3) == pytest.approx(math.log(1e-3))


def test_verdict_reads_as_a_sentence() -> None:
    s = {"learned": SchemeSummary("learned", 10, 5.0, 0.12, 9, -50.0, 0.8),
         "weighted_cascade": SchemeSummary("weighted_cascade", 10, 90.0, 2.4, 1, -90.0, 0.6),
         "uniform": SchemeSummary("uniform", 10, 30.0, 0.5, 4, -70.0, 0.7)}
    assert backtest_verdict(s) == (
        "The learned model's forecasts were off by 12% on average and 9 of 10 campaigns fell "
        "inside its 5-95% band; weighted cascade was off by 240% (1 of 10 inside); "
        "uniform p was off by 50% (4 of 10 inside).")


def test_backtest_refuses_nothing_to_learn_from() -> None:
    g = GraphArrays(3, True, np.array([0], np.int32), np.array([1], np.int32), np.ones(1))
    runs = [Campaign(np.array([0, 1]), np.array([0, 1]))] * 2
    with pytest.raises(InvalidParameter, match="none to learn from"):
        backtest(g, runs, latest=2)
    with pytest.raises(InvalidParameter, match="nothing to learn from"):
        backtest(g, runs[:1], holdout="each")
    with pytest.raises(InvalidParameter, match="holdout"):
        backtest(g, runs, holdout="random")


def test_backtest_on_a_chain_is_exact() -> None:
    # Source: a chain where every campaign reaches everyone: p = 1 is learned, the forecast is
    # certain, the error 0 and the band [3, 3].
    g = GraphArrays(3, True, np.array([0, 1], np.int32), np.array([1, 2], np.int32), np.ones(2))
    runs = [Campaign(np.array([0, 1, 2]), np.array([0, 1, 2]), label=f"c{i}") for i in range(4)]
    r = backtest(g, runs, holdout="each", methods=["uniform"], simulations=50, folds=2)
    assert len(r.scores) == 4 * 4 and len(r.models) == 4
    s = r.summary["learned"]
    assert (s.campaigns, s.inside, s.mean_abs_error) == (4, 4, 0.0)
    assert r.verdict.startswith("The learned model's forecasts were off by 0% on average")


@pytest.mark.slow
@pytest.mark.shared
def test_learned_model_beats_weighted_cascade_and_uniform_when_truth_is_neither() -> None:
    # Source: email-Eu-core (SNAP, ../shared/datasets), campaigns simulated under a
    # per-segment-pair table; the learned model should forecast held-out campaigns best.
    g, seg, p = _email_truth()
    runs = simulate_campaigns(g, p, 24, seeds=3, random_seed=9)
    r = backtest(g, runs, latest=4, segments=seg, simulations=300,
                 methods=["segment_pair", "uniform", "weighted_cascade"])
    s = r.summary
    assert r.models[0].method == "segment_pair"
    assert s["learned"].log_likelihood > s["uniform"].log_likelihood
    assert s["learned"].log_likelihood > s["weighted_cascade"].log_likelihood
    assert s["learned"].mean_rel_error < s["weighted_cascade"].mean_rel_error
    assert s["learned"].mean_auc > 0.5
    assert s["learned"].inside >= 3
    assert "learned model" in r.verdict
