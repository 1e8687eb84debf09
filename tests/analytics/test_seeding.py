"""Tests for service.analytics.seeding.shortlists: guarantees, estimators and contact rules.

Exact spreads come from enumerating every live-edge world of a tiny graph
(Kempe et al. 2003, Thm 4.5 for IC and Thm 4.6 for LT), written out below;
the optimum from enumerating every allowed seed set.
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest

from service.analytics.seeding import shortlists as S
from service.analytics.seeding.rules import SeedRules
from service.analytics.errors import Cancelled, InvalidParameter, UnknownNode
from service.analytics.graph import GraphArrays, diffusion_graph

BOUND = 1.0 - 1.0 / math.e  # Source: REFERENCES.md constants, 1 - 1/e = 0.6321206


def R(n, budget=None, **rules):
    """The contact rules for n people (checked once, in SeedRules.build)."""
    return SeedRules.build(n, budget=budget, **rules)


# ------------------------------------------------------------ exact enumeration

class Exact:
    """sigma(S) by enumerating live-edge worlds: IC keeps each arc with its
    probability; LT lets each node keep at most one in-arc (from u with
    probability b_uv, none with 1 - sum b). Reach within ``rounds`` steps of
    the seeds when a horizon is given."""

    def __init__(self, n, arcs, probs, *, model="ic", rounds=None, weights=None):
        self.n, m = n, len(arcs)
        probs = np.asarray(probs, float)
        if model == "ic":
            live = ((np.arange(2 ** m)[:, None] >> np.arange(m)) & 1).astype(bool)
            pw = np.prod(np.where(live, probs, 1.0 - probs), axis=1)
        else:
            options = []
            for v in range(n):
                ins = [e for e, (_, b) in enumerate(arcs) if b == v]
                options.append([(None, 1.0 - probs[ins].sum())] + [(e, probs[e]) for e in ins])
            rows, pws = [], []
            for combo in itertools.product(*options):
                row = np.zeros(m, bool)
                pr = 1.0
                for e, q in combo:
                    pr *= q
                    if e is not None:
                        row[e] = True
                rows.append(row)
                pws.append(pr)
            live, pw = np.array(rows).reshape(-1, m), np.array(pws)
        reach = np.tile(np.int64(1) << np.arange(n, dtype=np.int64), (live.shape[0], 1))
        for _ in range(n if rounds is None else rounds):
            new = reach.copy()
            for e, (u, v) in enumerate(arcs):
                new[:, u] |= np.where(live[:, e], reach[:, v], 0)
            reach = new
        self.reach, self.pw = reach, pw
        w = np.ones(n) if weights is None else np.asarray(weights, float)
        bits = (np.arange(2 ** n)[:, None] >> np.arange(n)) & 1
        self.value = bits @ w  # value of every node subset, by bitmask

    def __call__(self, seeds):
        if len(seeds) == 0:
            return 0.0
        mask = np.bitwise_or.reduce(self.reach[:, list(seeds)], axis=1)
        return float(self.pw @ self.value[mask])

    def best(self, k, allowed=lambda s: True, candidates=None):
        cand = range(self.n) if candidates is None else candidates
        sets = [s for r in range(1, k + 1) for s in itertools.combinations(cand, r) if allowed(s)]
        return max(self(s) for s in sets)


def dgraph(n, arcs, probs, *, model="ic"):
    g = GraphArrays(n, True, np.array([a for a, _ in arcs], np.int32),
                    np.array([b for _, b in arcs], np.int32), np.ones(len(arcs)),
                    np.asarray(probs, float))
    return diffusion_graph(g, model=model, scheme="explicit")


def both_ways(edges):
    return [a for u, v in edges for a in ((u, v), (v, u))]


def random_graph(seed, *, model):
    """A random directed graph of 8-12 nodes with at most 14 arcs."""
    rng = np.random.default_rng(seed)
    n = int(rng.integers(8, 13))
    pairs = [(u, v) for u in range(n) for v in range(n) if u != v]
    pick = rng.choice(len(pairs), size=int(rng.integers(10, 15)), replace=False)
    arcs = [pairs[i] for i in pick]
    if model == "ic":
        probs = rng.choice([0.1, 0.3, 0.5, 0.8], size=len(arcs))
    else:  # incoming weights, sum <= 1 at each node
        indeg = np.bincount([b for _, b in arcs], minlength=n)
        probs = np.array([rng.uniform(0.3, 1.0) / indeg[b] for _, b in arcs])
    return n, arcs, probs


# ------------------------------------------------------------ RR estimator

REFERENCE_CASES = [
    # (name, n, arcs, probs, model, rounds, seeds, closed form); Source:
    # REFERENCES.md "Exact expected spreads" (derived), each also recomputed
    # by the enumerator in test_reference_values_by_enumeration.
    ("one arc", 2, [(0, 1)], [0.3], "ic", None, [0], 1.3),
    ("path L=3", 4, [(0, 1), (1, 2), (2, 3)], [0.1] * 3, "ic", None, [0], 1.111),
    ("star centre", 4, both_ways([(0, 1), (0, 2), (0, 3)]), [0.3] * 6, "ic", None, [0], 1.9),
    ("star leaf", 4, both_ways([(0, 1), (0, 2), (0, 3)]), [0.3] * 6, "ic", None, [1], 1.48),
    ("diamond", 4, [(0, 1), (0, 2), (1, 3), (2, 3)], [0.5] * 4, "ic", None, [0], 2.4375),
    ("triangle", 3, both_ways([(0, 1), (1, 2), (0, 2)]), [0.5] * 6, "ic", None, [0], 2.25),
    ("LT diamond w=0.3", 4, [(0, 1), (0, 2), (1, 3), (2, 3)], [0.3, 0.3, 0.5, 0.5], "lt",
     None, [0], 1.9),
    # Horizon: path with p = 0.5, two rounds: 1 + p + p^2 (closed form, derived).
    ("path horizon 2", 4, [(0, 1), (1, 2), (2, 3)], [0.5] * 3, "ic", 2, [0], 1.75),
    ("LT path horizon 1", 3, [(0, 1), (1, 2)], [0.6, 0.6], "lt", 1, [0], 1.6),
    ("p=1 reachable", 5, [(0, 1), (1, 2), (3, 4)], [1.0] * 3, "ic", None, [0, 3], 5.0),
]


@pytest.mark.parametrize("case", REFERENCE_CASES, ids=[c[0] for c in REFERENCE_CASES])
def test_reference_values_by_enumeration(case):
    _, n, arcs, probs, model, rounds, seeds, closed = case
    assert Exact(n, arcs, probs, model=model, rounds=rounds)(seeds) == pytest.approx(closed)


@pytest.mark.parametrize("case", REFERENCE_CASES, ids=[c[0] for c in REFERENCE_CASES])
def test_rr_estimate_is_unbiased(case):
    # Source: Borgs et al. 2014, sigma(S) = n * Pr[RR set meets S]; compared
    # with the exact value within 4 standard errors of the share.
    _, n, arcs, probs, model, rounds, seeds, closed = case
    samples = 200_000
    est = S.rr_estimate(dgraph(n, arcs, probs, model=model), seeds, samples=samples,
                        random_seed=7, rounds=rounds)
    share = closed / n
    se = n * math.sqrt(share * (1 - share) / samples)
    assert abs(est.mean - closed) <= 4 * se + 1e-12
    assert est.runs == samples


def test_rr_estimate_with_target_audience():
    # Source: exact enumeration with node values. Weighted roots: the estimate
    # is (total value) * (share of RR sets hit).
    n, arcs, probs = random_graph(4, model="ic")
    w = np.linspace(0.0, 2.0, n)
    exact = Exact(n, arcs, probs, weights=w)([0, 1])
    est = S.rr_estimate(dgraph(n, arcs, probs), [0, 1], samples=200_000, random_seed=1, weights=w)
    share = exact / w.sum()
    assert abs(est.mean - exact) <= 4 * w.sum() * math.sqrt(share * (1 - share) / 200_000)


def test_rr_estimate_rejects_unknown_nodes():
    dg = dgraph(3, [(0, 1)], [0.5])
    with pytest.raises(UnknownNode) as err:
        S.rr_estimate(dg, [0, 7], samples=10)
    assert err.value.data["node_index"] == 7


# ------------------------------------------------------------ guarantees, brute force

@pytest.mark.parametrize("seed,model,rounds,k", [
    (0, "ic", None, 2), (1, "ic", None, 3), (2, "ic", 2, 3), (3, "lt", None, 2),
    (4, "lt", None, 3), (5, "ic", None, 4), (6, "lt", 1, 3),
])
def test_greedy_imm_opim_against_the_optimum(seed, model, rounds, k):
    n, arcs, probs = random_graph(seed, model=model)
    exact = Exact(n, arcs, probs, model=model, rounds=rounds)
    dg = dgraph(n, arcs, probs, model=model)
    opt = exact.best(k)
    # Source: Kempe et al. 2003 (greedy >= (1 - 1/e) OPT with an exact oracle).
    celf = S.celf_seeds(exact, R(n, k))
    assert exact(celf.nodes) >= BOUND * opt - 1e-9
    assert celf.expected_reach.mean == pytest.approx(exact(celf.nodes))
    # Source: Tang, Shi, Xiao 2015 (IMM) with Chen 2018's fix: >= (1-1/e-eps) OPT
    # with probability >= 1 - 1/n; checked in every case tried.
    imm = S.imm_seeds(dg, R(n, k), epsilon=0.1, random_seed=seed, rounds=rounds, forecast_runs=0)
    assert len(imm.nodes) == k
    assert exact(imm.nodes) >= (BOUND - 0.1) * opt
    # Source: Tang et al. 2018 (OPIM-C): the certified bounds hold w.p. >= 1 - delta.
    op = S.opim_seeds(dg, R(n, k), epsilon=0.1, random_seed=seed, rounds=rounds, forecast_runs=0)
    value = exact(op.nodes)
    assert value >= (BOUND - 0.1) * opt
    g = op.guarantee
    assert g["certified_lower_bound"] <= value + 1e-9
    assert g["optimum_upper_bound"] >= opt - 1e-9
    assert g["certified_ratio"] <= value / opt + 1e-9


def test_rules_keep_their_ratio_by_brute_force():
    n, arcs, probs = random_graph(8, model="ic")
    exact = Exact(n, arcs, probs)
    dg = dgraph(n, arcs, probs)
    seg = np.arange(n) % 3
    caps = {0: 1, 1: 1, 2: 2}

    def capped(s):
        return all(sum(seg[v] == c for v in s) <= cap for c, cap in caps.items())

    # Source: Fisher, Nemhauser, Wolsey 1978 (from memory): greedy over a
    # partition matroid is 1/2-approximate.
    opt = exact.best(3, capped)
    for sl in (S.imm_seeds(dg, R(n, 3, segments=seg, max_per_segment=caps), forecast_runs=0),
               S.celf_seeds(exact, R(n, 3, segments=seg, max_per_segment=caps))):
        assert capped(sl.nodes) and len(sl.nodes) == 3
        assert exact(sl.nodes) >= (0.5 - 0.1) * opt
    imm = S.imm_seeds(dg, R(n, 3, segments=seg, max_per_segment=caps), forecast_runs=0)
    assert imm.guarantee["approximation"] == pytest.approx(0.5 - 0.1)
    # Cost budget. Source: K. Tang et al. 2021 (arXiv 2008.05391): the better
    # of ratio greedy and the best single seed is >= 0.405 OPT; unit greedy
    # dominates the best single seed.
    cost = np.linspace(1.0, 3.0, n)

    def fits(s):
        return cost[list(s)].sum() <= 4.0

    opt_c = exact.best(n, fits)
    for sl in (S.imm_seeds(dg, R(n, costs=cost, cost_budget=4.0), forecast_runs=0),
               S.opim_seeds(dg, R(n, costs=cost, cost_budget=4.0), forecast_runs=0),
               S.celf_seeds(exact, R(n, costs=cost, cost_budget=4.0))):
        assert fits(sl.nodes)
        assert exact(sl.nodes) >= (0.405 - 0.1) * opt_c
    # Must include: ratio to the best set containing them (greedy on f(M + .),
    # derived from Kempe et al.'s bound for the monotone submodular f(M + .)).
    opt_m = exact.best(3, lambda s: 5 in s)
    for sl in (S.imm_seeds(dg, R(n, 3, must_include=[5]), forecast_runs=0),
               S.celf_seeds(exact, R(n, 3, must_include=[5]))):
        assert sl.nodes[0] == 5 and sl.seeds[0].required
        assert exact(sl.nodes) >= (BOUND - 0.1) * opt_m


def test_target_audience_seeding_by_brute_force():
    n, arcs, probs = random_graph(9, model="ic")
    w = np.zeros(n)
    w[: n // 2] = 1.0
    exact = Exact(n, arcs, probs, weights=w)
    dg = dgraph(n, arcs, probs)
    opt = exact.best(2)
    # Source: Tang, Shi, Xiao 2015 with reach counted in audience value.
    imm = S.imm_seeds(dg, R(n, 2), weights=w, forecast_runs=0)
    assert exact(imm.nodes) >= (BOUND - 0.1) * opt
    assert "audience value" in imm.seeds[0].reason


# ------------------------------------------------------------ IMM sample sizes

def test_imm_theta_matches_the_paper_formula():
    n, arcs, probs = random_graph(1, model="ic")
    dg = dgraph(n, arcs, probs)
    k, eps, ell = 3, 0.2, 1.0
    sl = S.imm_seeds(dg, R(n, k), epsilon=eps, l=ell, forecast_runs=0)
    # Source: Tang, Shi, Xiao 2015 (SIGMOD), Eq. 6 (lambda*), Algorithm 2
    # (lambda', eps' = sqrt(2) eps, x = n / 2^i, theta_i = lambda' / x) and
    # l <- l (1 + ln 2 / ln n); written out here from memory of the paper
    # (not checked against its full text).
    ell2 = ell * (1 + math.log(2) / math.log(n))
    ln_c = math.log(math.comb(n, k))
    alpha = math.sqrt(ell2 * math.log(n) + math.log(2))
    beta = math.sqrt(BOUND * (ln_c + ell2 * math.log(n) + math.log(2)))
    lam_star = 2 * n * (BOUND * alpha + beta) ** 2 / eps ** 2
    lb = sl.details["lower_bound"]
    assert sl.details["lambda_star"] == pytest.approx(lam_star)
    assert sl.theta == math.ceil(lam_star / lb)
    eps2 = math.sqrt(2) * eps
    lam_p = ((2 + 2 * eps2 / 3) * (ln_c + ell2 * math.log(n) + math.log(math.log2(n)))
             * n / eps2 ** 2)
    assert sl.details["lambda_prime"] == pytest.approx(lam_p)
    sizes = [math.ceil(lam_p / (n / 2 ** i)) for i in range(1, int(math.log2(n) - 1) + 1)]
    assert sl.details["estimation_sets"] in sizes
    # Chen 2018: the final theta sets are fresh, so both phases are counted.
    assert sl.samples == sl.theta + sl.details["estimation_sets"]
    # Source: IMM's guarantee, probability >= 1 - n^-l.
    assert sl.guarantee["probability"] >= 1 - n ** -ell


# ------------------------------------------------------------ degree discount

def test_degree_discount_worked_values():
    # Node 0 has degree 10 (neighbours 1..10); nodes 1 and 2 each have 20
    # extra leaves so they are picked first.
    edges = [(0, v) for v in range(1, 11)]
    nxt = 11
    for hub in (1, 2):
        for _ in range(20):
            edges.append((hub, nxt))
            nxt += 1
    g = GraphArrays(nxt, False, np.array([a for a, _ in edges], np.int32),
                    np.array([b for _, b in edges], np.int32), np.ones(len(edges)))
    p = 0.01

    def dd(d, t):  # Source: Chen, Wang, Yang 2009, dd_v = d_v - 2 t_v - (d_v - t_v) t_v p
        return d - 2 * t - (d - t) * t * p

    # Source: REFERENCES.md (derived): d = 10, p = 0.01 -> 7.91 after one
    # picked neighbour, 5.84 after two; recomputed from the formula.
    assert dd(10, 1) == pytest.approx(7.91) and dd(10, 2) == pytest.approx(5.84)
    two = S.degree_discount_seeds(g, R(g.n, 3), p=p)
    assert two.nodes == (1, 2, 0)
    assert two.details["score_at_pick"][2] == pytest.approx(dd(10, 2))
    elig = np.ones(nxt, bool)
    elig[2] = False
    one = S.degree_discount_seeds(g, R(g.n, 2, eligible=elig), p=p)
    assert one.nodes == (1, 0)
    assert one.details["score_at_pick"][1] == pytest.approx(dd(10, 1))
    assert "degree discount score 7.91" in one.seeds[1].reason


# ------------------------------------------------------------ contact rules

@pytest.fixture(scope="module")
def grid():
    """A 6 x 6 grid, both directions, p = 0.3, with three segments."""
    n = 36
    edges = [(r * 6 + c, r * 6 + c + 1) for r in range(6) for c in range(5)]
    edges += [(r * 6 + c, (r + 1) * 6 + c) for r in range(5) for c in range(6)]
    g = GraphArrays(n, False, np.array([a for a, _ in edges], np.int32),
                    np.array([b for _, b in edges], np.int32), np.ones(len(edges)))
    return g, diffusion_graph(g, scheme="uniform", p=0.3), np.arange(n) % 3


def all_methods(g, dg, budget, **kwargs):
    rules = R(dg.n, budget, **kwargs)
    oracle = lambda s: S.rr_estimate(dg, s, samples=3000, random_seed=1).mean  # noqa: E731
    return [
        S.imm_seeds(dg, rules, forecast_runs=0),
        S.opim_seeds(dg, rules, forecast_runs=0),
        S.celf_seeds(oracle, rules),
        S.degree_discount_seeds(g, rules, p=0.3),
        S.top_score_seeds(np.arange(dg.n, dtype=float), rules),
    ]


def test_rules_are_respected(grid):
    g, dg, seg = grid
    elig = np.ones(dg.n, bool)
    elig[[14, 15, 20, 21]] = False  # the grid's centre may not be contacted
    cost = 1.0 + (np.arange(dg.n) % 4)
    for sl in all_methods(g, dg, 6, eligible=elig, must_include=[0, 35], segments=seg,
                          max_per_segment={0: 2, 1: 2, 2: 3}):
        assert sl.nodes[:2] == (0, 35), sl.method
        assert [s.required for s in sl.seeds[:3]] == [True, True, False]
        assert len(sl.nodes) == 6 and len(set(sl.nodes)) == 6
        assert not set(sl.nodes) & {14, 15, 20, 21}, sl.method
        counts = np.bincount(seg[list(sl.nodes)], minlength=3)
        assert counts[0] <= 2 and counts[1] <= 2 and counts[2] <= 3, sl.method
    for sl in all_methods(g, dg, None, eligible=elig, costs=cost, cost_budget=7.5):
        assert cost[list(sl.nodes)].sum() <= 7.5, sl.method
        assert not set(sl.nodes) & {14, 15, 20, 21}


def test_every_method_refuses_rules_built_for_another_graph(grid):
    g, dg, _ = grid
    other = R(dg.n + 1, 3)
    calls = [
        lambda: S.imm_seeds(dg, other, forecast_runs=0),
        lambda: S.opim_seeds(dg, other, forecast_runs=0),
        lambda: S.degree_discount_seeds(g, other),
        lambda: S.top_score_seeds(np.ones(dg.n), other),
        lambda: S.evaluate_shortlist(dg, S.top_score_seeds(np.ones(dg.n), R(dg.n, 3)),
                                     samples=1000, rules=other),
    ]
    for call in calls:
        with pytest.raises(InvalidParameter) as err:
            call()
        assert err.value.data["field"] == "rules"


def test_budget_filled_by_must_include(grid):
    _, dg, _ = grid
    for sl in (S.imm_seeds(dg, R(dg.n, 2, must_include=[7, 3]), forecast_runs=0),
               S.opim_seeds(dg, R(dg.n, 2, must_include=[7, 3]), forecast_runs=0)):
        assert sl.nodes == (7, 3) and all(s.required for s in sl.seeds)
        assert "already signed up" in sl.seeds[1].reason


def test_nan_cost_means_never_chosen(grid):
    _, dg, _ = grid
    cost = np.ones(dg.n)
    best = S.imm_seeds(dg, R(dg.n, 1), forecast_runs=0).nodes[0]
    cost[best] = np.nan
    sl = S.imm_seeds(dg, R(dg.n, costs=cost, cost_budget=3.0), forecast_runs=0)
    assert best not in sl.nodes and len(sl.nodes) == 3


def test_bad_parameters(grid):
    _, dg, _ = grid
    with pytest.raises(InvalidParameter) as err:
        S.imm_seeds(dg, R(dg.n, 3), epsilon=1.5)
    assert err.value.data["field"] == "epsilon"
    with pytest.raises(InvalidParameter) as err:
        S.opim_seeds(dg, R(dg.n, 3), weights=-np.ones(dg.n))
    assert err.value.data["field"] == "weights"
    with pytest.raises(InvalidParameter) as err:
        S.imm_seeds(dg, R(dg.n, 3), random_seed=-1)
    assert err.value.data["field"] == "random_seed"


# ------------------------------------------------------------ results

def test_reasons_are_built_from_the_numbers(grid):
    _, dg, seg = grid
    labels = ["North", "South", "West"]
    com = np.arange(dg.n) // 18
    sl = S.imm_seeds(dg, R(dg.n, 4, segments=seg, segment_labels=labels), communities=com,
                     forecast_runs=0)
    seen = set()
    for i, s in enumerate(sl.seeds):
        lab = labels[seg[s.node]]
        assert (f"first seed in segment '{lab}'" in s.reason) == (lab not in seen)
        seen.add(lab)
        g = s.marginal_gain
        assert (f"{g:.1f}" if g < 10 else f"{g:,.0f}") in s.reason
        if i:
            assert "no earlier seed reaches" in s.reason
        assert "degree rank" in s.reason
    assert sl.reach_curve == pytest.approx(np.cumsum([s.marginal_gain for s in sl.seeds]))
    assert [s.cumulative_reach for s in sl.seeds] == pytest.approx(list(sl.reach_curve))
    assert len({s.reason for s in sl.seeds}) == len(sl.seeds)


def test_reproducible_and_forecast_is_independent(grid):
    _, dg, _ = grid
    a = S.imm_seeds(dg, R(dg.n, 3), random_seed=5, forecast_runs=2000)
    b = S.imm_seeds(dg, R(dg.n, 3), random_seed=5, forecast_runs=2000)
    assert a.nodes == b.nodes and a.theta == b.theta
    assert np.array_equal(a.reach_curve, b.reach_curve)
    assert a.expected_reach == b.expected_reach
    assert a.expected_reach.method == "forward_monte_carlo"
    # The forecast and the selection-set curve estimate the same spread.
    ref = S.rr_estimate(dg, a.nodes, samples=200_000, random_seed=99)
    se = math.hypot(a.expected_reach.stderr, ref.stderr)
    assert abs(a.expected_reach.mean - ref.mean) <= 4 * se


@pytest.mark.parametrize("model,rounds", [("ic", None), ("ic", 2), ("lt", None), ("lt", 3)])
def test_rr_estimate_agrees_with_forward_monte_carlo(grid, model, rounds):
    # Source: Borgs et al. 2014 (RR estimator) against the forward simulation
    # of service.analytics.diffusion.cascades (Kempe et al. 2003), within 4 standard errors.
    from service.analytics.diffusion.cascades import estimate_spread

    g, _, _ = grid
    dg = diffusion_graph(g, model=model, scheme="weighted_cascade")
    seeds = [0, 14, 29]
    rr = S.rr_estimate(dg, seeds, samples=200_000, random_seed=2, rounds=rounds)
    mc = estimate_spread(dg, seeds, runs=20_000, random_seed=3, rounds=rounds)
    assert abs(rr.mean - mc.mean) <= 4 * math.hypot(rr.stderr, mc.stderr)


def test_progress_and_cancellation(grid):
    _, dg, _ = grid
    cost = 1.0 + np.arange(dg.n) % 3
    for call in (S.imm_seeds, S.opim_seeds):
        seen = []
        call(dg, R(dg.n, 3), progress=lambda f, m: seen.append((f, m)), forecast_runs=0)
        fr = [f for f, _ in seen]
        assert fr and all(0.0 <= f <= 1.0 for f in fr) and fr == sorted(fr), call
    seen = []
    S.celf_seeds(lambda s: float(len(s)), R(dg.n, costs=cost, cost_budget=5.0),
                 progress=lambda f, m: seen.append(f))
    assert seen and seen == sorted(seen)

    def stop(f, m):
        if f > 0.3:
            raise Cancelled(job="test")

    for call in (lambda: S.imm_seeds(dg, R(dg.n, 3), progress=stop, forecast_runs=0),
                 lambda: S.opim_seeds(dg, R(dg.n, 3), progress=stop, forecast_runs=0,
                                      target_ratio=0.99),
                 lambda: S.celf_seeds(lambda s: float(len(s)), R(dg.n, 3), progress=stop)):
        with pytest.raises(Cancelled):
            call()


def test_evaluate_shortlist_fills_baseline_reach(grid):
    g, dg, _ = grid
    top = S.top_score_seeds(np.arange(dg.n, dtype=float), R(dg.n, 3))
    assert np.all(np.isnan(top.reach_curve))
    ev = S.evaluate_shortlist(dg, top, samples=100_000, random_seed=3)
    ref = S.rr_estimate(dg, top.nodes, samples=100_000, random_seed=4)
    assert ev.nodes == top.nodes
    assert abs(ev.expected_reach.mean - ref.mean) <= 4 * math.hypot(ev.expected_reach.stderr,
                                                                     ref.stderr)


# ------------------------------------------------------------ open datasets

@pytest.mark.slow
@pytest.mark.shared
@pytest.mark.parametrize("name", ["ca-GrQc", "ca-HepTh"])
def test_imm_against_celf_and_baselines_on_coauthorship(name):
    from service.analytics.seeding import _rr_kernels as K
    from service.analytics.seeding._rr import RRCollection, RRSampler
    from service.analytics.diffusion.cascades import estimate_spread
    from service.analytics.graph import to_igraph
    from tests.datasets import snap_graph

    g, _ = snap_graph(name, directed=False)
    dg = diffusion_graph(g, scheme="weighted_cascade")
    k = 20
    imm = S.imm_seeds(dg, R(dg.n, k), epsilon=0.1, random_seed=1, forecast_runs=0)
    # CELF, kept affordable: its oracle is the RR estimate on one fixed,
    # independent collection of 100,000 sets, and its candidates are the 400
    # highest-degree people plus IMM's picks (the full graph would need
    # thousands of single-seed oracle calls). That makes it a check of IMM's
    # selection, not an independent Monte Carlo greedy.
    coll = RRCollection(RRSampler(dg), K.stream_key(123, 0))
    coll.extend_to(100_000)
    deg = np.diff(dg.out_indptr).astype(float)

    def oracle(seeds):
        return dg.n * coll.hits(np.asarray(seeds, dtype=np.int64)) / coll.count

    pool = np.zeros(dg.n, bool)
    pool[np.argsort(-deg)[:400]] = True
    pool[list(imm.nodes)] = True
    celf = S.celf_seeds(oracle, R(dg.n, k, eligible=pool), degrees=deg)
    top_deg = S.top_score_seeds(deg, R(dg.n, k), score_name="degree")
    pr = np.array(to_igraph(g, weights=False).pagerank())  # igraph PageRank, damping 0.85
    top_pr = S.top_score_seeds(pr, R(dg.n, k), score_name="PageRank")
    # One independent judge for all four: forward Monte Carlo, 3000 runs.
    judge = {sl.method: estimate_spread(dg, list(sl.nodes), runs=3000, random_seed=77)
             for sl in (imm, celf, top_deg, top_pr)}
    im = judge["imm"]
    for other, strict in (("celf", False), ("top_degree", True), ("top_PageRank", True)):
        o = judge[other]
        margin = 3 * math.hypot(im.stderr, o.stderr)
        if strict:  # more than the baselines, beyond the Monte Carlo error
            assert im.mean > o.mean + margin, (other, im, o)
        else:  # at least as much as CELF within Monte Carlo error
            assert im.mean >= o.mean - margin, (other, im, o)


@pytest.mark.slow
@pytest.mark.shared
@pytest.mark.parametrize(("name", "directed"), [("email-Enron", False), ("soc-Slashdot0902", True)])
def test_opim_default_is_as_good_as_imm_on_open_datasets(name, directed):
    """OPIM-C at its defaults, budget 50, weighted cascade: within 1% of IMM and above
    top-degree, top-PageRank and degree discount, judged by forward Monte Carlo on
    common simulated campaigns (independent of every RR set). It used to stop after
    5,136 (Enron) and 11,296 (Slashdot) RR sets, 5.0% and 5.6% below a greedy on
    200,000 RR sets (an independent check)."""
    from service.analytics.structure import centrality
    from service.analytics.diffusion.paired import compare_reach
    from tests.datasets import snap_graph

    g, _ = snap_graph(name, directed=directed)
    dg = diffusion_graph(g, scheme="weighted_cascade")
    k = 50
    imm = S.imm_seeds(dg, R(dg.n, k), random_seed=1, forecast_runs=0)
    opim = S.opim_seeds(dg, R(dg.n, k), random_seed=1, forecast_runs=0)
    deg = np.diff(dg.out_indptr).astype(float)
    rg = GraphArrays(g.n, True, g.dst, g.src, g.weight) if directed else g
    sets = {
        "opim": list(opim.nodes),
        "imm": list(imm.nodes),
        "top_degree": list(S.top_score_seeds(deg, R(dg.n, k)).nodes),
        "top_pagerank": list(S.top_score_seeds(centrality.pagerank(rg), R(dg.n, k)).nodes),
        "degree_discount": list(S.degree_discount_seeds(dg, R(dg.n, k), p=float(dg.out_prob.mean())).nodes),
    }
    judge = compare_reach(dg, sets, reference="opim", min_simulations=500, max_simulations=500,
                          random_seed=2026)
    ref = judge.reach["opim"].mean
    print(f"{name}: opim {ref:,.1f} after {opim.samples:,} RR sets (imm {imm.samples:,}); "
          + "; ".join(f"opim - {b} {d.mean:+,.1f} [{d.ci_low:+,.1f}, {d.ci_high:+,.1f}]"
                      for b, d in judge.differences.items()))
    assert opim.guarantee["notes"][-1] == "stopped: target ratio reached with the worst-case sample size"
    # Within 1% of IMM: the whole 95% interval of the paired difference above -1%.
    assert judge.differences["imm"].ci_low > -0.01 * judge.reach["imm"].mean
    for b in ("top_degree", "top_pagerank", "degree_discount"):
        assert judge.differences[b].ci_low > 0, b


def test_caps_already_filled_by_must_include_are_respected() -> None:
    """A segment whose cap the must-include people use up gets no free pick (every method)."""
    from service.analytics.graph import GraphArrays, diffusion_graph
    from service.analytics.seeding.shortlists import degree_discount_seeds, imm_seeds, opim_seeds, top_score_seeds

    n = 8
    g = GraphArrays(n, False, np.arange(7, dtype=np.int32), np.arange(1, 8, dtype=np.int32), np.ones(7))
    dg = diffusion_graph(g, scheme="uniform", p=0.5)
    seg = np.array([0, 0, 0, 0, 1, 1, 1, 1], np.int32)
    rules = SeedRules.build(n, budget=2, must_include=[0], segments=seg, max_per_segment=1)
    picks = [
        imm_seeds(dg, rules, forecast_runs=50),
        opim_seeds(dg, rules, forecast_runs=50),
        top_score_seeds(np.arange(8.0)[::-1].copy(), rules),
        degree_discount_seeds(dg, rules, p=0.5),
    ]
    for r in picks:
        nodes = [s.node for s in r.seeds]
        # Source: the rule itself. Node 0 fills segment 0's cap of 1; the free pick is from segment 1.
        assert nodes[0] == 0 and seg[nodes[1]] == 1, (r.method, nodes)
