"""Tests for service.analytics.seeding.rules: the contact rules, checked once.

Each refusal must name the rule (``field``) a caller has to change; the
guarantee derived from the rules must be the published ratio of greedy under
them.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from service.analytics.errors import EmptyGraph, InfeasibleRequest, InvalidParameter, UnknownNode
from service.analytics.seeding.rules import SeedRules

N = 36


@pytest.mark.parametrize("kwargs,error,field", [
    ({"budget": 37}, InfeasibleRequest, "budget"),
    ({"budget": 34, "eligible": np.arange(N) > 2}, InfeasibleRequest, "budget"),
    ({"budget": 5, "must_include": [3], "eligible": np.arange(N) != 3}, InfeasibleRequest,
     "must_include"),
    ({"budget": 2, "must_include": [0, 1, 2]}, InfeasibleRequest, "must_include"),
    ({"budget": 5, "must_include": [99]}, UnknownNode, "must_include"),
    ({"budget": 5, "must_include": ["a"]}, InvalidParameter, "must_include"),
    ({"budget": 8, "segments": np.arange(N) % 3, "max_per_segment": 2}, InfeasibleRequest,
     "max_per_segment"),
    ({"budget": 4, "segments": np.arange(N) % 3, "max_per_segment": {0: 1},
      "must_include": [0, 3]}, InfeasibleRequest, "max_per_segment"),
    ({"budget": 4, "segments": np.arange(N) % 3, "max_per_segment": -1}, InvalidParameter,
     "max_per_segment"),
    ({"budget": 4, "segments": np.arange(N) % 3, "max_per_segment": {0: -1}}, InvalidParameter,
     "max_per_segment"),
    ({"budget": 4, "segments": np.arange(N - 1) % 3, "max_per_segment": 2}, InvalidParameter,
     "segments"),
    ({"budget": 4, "max_per_segment": 2}, InvalidParameter, "segments"),
    ({"budget": 4, "eligible": np.ones(N - 1, bool)}, InvalidParameter, "eligible"),
    ({"cost_budget": 0.5, "costs": np.ones(N)}, InfeasibleRequest, "cost_budget"),
    ({"cost_budget": 3.0, "costs": np.r_[np.nan, np.ones(N - 1)], "must_include": [0]},
     InfeasibleRequest, "costs"),
    ({"cost_budget": 3.0, "costs": np.full(N, 2.0), "must_include": [0, 1]},
     InfeasibleRequest, "cost_budget"),
    ({"cost_budget": 3.0}, InvalidParameter, "costs"),
    ({"cost_budget": 3.0, "costs": np.ones(N - 1)}, InvalidParameter, "costs"),
    ({"cost_budget": 3.0, "costs": np.r_[-1.0, np.ones(N - 1)]}, InvalidParameter, "costs"),
    ({"cost_budget": -1.0, "costs": np.ones(N)}, InvalidParameter, "cost_budget"),
    ({"budget": 0}, InvalidParameter, "budget"),
    ({"budget": True}, InvalidParameter, "budget"),
    ({}, InvalidParameter, "budget"),
])
def test_each_refusal_names_its_rule(kwargs, error, field):
    # Source: the rules themselves (a budget above the people allowed, a barred
    # must-include person, a cap the must-include people already pass, ...).
    with pytest.raises(error) as err:
        SeedRules.build(N, **kwargs)
    assert err.value.data.get("field") == field
    if field == "must_include" and error is InfeasibleRequest and "eligible" in kwargs:
        assert err.value.data["node_index"] == 3


def test_an_empty_graph_has_no_rules():
    with pytest.raises(EmptyGraph) as err:
        SeedRules.build(0, budget=1)
    assert err.value.data["field"] == "graph"


def test_the_budget_messages_read_as_before():
    # The words a caller reads are part of the answer; the use case relies on this one.
    with pytest.raises(InfeasibleRequest) as err:
        SeedRules.build(N, budget=2, must_include=[0, 1, 2])
    assert str(err.value) == "3 must-include people exceed the budget of 2"
    assert err.value.data["budget"] == 2


def test_what_is_left_of_each_budget():
    seg = np.arange(N) % 3
    cost = np.r_[np.nan, np.ones(N - 1) * 2.0]
    r = SeedRules.build(N, budget=5, must_include=[3, 4], segments=seg,
                        max_per_segment={0: 2, 1: 1})
    # Source: counting by hand. Two of five places are taken; node 3 is in segment 0
    # (code 0 -> group 1) and node 4 in segment 1 (group 2), which is then full.
    assert r.must == (3, 4) and r.budget_left == 3 and r.cost_left is None
    assert r.caps_left is not None and r.caps_left[1] == 1 and r.caps_left[2] == 0
    assert not r.candidates[[3, 4]].any() and r.candidates.sum() == N - 2
    assert r.free_places == 3 and r.kind == "caps"
    c = SeedRules.build(N, cost_budget=7.0, costs=cost, must_include=[5])
    # Node 0 has no cost: never a candidate under a cost budget; node 5 costs 2 of 7.
    assert c.cost_left == pytest.approx(5.0) and not c.candidates[0] and c.kind == "cost"
    assert c.budget_left is None and c.free_places == N - 2


def test_tiebreak_is_checked_and_copied():
    r = SeedRules.build(4, budget=1)
    t = r.with_tiebreak(np.array([1.0, 2.0, 3.0, 4.0]))
    assert t.tiebreak.tolist() == [1.0, 2.0, 3.0, 4.0] and r.tiebreak.tolist() == [0.0] * 4
    with pytest.raises(InvalidParameter) as err:
        r.with_tiebreak(np.ones(3))
    assert err.value.data["field"] == "degrees"


def test_feasible_sets_count_matches_enumeration():
    # Source: exact enumeration. 4 candidates, 2 free places: C(4, 2) = 6 sets.
    r = SeedRules.build(5, budget=3, must_include=[0])
    assert r.log_feasible_sets() == pytest.approx(math.log(6))
    # Cost budget 2.5 with unit costs: sets of at most 2 of 5 people, 1 + 5 + 10 = 16.
    c = SeedRules.build(5, cost_budget=2.5, costs=np.ones(5))
    assert c.log_feasible_sets() == pytest.approx(math.log(16))


# ------------------------------------------------------------ the guarantee

def test_plain_budget_gives_one_minus_one_over_e():
    # Source: Nemhauser, Wolsey, Fisher 1978: greedy is (1 - 1/e)-approximate for a
    # monotone submodular function under a cardinality constraint; 1 - 1/e = 0.6321206.
    g = SeedRules.build(N, budget=3).guarantee()
    assert g.ratio == pytest.approx(0.6321206, abs=1e-7) and g.proven
    assert g.approximation == g.ratio
    assert g.formula == "1 - 1/e" and g.formula_with("epsilon") == "1 - 1/e - epsilon"
    assert g.caveat is None and g.notes == ()


def test_must_include_keeps_the_ratio_and_says_to_what():
    # Source: the same bound for the monotone submodular f(M + .) (Kempe et al. 2003).
    g = SeedRules.build(N, budget=3, must_include=[1]).guarantee()
    assert g.ratio == pytest.approx(1 - 1 / math.e)
    assert g.notes == ("ratio is to the best set that contains the must-include people",)


def test_segment_caps_give_one_half():
    # Source: Fisher, Nemhauser, Wolsey 1978 (from memory): greedy over a matroid,
    # here the partition matroid of the caps, is 1/2-approximate.
    g = SeedRules.build(N, budget=4, segments=np.arange(N) % 3, max_per_segment=2).guarantee()
    assert g.ratio == 0.5 and g.proven and g.formula == "1/2"
    assert any("partition matroid" in n for n in g.notes)


def test_cost_budget_gives_the_published_knapsack_ratio():
    # Source: K. Tang et al. 2021 (arXiv 2008.05391): the better of benefit/cost greedy
    # and unit greedy is 0.405-approximate under a knapsack constraint.
    g = SeedRules.build(N, cost_budget=4.0, costs=np.ones(N)).guarantee()
    assert g.ratio == 0.405 and g.proven and g.formula_with("epsilon") == "0.405 - epsilon"


@pytest.mark.parametrize("extra", [
    {"budget": 3},
    {"segments": np.arange(N) % 3, "max_per_segment": 2},
])
def test_cost_budget_with_another_rule_claims_nothing(extra):
    # No published ratio covers a knapsack and a second constraint in this greedy;
    # the samples are still sized with the knapsack ratio.
    g = SeedRules.build(N, cost_budget=4.0, costs=np.ones(N), **extra).guarantee()
    assert not g.proven and g.approximation is None and g.ratio == 0.405
    assert g.formula == "none proven" and g.formula_with("epsilon") == "none proven"
    assert g.caveat is not None and "no proven ratio" in g.caveat
