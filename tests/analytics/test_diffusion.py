"""Tests for service.analytics.diffusion.cascades: spreads against exact enumeration of
live-edge worlds and closed forms, horizons, reproducibility, the percolation
limit on a large random graph, forecast statistics and stopping, validation."""

from __future__ import annotations

import hashlib
import itertools
import math
from collections import deque

import networkx as nx
import numpy as np
import pytest

from service.analytics.diffusion import cascades as D
from service.analytics.diffusion import forecasts as F
from service.analytics.errors import Cancelled, InvalidParameter, UnknownNode
from service.analytics.graph import GraphArrays, diffusion_graph

# ------------------------------------------------------------ exact enumerators


def out_arcs(dg):
    """(u, v, p) for every arc of the diffusion graph."""
    rows = np.repeat(np.arange(dg.n), np.diff(dg.out_indptr))
    return [(int(u), int(v), float(p)) for u, v, p in zip(rows, dg.out_indices, dg.out_prob)]


def live_distances(n, live, seeds):
    adj = [[] for _ in range(n)]
    for u, v in live:
        adj[u].append(v)
    dist = [-1] * n
    queue = deque(seeds)
    for s in seeds:
        dist[s] = 0
    while queue:
        u = queue.popleft()
        for v in adj[u]:
            if dist[v] < 0:
                dist[v] = dist[u] + 1
                queue.append(v)
    return dist


def worlds_ic(dg):
    """Every live-edge world of IC: each arc kept independently (Kempe et al. 2003, Thm 4.5)."""
    arcs = out_arcs(dg)
    for keep in itertools.product((False, True), repeat=len(arcs)):
        prob = math.prod(p if k else 1 - p for (_, _, p), k in zip(arcs, keep))
        if prob > 0:
            yield prob, [(u, v) for (u, v, _), k in zip(arcs, keep) if k]


def worlds_lt(dg):
    """Every live-edge world of LT: each node keeps at most one in-arc (Kempe et al., Thm 4.6)."""
    choices = []
    for v in range(dg.n):
        ins = [(u, v, p) for u, w, p in out_arcs(dg) if w == v]
        options = [(p, (u, v)) for u, _, p in ins] + [(1 - sum(p for *_, p in ins), None)]
        choices.append(options)
    for pick in itertools.product(*choices):
        prob = math.prod(p for p, _ in pick)
        if prob > 1e-15:
            yield prob, [a for _, a in pick if a is not None]


def exact(dg, seeds, rounds=None):
    """Exact activation probability per node and expected cumulative reach per round.

    A node's activation round is its live-path distance from the seeds, so
    the horizon ``rounds`` keeps the nodes within that distance.
    """
    worlds = worlds_ic(dg) if dg.model == "ic" else worlds_lt(dg)
    p_node = np.zeros(dg.n)
    by_round = np.zeros(dg.n)
    for prob, live in worlds:
        dist = np.array(live_distances(dg.n, live, seeds))
        if rounds is not None:
            dist[dist > rounds] = -1
        p_node += prob * (dist >= 0)
        for r in range(dg.n):
            by_round[r] += prob * np.count_nonzero((dist >= 0) & (dist <= r))
    return p_node, by_round


def build(n, edges, *, directed=True, model="ic", p=None, probs=None):
    src = np.array([a for a, _ in edges], dtype=np.int32)
    dst = np.array([b for _, b in edges], dtype=np.int32)
    g = GraphArrays(n, directed, src, dst, np.ones(len(edges)),
                    probability=None if probs is None else np.asarray(probs, dtype=float))
    if probs is not None:
        return diffusion_graph(g, model=model, scheme="explicit")
    return diffusion_graph(g, model=model, scheme="uniform", p=p)


def within(est: D.SpreadEstimate, value: float, k: float = 4.0) -> bool:
    return abs(est.mean - value) <= k * est.stderr + 1e-12


# ------------------------------------------------------------ exact spreads

