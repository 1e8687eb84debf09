"""Tests for service.analytics.ties.referrals: next contacts and referral asks."""

from __future__ import annotations

import itertools

import numpy as np
import pytest

from service.analytics.ties import referrals as referrals_module
from service.analytics.errors import InvalidParameter, UnknownNode
from service.analytics.graph import GraphArrays, diffusion_graph
from service.analytics.ties.referrals import next_contacts, referral_asks
from service.analytics.ties.strength import neighbour_index


def small_digraph(seed: int, lt: bool) -> GraphArrays:
    """7 nodes, 13 distinct arcs, random probabilities (LT: incoming sums 0.8 or less)."""
    rng = np.random.default_rng(seed)
    pairs = [(u, v) for u in range(7) for v in range(7) if u != v]
    pick = rng.choice(len(pairs), 13, replace=False)
    src = np.array([pairs[i][0] for i in pick], np.int32)
    dst = np.array([pairs[i][1] for i in pick], np.int32)
    w = rng.integers(1, 5, 13).astype(float)
    p = rng.uniform(0.05, 0.9, 13)
    if lt:
        insum = np.bincount(dst, weights=p, minlength=7)
        p = 0.8 * p / insum[dst]
    return GraphArrays(7, True, src, dst, w, p)


def exact_ic_exposure(g: GraphArrays, adopters: set[int]) -> dict[int, float]:
    """P(v gets a live arc from an adopter), summed over all 2^m live-arc worlds."""
    out: dict[int, float] = {}
    arcs = list(zip(g.src.tolist(), g.dst.tolist(), g.probability.tolist()))
    for live in itertools.product((False, True), repeat=len(arcs)):
        pr = 1.0
        hit = set()
        for on, (u, v, p) in zip(live, arcs):
            pr *= p if on else 1 - p
            if on and u in adopters and v not in adopters:
                hit.add(v)
        for v in hit:
            out[v] = out.get(v, 0.0) + pr
    return out


def exact_lt_exposure(g: GraphArrays, adopters: set[int]) -> dict[int, float]:
    """LT live-edge worlds: each node keeps at most one in-arc, arc (u, v) with prob b_uv."""
    arcs = list(zip(g.src.tolist(), g.dst.tolist(), g.probability.tolist()))
    choices = []
    for v in range(g.n):
        ins = [(u, b) for u, w, b in arcs if w == v]
        choices.append([(None, 1 - sum(b for _, b in ins))] + ins)
    out: dict[int, float] = {}
    for world in itertools.product(*choices):
        pr = float(np.prod([b for _, b in world]))
        for v, (u, _) in enumerate(world):
            if u is not None and u in adopters and v not in adopters:
                out[v] = out.get(v, 0.0) + pr
    return out


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_ic_exposure_equals_exact_enumeration(seed: int) -> None:
    g = small_digraph(seed, lt=False)
    dg = diffusion_graph(g, model="ic", scheme="explicit")
    adopters = {0, 3, 5}
    got = {c.node: c for c in next_contacts(dg, sorted(adopters), limit=None)}
    # Source: exact enumeration of all 2^13 live-arc worlds (Kempe et al. 2003, Thm 4.5).
    exact = exact_ic_exposure(g, adopters)
    assert set(got) == set(exact)
    for v, p in exact.items():
        assert got[v].exposure == pytest.approx(p, abs=1e-12)
        assert got[v].adopter_contacts == sum(
            1 for u, w in zip(g.src, g.dst) if w == v and u in adopters
        )


@pytest.mark.parametrize("seed", [1, 4])
def test_lt_exposure_equals_exact_enumeration(seed: int) -> None:
    g = small_digraph(seed, lt=True)
    dg = diffusion_graph(g, model="lt", scheme="explicit")
    adopters = {1, 2, 6}
    got = {c.node: c.exposure for c in next_contacts(dg, sorted(adopters), limit=None)}
    # Source: exact enumeration of LT live-edge worlds (Kempe et al. 2003, Thm 4.6).
    exact = exact_lt_exposure(g, adopters)
    assert set(got) == set(exact)
    for v, p in exact.items():
        assert got[v] == pytest.approx(p, abs=1e-12)


