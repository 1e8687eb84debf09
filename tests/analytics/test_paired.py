"""Tests for service.analytics.diffusion.paired and the common-world kernels (_world_kernels):
the paired t interval against SciPy, the common-random-numbers properties (the same
set gives a difference of exactly 0 in every world, a superset never reaches fewer),
spreads against exact enumeration of live-edge worlds, and agreement with forecasts."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from service.analytics.diffusion import forecasts as F
from service.analytics.diffusion import paired as P
from service.analytics.errors import InvalidParameter
from service.analytics.graph import GraphArrays, diffusion_graph
from tests.analytics.test_diffusion import build, exact


def _random_dg(model: str, seed: int = 5, n: int = 400, m: int = 2400):
    rng = np.random.default_rng(seed)
    src = rng.integers(0, n, m).astype(np.int32)
    dst = rng.integers(0, n, m).astype(np.int32)
    keep = src != dst
    g = GraphArrays(n, True, src[keep], dst[keep], np.ones(int(keep.sum())))
    if model == "lt":
        return diffusion_graph(g, model="lt", scheme="normalized")
    return diffusion_graph(g, scheme="weighted_cascade")


def test_paired_interval_matches_scipy() -> None:
    rng = np.random.default_rng(1)
    a = rng.normal(100, 15, 250)
    b = a - rng.normal(3, 4, 250)
    for conf in (0.9, 0.95, 0.99):
        got = P.paired_interval(a, b, conf)
        # Source: SciPy's paired t test and its confidence interval, computed here.
        ci = stats.ttest_rel(a, b).confidence_interval(confidence_level=conf)
        assert got.mean == pytest.approx(float(np.mean(a - b)), rel=1e-12)
        assert got.ci_low == pytest.approx(ci.low, rel=1e-10)
        assert got.ci_high == pytest.approx(ci.high, rel=1e-10)
        assert got.stderr == pytest.approx(stats.sem(a - b), rel=1e-10)


@pytest.mark.parametrize("model", ["ic", "lt"])
def test_common_worlds_pair_the_sets(model: str) -> None:
    dg = _random_dg(model)
    small, big = [1, 2, 3], [1, 2, 3, 40, 41, 42, 43]
    res = P.compare_reach(dg, {"big": big, "small": small, "same": [3, 2, 1]},
                          reference="big", min_simulations=2000, max_simulations=2000,
                          random_seed=9)
    assert res.simulations == 2000
    # The same set (in another order): exactly the same reach in every world.
    np.testing.assert_array_equal(res.per_world["same"], res.per_world["small"])
    # A superset reaches at least as many in every world (both models are monotone in
    # a fixed live-edge world, Kempe et al. 2003), so the difference is never negative.
    assert np.all(res.per_world["big"] >= res.per_world["small"])
    assert np.any(res.per_world["big"] > res.per_world["small"])
    self_diff = P.compare_reach(dg, {"a": small, "b": list(reversed(small))}, reference="a",
                                min_simulations=500, max_simulations=500)
    d = self_diff.differences["b"]
    assert (d.mean, d.stderr, d.ci_low, d.ci_high) == (0.0, 0.0, 0.0, 0.0)
    assert self_diff.stopped_because == "precision_reached"
    # A set's worlds do not depend on which other sets run beside it.
    alone = P.compare_reach(dg, {"small": small}, reference="small", min_simulations=2000,
                            max_simulations=2000, random_seed=9)
    np.testing.assert_array_equal(alone.per_world["small"], res.per_world["small"])


@pytest.mark.parametrize("model", ["ic", "lt"])
def test_common_worlds_give_exact_spreads(model: str) -> None:
    edges = [(0, 1), (0, 2), (1, 3), (2, 3), (3, 4), (1, 4)]
    probs = [0.5, 0.3, 0.6, 0.4, 0.7, 0.2] if model == "ic" else [0.5, 0.3, 0.6, 0.4, 0.7, 0.2]
    dg = build(5, edges, model=model, probs=probs)
    sets = {"a": [0], "b": [1, 2], "c": [2]}
    res = P.compare_reach(dg, sets, reference="a", min_simulations=40_000,
                          max_simulations=40_000, random_seed=3)
    for name, seeds in sets.items():
        # Source: exact enumeration of every live-edge world (Kempe et al. 2003, Thms 4.5, 4.6).
        sigma = exact(dg, seeds)[0].sum()
        r = res.reach[name]
        assert abs(r.mean - sigma) <= 4 * r.stderr, (name, r, sigma)
    diff = res.differences["b"]
    true = exact(dg, [0])[0].sum() - exact(dg, [1, 2])[0].sum()
    assert abs(diff.mean - true) <= 4 * diff.stderr


def test_forecast_runs_on_the_same_worlds() -> None:
    dg = _random_dg("ic", seed=8)
    res = P.compare_reach(dg, {"x": [0, 5, 9], "y": [7]}, reference="x", min_simulations=700,
                          max_simulations=700, random_seed=4)
    fc = F.forecast(dg, {"whatever name": [9, 0, 5]}, simulations=700, min_simulations=700,
                    random_seed=4)["whatever name"]
    # The same worlds and the same summation order: the same mean to the last bit.
    assert fc.expected_reach.mean == res.reach["x"].mean
    assert fc.stream_key == P.world_key(4)


def test_the_stopping_rule_reaches_the_asked_precision() -> None:
    dg = _random_dg("ic", seed=2)
    res = P.compare_reach(dg, {"x": [0, 1, 2, 3], "y": [4, 5, 6, 7]}, reference="x",
                          min_simulations=100, max_simulations=200_000,
                          relative_precision=0.02, random_seed=1)
    d = res.differences["y"]
    assert res.stopped_because == "precision_reached" and res.simulations > 100
    assert d.ci_high - d.mean <= 0.02 * res.reach["x"].mean
    capped = P.compare_reach(dg, {"x": [0, 1, 2, 3], "y": [4, 5, 6, 7]}, reference="x",
                             min_simulations=50, max_simulations=60,
                             relative_precision=1e-6)
    assert capped.stopped_because == "simulation_cap" and capped.simulations == 60


def test_bad_input_is_refused() -> None:
    dg = _random_dg("ic")
    with pytest.raises(InvalidParameter):
        P.compare_reach(dg, {"x": [0]}, reference="y")
    with pytest.raises(InvalidParameter):
        P.compare_reach(dg, {"x": [0]}, reference="x", relative_precision=0)
    one = P.paired_interval([1.0], [0.0])
    assert one.mean == 1.0 and math.isinf(one.ci_high)