P_ARC, P_PATH, P_STAR, P_HALF = 0.3, 0.1, 0.3, 0.5
CASES = [
    # name, n, edges, directed, p, seed, closed form (Source: REFERENCES.md "Exact expected
    # spreads", derived; each is also recomputed below by exact enumeration)
    ("one arc", 2, [(0, 1)], True, P_ARC, 0, 1 + P_ARC),
    ("path L=3", 4, [(0, 1), (1, 2), (2, 3)], True, P_PATH, 0,
     sum(P_PATH**i for i in range(4))),  # 1.111
    ("star centre", 4, [(0, 1), (0, 2), (0, 3)], False, P_STAR, 0, 1 + 3 * P_STAR),  # 1.9
    ("star leaf", 4, [(0, 1), (0, 2), (0, 3)], False, P_STAR, 1,
     1 + P_STAR + 2 * P_STAR**2),  # 1.48
    ("diamond", 4, [(0, 1), (0, 2), (1, 3), (2, 3)], True, P_HALF, 0,
     1 + 2 * P_HALF + 2 * P_HALF**2 - P_HALF**4),  # 2.4375
    ("triangle", 3, [(0, 1), (1, 2), (0, 2)], False, P_HALF, 0,
     1 + 2 * (P_HALF + (1 - P_HALF) * P_HALF**2)),  # 2.25
]


@pytest.mark.parametrize("name,n,edges,directed,p,seed,closed", CASES, ids=[c[0] for c in CASES])
def test_ic_spread_matches_enumeration_and_closed_form(name, n, edges, directed, p, seed, closed):
    dg = build(n, edges, directed=directed, p=p)
    p_node, _ = exact(dg, [seed])
    # Source: exact enumeration of all 2^m live-edge graphs vs the closed form.
    assert p_node.sum() == pytest.approx(closed, abs=1e-12)
    est = D.estimate_spread(dg, [seed], runs=20_000, random_seed=3)
    assert within(est, closed), (est, closed)


def test_reference_values_as_published():
    # Source: REFERENCES.md check values (derived), against the closed forms above.
    assert [round(c[-1], 4) for c in CASES] == [1.3, 1.111, 1.9, 1.48, 2.4375, 2.25]


@pytest.mark.parametrize("w", [0.2, 0.45])
def test_lt_diamond(w):
    dg = build(4, [(0, 1), (0, 2), (1, 3), (2, 3)], model="lt", probs=[w, w, 0.5, 0.5])
    p_node, _ = exact(dg, [0])
    # Source: REFERENCES.md LT diamond sigma({s}) = 1 + 3w (derived), and exact enumeration
    # of every node's choice of at most one in-arc.
    assert p_node.sum() == pytest.approx(1 + 3 * w, abs=1e-12)
    assert within(D.estimate_spread(dg, [0], runs=20_000, random_seed=1), 1 + 3 * w)


def test_p_one_gives_the_reachable_set():
    G = nx.gnp_random_graph(60, 0.04, seed=4, directed=True)
    dg = build(60, list(G.edges()), p=1.0)
    seeds = [0, 5]
    # Source: NetworkX descendants (reachable set), computed in this test.
    reach = len(set(seeds).union(*(nx.descendants(G, s) for s in seeds)))
    assert D.estimate_spread(dg, seeds, runs=10) == D.SpreadEstimate(float(reach), 0.0, 10)


MIXED_EDGES = [(0, 1), (0, 2), (1, 2), (2, 3), (1, 4), (3, 4), (4, 0)]
MIXED_P = [0.6, 0.3, 0.5, 0.7, 0.2, 0.4, 0.9]


@pytest.mark.parametrize("model", ["ic", "lt"])
def test_node_probabilities_and_adoption_curve_match_enumeration(model):
    probs = MIXED_P if model == "ic" else [0.4, 0.3, 0.5, 0.7, 0.2, 0.6, 0.9]
    dg = build(5, MIXED_EDGES, model=model, probs=probs)
    p_node, by_round = exact(dg, [0])
    res = F.forecast(dg, {"s": [0]}, simulations=20_000, min_simulations=20_000,
                     top_nodes=5, include_seeds=True, random_seed=2)["s"]
    # Source: exact enumeration of live-edge worlds (IC: 2^7; LT: in-arc choices).
    for nr in res.top_nodes:
        assert abs(nr.probability - p_node[nr.node]) <= 4 * nr.stderr + 1e-12
    assert {nr.node for nr in res.top_nodes} == set(np.flatnonzero(p_node > 0).tolist())
    for rf in res.by_round:
        half = (rf.cumulative_ci_high - rf.cumulative_ci_low) / 2
        se = half / 1.959963984540054  # normal 97.5 % quantile (from memory)
        assert abs(rf.cumulative_mean - by_round[rf.round]) <= 4 * se + 1e-12
    assert res.by_round[-1].cumulative_mean == pytest.approx(res.expected_reach.mean)