def test_lt_exposure_capped_at_one() -> None:
    g = GraphArrays(3, True, np.array([0, 1], np.int32), np.array([2, 2], np.int32), np.ones(2),
                    np.array([0.7, 0.6]))
    dg = diffusion_graph(g, scheme="explicit")._replace(model="lt")  # deliberately over 1
    # Source: closed form, min(1, 0.7 + 0.6).
    assert next_contacts(dg, [0, 1])[0].exposure == 1.0


def brute_asker(g, dg, index, adopters, v, permitted):
    strength = {}
    for e, (a, b) in enumerate(zip(g.src.tolist(), g.dst.tolist())):
        strength[frozenset((a, b))] = index.ties.strength[e]
    best = None
    for u in adopters:
        for i in range(dg.out_indptr[u], dg.out_indptr[u + 1]):
            if dg.out_indices[i] == v and permitted[u]:
                key = (strength[frozenset((u, v))], dg.out_prob[i], -u)
                if best is None or key > best[0]:
                    best = (key, u)
    return -1 if best is None else best[1]


def test_asker_is_strongest_tie_and_referrals_assign_each_target_once() -> None:
    rng = np.random.default_rng(8)
    n = 60
    src = rng.integers(0, n, 400).astype(np.int32)
    dst = rng.integers(0, n, 400).astype(np.int32)
    keep = src != dst
    key = np.unique(src[keep].astype(np.int64) * n + dst[keep])
    src, dst = (key // n).astype(np.int32), (key % n).astype(np.int32)
    g = GraphArrays(n, True, src, dst, rng.integers(1, 9, len(src)).astype(float))
    dg = diffusion_graph(g, scheme="weighted_cascade")
    ix = neighbour_index(g)
    adopters = sorted(rng.choice(n, 12, replace=False).tolist())
    everyone = np.ones(n, dtype=bool)
    contacts = next_contacts(dg, adopters, index=ix, limit=None)
    for c in contacts:
        # Source: brute force over the adopters' arcs with the index's tie strengths.
        assert c.ask == brute_asker(g, dg, ix, adopters, c.node, everyone)
    asks = referral_asks(dg, adopters, index=ix, per_adopter=3)
    listed = [t.node for a in asks for t in a.targets]
    assert len(listed) == len(set(listed))  # each target once
    by_node = {c.node: c for c in contacts}
    for a in asks:
        assert all(t.ask == a.adopter for t in a.targets)
        assert len(a.targets) <= 3
        ex = [t.exposure for t in a.targets]
        assert ex == sorted(ex, reverse=True)
        assert a.expected_referrals == pytest.approx(sum(ex))
        # Each adopter's list is the best of the targets assigned to it.
        mine = sorted((c for c in contacts if c.ask == a.adopter),
                      key=lambda c: (-c.exposure, c.node))
        assert [t.node for t in a.targets] == [c.node for c in mine[:3]]
    totals = [a.expected_referrals for a in asks]
    assert totals == sorted(totals, reverse=True)
    assert referral_asks(dg, adopters, index=ix, per_adopter=3, limit=4) == asks[:4]
    wide = referral_asks(dg, adopters, index=ix, per_adopter=10_000)
    assert sorted(t.node for a in wide for t in a.targets) == sorted(by_node)


def test_eligibility_for_targets_and_askers() -> None:
    g = small_digraph(5, lt=False)
    dg = diffusion_graph(g, scheme="explicit")
    ix = neighbour_index(g)
    adopters = [0, 3, 5]
    eligible = np.ones(7, dtype=bool)
    eligible[[1, 3]] = False  # 3 is an adopter who may not be contacted
    got = next_contacts(dg, adopters, index=ix, eligible=eligible, limit=None)
    full = {c.node: c for c in next_contacts(dg, adopters, index=ix, limit=None)}
    assert 1 not in {c.node for c in got}
    for c in got:
        assert c.exposure == full[c.node].exposure  # exposure counts every adopter
        assert c.ask == brute_asker(g, dg, ix, adopters, c.node, eligible)
    askers = np.zeros(7, dtype=bool)
    askers[5] = True
    only5 = next_contacts(dg, adopters, index=ix, askers=askers, limit=None)
    assert all(c.ask in (5, -1) for c in only5)
    asks = referral_asks(dg, adopters, index=ix, askers=askers)
    assert [a.adopter for a in asks] in ([5], [])


def test_follow_on_blend() -> None:
    g = small_digraph(2, lt=False)
    dg = diffusion_graph(g, scheme="explicit")
    follow = np.arange(7, dtype=float)
    base = {c.node: c.exposure for c in next_contacts(dg, [0], limit=None)}
    got = next_contacts(dg, [0], limit=None, follow_on=follow, blend=0.25)
    top = max(follow[v] for v in base)
    for c in got:
        # Source: the documented blend (1 - b) exposure + b follow_on / max over listed.
        assert c.score == pytest.approx(0.75 * base[c.node] + 0.25 * follow[c.node] / top)
    assert [c.score for c in got] == sorted((c.score for c in got), reverse=True)


def test_undirected_exposure_counts_neighbours() -> None:
    # Star centre 0 with leaves 1..4, plus 1-2; adopters {1, 2}; uniform p = 0.5.
    g = GraphArrays(5, False, np.array([0, 0, 0, 0, 1], np.int32),
                    np.array([1, 2, 3, 4, 2], np.int32), np.ones(5))
    dg = diffusion_graph(g, scheme="uniform", p=0.5)
    got = next_contacts(dg, [1, 2, 2])
    # Source: closed form 1 - (1 - 0.5)^2 for two adopter neighbours.
    assert [(c.node, c.exposure, c.adopter_contacts) for c in got] == [(0, 0.75, 2)]


def test_bad_input() -> None:
    g = small_digraph(1, lt=False)
    dg = diffusion_graph(g, scheme="explicit")
    with pytest.raises(UnknownNode) as err:
        next_contacts(dg, [0, 7])
    assert err.value.data["node_index"] == 7
    with pytest.raises(InvalidParameter):
        next_contacts(dg, [0], blend=1.5)
    with pytest.raises(InvalidParameter):
        next_contacts(dg, [0], eligible=np.ones(3, dtype=bool))
    with pytest.raises(InvalidParameter):
        next_contacts(dg, [0], follow_on=-np.ones(7), blend=0.5)
    with pytest.raises(InvalidParameter):
        referral_asks(dg, [0], per_adopter=0)
    assert next_contacts(dg, []) == [] and referral_asks(dg, []) == []


def test_all_exported() -> None:
    for name in referrals_module.__all__:
        assert hasattr(referrals_module, name)


def test_weighted_cascade_ties_ranked_by_who_can_act() -> None:
    # Undirected star-of-leaves: adopters 0 and 1; leaves 2..5 hang on 0 or 1 only, so under
    # weighted cascade (p_uv = 1/deg(v), closed form) each has exposure 1. Leaf 6 has two ties,
    # both to adopters: exposure 1 - (1 - 1/2)^2 = 0.75. Interaction counts differ, and adopter 1
    # may not be asked (no consent), so leaves 4 and 5 have nobody to ask them.
    src = np.array([0, 0, 1, 1, 0, 1, 0], np.int32)
    dst = np.array([2, 3, 4, 5, 6, 6, 1], np.int32)
    w = np.array([1.0, 9.0, 20.0, 2.0, 1.0, 1.0, 1.0])
    g = GraphArrays(7, False, src, dst, w)
    dg = diffusion_graph(g, scheme="weighted_cascade")
    askers = np.array([True, False, True, True, True, True, True])
    got = next_contacts(dg, [0, 1], index=neighbour_index(g), askers=askers, limit=None)
    by = {c.node: c for c in got}
    assert all(by[v].exposure == pytest.approx(1.0) for v in (2, 3, 4, 5))
    assert by[6].exposure == pytest.approx(0.75)
    order = [c.node for c in got]
    # Askable first (2, 3 and 6, whose asker is 0); among equal exposure 1, the stronger tie first
    # (9 interactions before 1); the people nobody may ask (4, 5) last.
    assert order[:3] == [3, 2, 6] and set(order[3:]) == {4, 5}
    assert all(c.ask < 0 for c in got[3:]) and all(c.ask == 0 for c in got[:3])
    # Referral asks: adopter 0's list follows the same order.
    (grp,) = referral_asks(dg, [0, 1], index=neighbour_index(g), askers=askers)
    assert grp.adopter == 0 and [t.node for t in grp.targets] == [3, 2, 6]
