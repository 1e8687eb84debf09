"""Forecast intervals: coverage of the exact spread over repeated forecasts."""

from __future__ import annotations

import itertools

import numpy as np

from service.analytics.diffusion.forecasts import forecast
from service.analytics.graph import GraphArrays, diffusion_graph

DIAMOND_SRC = np.array([0, 0, 1, 2], np.int32)  # s->a, s->b, a->t, b->t
DIAMOND_DST = np.array([1, 2, 3, 3], np.int32)


def exact_ic_spread(p: float) -> float:
    """Exact enumeration of all 2^4 live-edge worlds of the diamond (Kempe et al. 2003, Thm 4.5)."""
    total = 0.0
    for live in itertools.product((0, 1), repeat=4):
        prob = float(np.prod([p if x else 1 - p for x in live]))
        reached = {0}
        for _ in range(3):
            reached |= {int(d) for s, d, x in zip(DIAMOND_SRC, DIAMOND_DST, live) if x and int(s) in reached}
        total += prob * len(reached)
    return total


def test_exact_enumeration_reproduces_the_closed_form() -> None:
    # Source: REFERENCES.md (derived): sigma({s}) = 1 + 2p + 2p^2 - p^4, 2.4375 at p = 0.5.
    assert abs(exact_ic_spread(0.5) - 2.4375) < 1e-12
    assert abs(exact_ic_spread(0.3) - (1 + 0.6 + 0.18 - 0.0081)) < 1e-12


def test_95_percent_interval_covers_the_exact_spread_90_to_99_percent_of_the_time() -> None:
    """200 independent forecasts, each a 95% normal interval of the mean (fixed seeds)."""
    g = GraphArrays(4, True, DIAMOND_SRC, DIAMOND_DST, np.ones(4))
    for model, dg, exact in (
        ("ic", diffusion_graph(g, scheme="uniform", p=0.5), exact_ic_spread(0.5)),
        # Source: REFERENCES.md (derived): LT diamond with weights w = 0.4 into a, b and 0.5 into t:
        # sigma({s}) = 1 + 3w.
        ("lt", diffusion_graph(
            GraphArrays(4, True, DIAMOND_SRC, DIAMOND_DST, np.ones(4), np.array([0.4, 0.4, 0.5, 0.5])),
            model="lt", scheme="explicit"), 1 + 3 * 0.4),
    ):
        covered = 0
        for k in range(200):
            r = forecast(dg, {"s": np.array([0], np.int32)}, simulations=400, min_simulations=400,
                         random_seed=1000 + k)["s"]
            covered += r.expected_reach.ci_low <= exact <= r.expected_reach.ci_high
        # A binomial(200, 0.95) count lies in [180, 198] with probability about 0.99.
        assert 180 <= covered <= 198, (model, covered)