@pytest.mark.parametrize("model", ["ic", "lt"])
def test_horizon_against_enumeration(model):
    probs = MIXED_P if model == "ic" else [0.4, 0.3, 0.5, 0.7, 0.2, 0.6, 0.9]
    dg = build(5, MIXED_EDGES, model=model, probs=probs)
    for r in (1, 2):
        p_node, _ = exact(dg, [0], rounds=r)
        # Source: exact enumeration; reach within the horizon = nodes at live distance <= r.
        est = D.estimate_spread(dg, [0], runs=20_000, rounds=r, random_seed=r)
        assert within(est, p_node.sum())


def test_horizon_on_a_certain_path():
    dg = build(8, [(i, i + 1) for i in range(7)], p=1.0)
    for r in (1, 3, 7, 20):
        # Source: closed form; on a path with p = 1, rounds = r reach min(r, 7) + 1 nodes.
        assert D.estimate_spread(dg, [0], runs=3, rounds=r).mean == min(r, 7) + 1
        rounds = D.independent_cascade(dg, [0], rounds=r, rng_seed=0)
        assert rounds.tolist() == [i if i <= r else -1 for i in range(8)]


def test_single_runs_are_reproducible_and_consistent():
    G = nx.gnp_random_graph(200, 0.05, seed=1, directed=True)
    dg = build(200, list(G.edges()), p=0.2)
    a = D.independent_cascade(dg, [0, 1], rng_seed=5)
    assert np.array_equal(a, D.independent_cascade(dg, [1, 0, 1], rng_seed=5))
    assert np.count_nonzero(a >= 0) == D.estimate_spread(dg, [0, 1], runs=1, random_seed=5).mean
    # Every node activated in round t > 0 has an in-neighbour activated in round t - 1.
    for v in np.flatnonzero(a > 0):
        assert any(a[u] == a[v] - 1 for u in G.predecessors(int(v)))
    edges = np.array(list(G.edges()), dtype=np.int32)
    lt = diffusion_graph(GraphArrays(200, True, edges[:, 0], edges[:, 1], np.ones(len(edges))),
                         model="lt", scheme="weighted_cascade")
    b = D.linear_threshold(lt, [0, 1], rng_seed=9)
    assert np.array_equal(b, D.linear_threshold(lt, [1, 0], rng_seed=9))
    assert b[0] == b[1] == 0 and np.count_nonzero(b > 0) > 0
    for v in np.flatnonzero(b > 0):
        assert any(b[u] == b[v] - 1 for u in G.predecessors(int(v)))


def test_estimate_spread_weights():
    dg = build(5, MIXED_EDGES, probs=MIXED_P)
    p_node, _ = exact(dg, [0])
    target = np.array([0.0, 1.0, 0.0, 2.5, 1.0])
    # Source: exact enumeration; expected target reach = sum_v value_v * P(v reached).
    est = D.estimate_spread(dg, [0], runs=20_000, weights=target, random_seed=4)
    assert within(est, float(target @ p_node))
    ones = D.estimate_spread(dg, [0], runs=500, weights=np.ones(5), random_seed=4)
    assert ones == D.estimate_spread(dg, [0], runs=500, random_seed=4)


# ------------------------------------------------------------ percolation


