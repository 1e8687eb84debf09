"""Tests for the RR-set sampling kernels (service.analytics.seeding._rr_kernels, _rr).

Distribution checks compare sampled RR sets with exact probabilities that
follow from the live-edge definition of RR sets (Borgs et al. 2014; Kempe
et al. 2003, Thm 4.5 / 4.6), recomputed here in closed form or by
enumeration; Monte Carlo checks use a fixed seed and a stated number of
standard errors.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from service.analytics.seeding import _rr_kernels as K
from service.analytics.seeding._rr import RRCollection, RRSampler
from service.analytics.graph import GraphArrays, diffusion_graph


def digraph(n, arcs, probs=None, *, model="ic", scheme="explicit", p=None):
    src = np.array([a for a, _ in arcs], np.int32)
    dst = np.array([b for _, b in arcs], np.int32)
    pr = None if probs is None else np.asarray(probs, float)
    g = GraphArrays(n, True, src, dst, np.ones(len(arcs)), pr)
    return diffusion_graph(g, model=model, scheme=scheme if probs is not None else "uniform",
                           p=p)


def collection(dg, count, *, seed=0, tag=0, weights=None, rounds=None):
    c = RRCollection(RRSampler(dg, weights=weights, rounds=rounds), K.stream_key(seed, tag))
    c.extend_to(count)
    return c


def sets_of(c):
    off = c.offsets
    return [c.nodes[off[i]:off[i + 1]] for i in range(c.count)]


def chi2_ok(observed, probs, *, z=4.0):
    """Pearson chi-square below mean + z * sd of its null distribution."""
    observed = np.asarray(observed, float)
    expected = observed.sum() * np.asarray(probs, float)
    keep = expected > 0
    assert observed[~keep].sum() == 0, "an impossible outcome was sampled"
    stat = float(((observed[keep] - expected[keep]) ** 2 / expected[keep]).sum())
    dof = int(keep.sum()) - 1
    return stat <= dof + z * math.sqrt(2 * dof), (stat, dof)


def test_modes_are_chosen_per_node():
    # Node 3 has three in-arcs of one probability (block coins), node 4 has
    # BLOCK_MAX + 1 of one probability (skip), node 2 mixed (coin), node 1
    # p = 1 (all), node 0 none.
    many = K.BLOCK_MAX + 1
    arcs = [(0, 1), (0, 2), (1, 2), (0, 3), (1, 3), (2, 3)] + [(5 + i, 4) for i in range(many)]
    dg = digraph(5 + many, arcs, [1.0, 0.2, 0.3, 0.4, 0.4, 0.4] + [0.25] * many)
    mode, param, _ = K.prepare_ic(dg.in_indptr, dg.in_prob)
    assert mode.tolist()[:5] == [K.IC_NONE, K.IC_ALL, K.IC_COIN, K.IC_BLOCK, K.IC_SKIP]
    # Source: closed forms. Block rows keep ceil(0.4 * 2**32) - 1; skipping rows
    # 1 / log(1 - 0.25) (the kernels multiply by it).
    assert param[3] == math.ceil(0.4 * 2**32) - 1
    assert param[4] == pytest.approx(1.0 / math.log(0.75))


@pytest.mark.parametrize("probs", [[0.3] * 5, [0.3] * 16, [0.3] * 17, [0.3] * 4 + [0.3000001]],
                         ids=["block", "block-full", "skip", "coin"])
def test_live_in_arcs_are_binomial(probs):
    # Star 1..d -> 0; roots drawn only at node 0 (audience weight on 0 alone).
    # Source: closed form. Each in-arc kept independently with p = 0.3, so the
    # RR set size - 1 is Binomial(d, 0.3), and each leaf appears w.p. 0.3.
    d = len(probs)
    dg = digraph(d + 1, [(i, 0) for i in range(1, d + 1)], probs)
    w = np.zeros(d + 1)
    w[0] = 1.0
    c = collection(dg, 40_000, weights=w, seed=3)
    sizes = np.diff(c.offsets) - 1
    pmf = [math.comb(d, j) * 0.3 ** j * 0.7 ** (d - j) for j in range(d + 1)]
    ok, info = chi2_ok(np.bincount(sizes, minlength=d + 1), pmf)
    assert ok, info
    freq = np.bincount(c.nodes, minlength=d + 1)[1:] / c.count
    se = math.sqrt(0.3 * 0.7 / c.count)
    assert np.all(np.abs(freq - 0.3) < 4 * se)
    # Arcs are independent: each pair of leaves is live together w.p. 0.09.
    both = np.zeros(c.count, bool)
    off = c.offsets
    for leaves in ((1, 2), (1, d), (d - 1, d)):
        member = [np.zeros(c.count, bool) for _ in leaves]
        for m, leaf in zip(member, leaves, strict=True):
            idx = np.flatnonzero(c.nodes == leaf)
            m[np.searchsorted(off, idx, side="right") - 1] = True
        both = member[0] & member[1]
        se2 = math.sqrt(0.09 * 0.91 / c.count)
        assert abs(both.mean() - 0.09) < 4 * se2


def test_skipping_handles_p_one_and_tiny_p():
    # Source: closed form. p = 1 keeps every arc; p = 1e-12 almost never one.
    dg = digraph(4, [(1, 0), (2, 0), (3, 0)], scheme="uniform", p=1.0)
    w = np.array([1.0, 0, 0, 0])
    assert np.all(np.diff(collection(dg, 100, weights=w).offsets) == 4)
    dg = digraph(4, [(1, 0), (2, 0), (3, 0)], [1e-12] * 3)
    assert np.all(np.diff(collection(dg, 2000, weights=w).offsets) == 1)


def test_lt_walk_picks_at_most_one_in_neighbour():
    # Node 0 with in-weights 0.1, 0.2, 0.3 from 1, 2, 3 (CDF mode), and
    # equal weights 0.25 into node 4 from 0,1,2 (equal mode). Source: closed
    # form of the LT live-edge choice (Kempe et al. 2003, Thm 4.6): neighbour
    # i with probability b_i, none with 1 - sum b.
    dg = digraph(5, [(1, 0), (2, 0), (3, 0), (0, 4), (1, 4), (2, 4)],
                 [0.1, 0.2, 0.3, 0.25, 0.25, 0.25], model="lt")
    for root, parents, b in ((0, [1, 2, 3], [0.1, 0.2, 0.3]), (4, [0, 1, 2], [0.25] * 3)):
        w = np.zeros(5)
        w[root] = 1.0
        c = collection(dg, 30_000, weights=w, rounds=1, seed=5)
        second = np.full(c.count, -1)
        off = c.offsets
        two = np.diff(off) == 2
        second[two] = c.nodes[off[:-1][two] + 1]
        counts = [int(np.sum(second == -1))] + [int(np.sum(second == u)) for u in parents]
        ok, info = chi2_ok(counts, [1 - sum(b)] + b)
        assert ok, info
        assert np.max(np.diff(off)) <= 2


def test_lt_walk_stops_at_a_cycle():
    # Cycle 0 -> 1 -> 2 -> 0, each node's single in-weight 1: the reverse walk
    # visits all three nodes and stops on returning (derived from the definition).
    dg = digraph(3, [(0, 1), (1, 2), (2, 0)], [1.0, 1.0, 1.0], model="lt")
    c = collection(dg, 200)
    assert np.all(np.diff(c.offsets) == 3)
    for s in sets_of(c)[:20]:
        assert sorted(s.tolist()) == [0, 1, 2]


def test_horizon_limits_depth():
    # Path 0 -> 1 -> 2 -> 3 with p = 1, roots at 3 only: with h rounds the set
    # holds the h + 1 nearest nodes (source: closed form).
    dg = digraph(4, [(0, 1), (1, 2), (2, 3)], scheme="uniform", p=1.0)
    w = np.array([0, 0, 0, 1.0])
    for h in (1, 2, 3):
        for model_dg in (dg, digraph(4, [(0, 1), (1, 2), (2, 3)], [1.0] * 3, model="lt")):
            c = collection(model_dg, 50, weights=w, rounds=h)
            assert np.all(np.diff(c.offsets) == h + 1)


def test_same_sets_whatever_the_batching():
    # Set j's stream depends only on (random_seed, tag, j).
    g = GraphArrays(30, False, np.arange(29, dtype=np.int32), np.arange(1, 30, dtype=np.int32),
                    np.ones(29))
    dg = diffusion_graph(g, scheme="uniform", p=0.6)
    one = collection(dg, 5000, seed=11)
    sampler = RRSampler(dg)
    parts = RRCollection(sampler, K.stream_key(11, 0))
    for target in (1, 7, 300, 301, 4999, 5000):
        parts.extend_to(target)
    assert np.array_equal(one.offsets, parts.offsets)
    assert np.array_equal(one.nodes, parts.nodes)
    other = collection(dg, 5000, seed=12)
    assert not np.array_equal(one.nodes[:200], other.nodes[:200])
    # The hit-counting kernel walks the same sets (early exit only).
    mask = np.zeros(30, dtype=np.bool_)
    mask[[4, 17]] = True
    hits, _ = sampler.count_hits(mask, K.stream_key(11, 0), 0, 5000)
    assert hits == one.hits(np.array([4, 17]))


def test_weighted_roots_follow_the_weights():
    # Source: closed form. With no arcs each RR set is its root alone, drawn
    # with probability w_v / sum(w) (Walker alias table).
    g = GraphArrays(5, True, np.empty(0, np.int32), np.empty(0, np.int32), np.empty(0))
    dg = diffusion_graph(g, scheme="uniform", p=0.5)
    w = np.array([0.0, 1.0, 2.0, 3.0, 4.0])
    c = collection(dg, 50_000, weights=w, seed=2)
    ok, info = chi2_ok(np.bincount(c.nodes, minlength=5), w / w.sum())
    assert ok, info


def test_inverted_index_and_examined_count():
    dg = digraph(5, [(0, 1), (1, 2), (2, 3), (3, 4), (4, 0), (0, 2)], scheme="uniform", p=1.0)
    c = collection(dg, 100)
    indptr, sets, counts = c.index()
    ref = [[s for s, members in enumerate(sets_of(c)) if v in members] for v in range(5)]
    for v in range(5):
        assert sets[indptr[v]:indptr[v + 1]].tolist() == ref[v]
        assert counts[v] == len(ref[v])
    # p = 1 on a strongly connected graph: every set is all 5 nodes and every
    # in-arc of each is examined once. Source: definition of "edges examined".
    assert c.examined == 100 * dg.in_indptr[-1]


def test_cover_node_updates_counts():
    dg = digraph(4, [(0, 1), (1, 2), (2, 3)], scheme="uniform", p=0.5)
    c = collection(dg, 2000, seed=1)
    indptr, sets, counts0 = c.index()
    counts = counts0.copy()
    covered = np.zeros(c.count, np.uint8)
    newly = K.cover_node(1, indptr, sets, c.offsets, c.nodes, covered, counts)
    members = sets_of(c)
    assert newly == sum(1 in s for s in members)
    for v in range(4):
        assert counts[v] == sum(v in s and 1 not in s for s in members)