@pytest.mark.slow
@pytest.mark.parametrize("c,p", [(4.0, 0.5), (10.0, 0.2)], ids=["coins", "geometric-skip"])
def test_percolation_limit_on_erdos_renyi(c, p):
    n = 20_000
    rng = np.random.default_rng(2002)
    pairs = rng.integers(0, n, size=(int(1.02 * c * n / 2), 2))
    pairs = pairs[pairs[:, 0] != pairs[:, 1]]
    pairs = np.unique(np.sort(pairs, axis=1), axis=0)[: int(c * n / 2)]
    g = GraphArrays(n, False, pairs[:, 0].astype(np.int32), pairs[:, 1].astype(np.int32),
                    np.ones(len(pairs)))
    dg = diffusion_graph(g, scheme="uniform", p=p)  # c p = 2 in both cases
    # Source: Newman, Phys. Rev. E 66 (2002) and Networks (2010): IC with uniform p is bond
    # percolation; the giant cluster share solves S = 1 - exp(-c p S) (solved here by
    # fixed-point iteration); a random seed's expected reach / n tends to S^2.
    S = 1.0
    for _ in range(200):
        S = 1.0 - math.exp(-c * p * S)
    runs = 3000
    seeds = rng.integers(0, n, size=runs)
    reach = np.array([D.estimate_spread(dg, [int(s)], runs=1, random_seed=i).mean
                      for i, s in enumerate(seeds)]) / n
    # Finite size: the giant cluster of one n = 20000 graph differs from S n by O(sqrt(n))
    # nodes (about 0.005 n), so allow 0.02 on top of 4 Monte Carlo standard errors.
    big = reach > 0.1
    assert abs(big.mean() - S) <= 4 * math.sqrt(S * (1 - S) / runs) + 0.02
    assert abs(reach[big].mean() - S) <= 0.02
    se = reach.std(ddof=1) / math.sqrt(runs)
    assert abs(reach.mean() - S * S) <= 4 * se + 0.02


@pytest.mark.slow
def test_percolation_share_converges_as_n_grows():
    # The giant cluster's share approaches S as n grows, within the finite-size
    # fluctuation of each n. Source: Newman (2002, 2010) for S = 1 - exp(-c p S), as
    # above; the fluctuation is from memory: the central limit theorem for the giant
    # component of G(n, lam/n) (e.g. Pittel 1990) gives sd = sqrt(S(1-S)) / (1 - lam(1-S))
    # / sqrt(n), lam = c p (300 simulated graphs at n = 20000 gave var/n = 0.471 against
    # the formula's 0.459). Bounds use 5 of those sds plus 4 Monte Carlo errors.
    c, p = 4.0, 0.5
    lam = c * p
    S = 1.0
    for _ in range(200):
        S = 1.0 - math.exp(-lam * S)
    sd_unit = math.sqrt(S * (1 - S)) / (1 - lam * (1 - S))
    rng = np.random.default_rng(2010)
    errors = []
    for n in (5_000, 20_000, 80_000):
        pairs = rng.integers(0, n, size=(int(1.02 * c * n / 2), 2))
        pairs = pairs[pairs[:, 0] != pairs[:, 1]]
        pairs = np.unique(np.sort(pairs, axis=1), axis=0)[: int(c * n / 2)]
        g = GraphArrays(n, False, pairs[:, 0].astype(np.int32), pairs[:, 1].astype(np.int32),
                        np.ones(len(pairs)))
        dg = diffusion_graph(g, scheme="uniform", p=p)
        runs = 300
        seeds = rng.integers(0, n, size=runs)
        reach = np.array([D.estimate_spread(dg, [int(s)], runs=1, random_seed=n + i).mean
                          for i, s in enumerate(seeds)]) / n
        big = reach > 0.1
        share = reach[big].mean()
        finite = 5 * sd_unit / math.sqrt(n)
        assert abs(share - S) <= finite + 4 * reach[big].std(ddof=1) / math.sqrt(big.sum())
        assert abs(big.mean() - S) <= finite + 4 * math.sqrt(S * (1 - S) / runs)
        errors.append(abs(share - S))
    # The bound itself shrinks like 1/sqrt(n): at n = 80000 the share is within 0.015.
    assert errors[-1] <= 0.015


# ------------------------------------------------------------ forecast


@pytest.fixture(scope="module")
def medium():
    G = nx.gnp_random_graph(2000, 0.004, seed=7, directed=True)
    edges = np.array(list(G.edges()), dtype=np.int32)
    g = GraphArrays(2000, True, edges[:, 0], edges[:, 1], np.ones(len(edges)))
    return diffusion_graph(g, scheme="weighted_cascade")


def test_forecast_stops_early_with_loose_precision(medium):
    res = F.forecast(medium, {"a": [0, 1, 2]}, simulations=50_000, precision=5.0)["a"]
    assert res.stopped_because == "precision_reached"
    assert 200 <= res.simulations < 50_000
    assert res.half_width <= 5.0
    rel = F.forecast(medium, {"a": [0, 1, 2]}, simulations=50_000,
                     relative_precision=0.2)["a"]
    assert rel.stopped_because == "precision_reached"
    assert rel.half_width <= 0.2 * rel.expected_reach.mean


def test_forecast_hits_the_cap_with_tight_precision(medium):
    res = F.forecast(medium, {"a": [0, 1, 2]}, simulations=1000, precision=1e-6)["a"]
    assert res.stopped_because == "simulation_cap" and res.simulations == 1000
    both = F.forecast(medium, {"a": [0, 1, 2]}, simulations=1000, precision=1e6,
                      relative_precision=1e-9)["a"]
    assert both.stopped_because == "simulation_cap"  # both criteria must hold
    plain = F.forecast(medium, {"a": [0, 1, 2]}, simulations=700)["a"]
    assert plain.simulations == 700 and plain.stopped_because == "simulation_cap"


def test_forecast_statistics_are_consistent(medium):
    labels = ("x", "y")
    segments = (np.arange(2000) % 3 - 1).astype(np.int32)  # -1, 0, 1, -1, ...
    weights = np.where(np.arange(2000) % 2 == 0, 1.0, 0.0)
    res = F.forecast(medium, {"a": [0, 1, 2], "b": [5]}, simulations=400, min_simulations=400,
                     segments=segments, segment_labels=labels, weights=weights,
                     confidence=0.9, top_nodes=7)
    assert list(res) == ["a", "b"]
    a = res["a"]
    e = a.expected_reach
    z = 1.6448536269514722  # Source: normal quantile at 0.95 (two-sided 90 %), from memory.
    assert (e.ci_high - e.mean) == pytest.approx(z * e.stderr)
    assert e.ci_low < e.mean < e.ci_high
    assert list(a.percentiles) == [5, 25, 50, 75, 95]
    assert sorted(a.percentiles.values()) == list(a.percentiles.values())
    curve = [r.cumulative_mean for r in a.by_round]
    assert curve[0] == 3.0 and curve == sorted(curve)
    assert sum(r.new_mean for r in a.by_round) == pytest.approx(e.mean)
    assert len(a.top_nodes) == 7 and not {0, 1, 2} & {t.node for t in a.top_nodes}
    probs = [t.probability for t in a.top_nodes]
    assert probs == sorted(probs, reverse=True)
    assert a.weighted_reach is not None and a.weighted_reach.mean <= e.mean
    assert sum(a.segment_reach.values()) <= e.mean
    assert set(a.segment_reach) == set(labels)
    # Every set runs on the same worlds: the key of the common worlds, whatever the name.
    assert a.stream_key == res["b"].stream_key == D.stream_key(0, "worlds")
    alone = F.forecast(medium, {"b": [5]}, simulations=400, min_simulations=400,
                       confidence=0.9)["b"]
    assert alone.expected_reach == res["b"].expected_reach  # a set's stream is its own
    assert a.weighted_percentiles is not None and alone.weighted_reach is None


def test_forecast_segment_reach_matches_enumeration():
    dg = build(5, MIXED_EDGES, probs=MIXED_P)
    p_node, _ = exact(dg, [0])
    codes = np.array([0, 1, 1, -1, 0], np.int32)
    res = F.forecast(dg, {"s": [0]}, simulations=20_000, min_simulations=20_000,
                     segments=codes, segment_labels=("p", "q"), random_seed=8)["s"]
    # Source: exact enumeration; expected reach in a segment = sum of its nodes' P(reached).
    # Bound: each node's count is binomial, so the sum's standard error is at most the
    # sum of the node standard errors.
    for code, label in enumerate(("p", "q")):
        nodes = np.flatnonzero(codes == code)
        se = sum(math.sqrt(max(p_node[v] * (1 - p_node[v]), 0.0) / 20_000) for v in nodes)
        assert abs(res.segment_reach[label] - p_node[nodes].sum()) <= 4 * se + 1e-12


def test_forecast_reproducible_and_batch_independent(medium):
    kw = dict(simulations=2000, precision=2.0, random_seed=11)
    r1 = F.forecast(medium, {"a": [0, 3]}, **kw)["a"]
    r2 = F.forecast(medium, {"a": [3, 0]}, **kw)["a"]
    assert r1.expected_reach == r2.expected_reach and r1.by_round == r2.by_round
    assert r1.top_nodes == r2.top_nodes and r1.simulations == r2.simulations
    # The first N runs of a forecast are the N runs of estimate_spread's stream for that key:
    # same numbers whatever the batch schedule.
    fixed = F.forecast(medium, {"a": [0, 3]}, simulations=r1.simulations,
                       min_simulations=r1.simulations, random_seed=11)["a"]
    assert fixed.expected_reach == r1.expected_reach
    other = F.forecast(medium, {"a": [0, 3]}, simulations=500, random_seed=12)["a"]
    assert other.expected_reach != F.forecast(medium, {"a": [0, 3]}, simulations=500,
                                              random_seed=11)["a"].expected_reach


def test_forecast_progress_and_cancel(medium):
    seen = []
    F.forecast(medium, {"a": [0], "b": [1]}, simulations=3000, min_simulations=200,
               progress=lambda f, msg: seen.append((f, msg)))
    fractions = [f for f, _ in seen]
    assert fractions == sorted(fractions) and fractions[-1] == 1.0 and len(seen) >= 4
    assert any("'b'" in msg for _, msg in seen)

    def cancel(fraction, message):
        raise Cancelled(job="x")

    with pytest.raises(Cancelled):
        F.forecast(medium, {"a": [0]}, simulations=3000, progress=cancel)


def test_stream_key_is_the_documented_hash():
    # Source: the derivation stated in stream_key's docstring, recomputed with hashlib.
    digest = hashlib.blake2b(b"bellwether.diffusion:7:north", digest_size=8).digest()
    assert D.stream_key(7, "north") == int.from_bytes(digest, "little")


# ------------------------------------------------------------ validation


def test_validation_errors(medium):
    with pytest.raises(UnknownNode) as err:
        D.estimate_spread(medium, [0, 2000])
    assert err.value.data == {"field": "seeds", "node_index": 2000}
    with pytest.raises(UnknownNode) as err:
        F.forecast(medium, {"north": [-1]})
    assert err.value.data == {"field": "seed_sets.north", "node_index": -1}
    cases = [
        (lambda: D.estimate_spread(medium, []), "seeds"),
        (lambda: D.estimate_spread(medium, [0.5]), "seeds"),
        (lambda: D.estimate_spread(medium, [0], rounds=0), "rounds"),
        (lambda: D.estimate_spread(medium, [0], runs=0), "runs"),
        (lambda: D.estimate_spread(medium, [0], weights=-np.ones(2000)), "weights"),
        (lambda: D.independent_cascade(medium, [0], rounds=-1, rng_seed=0), "rounds"),
        (lambda: D.linear_threshold(medium, [0], rng_seed=0), "model"),
        (lambda: F.forecast(medium, {}), "seed_sets"),
        (lambda: F.forecast(medium, {"a": []}), "seed_sets.a"),
        (lambda: F.forecast(medium, {"a": [0]}, confidence=1.0), "confidence"),
        (lambda: F.forecast(medium, {"a": [0]}, confidence=0.0), "confidence"),
        (lambda: F.forecast(medium, {"a": [0]}, precision=0.0), "precision"),
        (lambda: F.forecast(medium, {"a": [0]}, precision=-1.0), "precision"),
        (lambda: F.forecast(medium, {"a": [0]}, relative_precision=0), "relative_precision"),
        (lambda: F.forecast(medium, {"a": [0]}, rounds=0), "rounds"),
        (lambda: F.forecast(medium, {"a": [0]}, segments=np.full(2000, 2, np.int32),
                            segment_labels=("x",)), "segments"),
        (lambda: F.forecast(medium, {"a": [0]}, random_seed=1.5), "random_seed"),
    ]
    for call, field in cases:
        with pytest.raises(InvalidParameter) as err:
            call()
        assert err.value.data["field"] == field
