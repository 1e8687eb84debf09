"""Tests for the interleaved RR samplers (service.analytics.seeding._rr_lanes), IC and LT.

The lanes must give exactly the sets of the one-at-a-time kernel
(:func:`service.analytics.seeding._rr_kernels.sample_ic`, itself checked against closed
forms in test_rr_kernels.py), in the same order, for every sampling mode, with
and without a horizon and weighted roots; and, checked directly against a
closed form, the live in-arcs of a star are Binomial (Kempe et al. 2003: each
in-arc is live independently with its probability).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from service.analytics.seeding import _rr
from service.analytics.seeding import _rr_lanes, _rr_parts
from service.analytics.seeding import _rr_kernels as K
from service.analytics.seeding._rr import RRCollection, RRSampler
from service.analytics.graph import GraphArrays, diffusion_graph


@pytest.fixture
def lanes_always(monkeypatch):
    """Make every IC sampler use the lanes, whatever the graph's size (no batch is long
    enough to put the kernels on trial)."""
    monkeypatch.setattr(_rr, "LANES_MIN_BYTES", -1)
    monkeypatch.setattr(_rr, "TRIAL_MIN_SECONDS", math.inf)


def random_graph(n, m, seed, *, mixed):
    rng = np.random.default_rng(seed)
    src = rng.integers(0, n, m).astype(np.int32)
    dst = rng.integers(0, n, m).astype(np.int32)
    keep = src != dst
    src, dst = src[keep], dst[keep]
    key = np.unique(src.astype(np.int64) * n + dst)
    src, dst = (key // n).astype(np.int32), (key % n).astype(np.int32)
    if mixed:
        # Mixed probabilities give coin rows; p = 1 rows and p = 0 rows too.
        prob = rng.choice([0.0, 0.05, 0.3, 1.0], size=src.size, p=[0.1, 0.5, 0.3, 0.1])
        heavy = dst % 7 == 0  # every in-arc of these nodes live
        prob[heavy] = 1.0
        none = dst % 11 == 0  # no in-arc of these nodes can be live
        prob[none] = 0.0
        g = GraphArrays(n, True, src, dst, np.ones(src.size), prob)
        return diffusion_graph(g, scheme="explicit")
    g = GraphArrays(n, True, src, dst, np.ones(src.size))
    return diffusion_graph(g, scheme="weighted_cascade")


def one_at_a_time(sampler, key, count):
    n = sampler.n
    nodes = np.empty(count * n + n + 16, np.int32)
    ends = np.empty(count, np.int64)
    done, pos, examined = K.sample_ic(
        *sampler._args(), key, 0, count, sampler.horizon, nodes, 0, ends, np.zeros(n, np.int32)
    )
    assert done == count
    return nodes[:pos], ends[:done], examined


@pytest.mark.parametrize("mixed", [False, True], ids=["weighted-cascade", "mixed"])
@pytest.mark.parametrize("rounds", [None, 0, 1, 3])
@pytest.mark.parametrize("weighted", [False, True], ids=["uniform-roots", "weighted-roots"])
def test_lanes_give_the_same_sets(lanes_always, mixed, rounds, weighted):
    n = 400
    dg = random_graph(n, 3000, seed=21, mixed=mixed)
    w = np.random.default_rng(5).random(n) if weighted else None
    sampler = RRSampler(dg, weights=w, rounds=rounds)
    assert sampler.lanes
    key = K.stream_key(9, 1)
    coll = RRCollection(sampler, key)
    for target in (1, 5, 333, 3000):  # batches of every size, first set included
        coll.extend_to(target)
    nodes, ends, examined = one_at_a_time(sampler, key, 3000)
    assert np.array_equal(coll.nodes, nodes)
    assert np.array_equal(coll.offsets[1:], ends)
    assert coll.examined == examined
    assert not any(sc.vis.any() for sc in coll.sampler.scratch)  # marks are left cleared between calls


def test_lanes_survive_a_full_store():
    # A graph whose RR sets are large (p = 1 on a long path, reverse reach up
    # to n): a store with room for few sets forces the kernel to stop and drop
    # late sets, yet every call stores at least the first.
    n = 300
    src = np.arange(n - 1, dtype=np.int32)
    g = GraphArrays(n, True, src, src + 1, np.ones(n - 1))
    dg = diffusion_graph(g, scheme="uniform", p=1.0)
    sampler = RRSampler(dg)
    sampler.lanes = sampler.lanes_ok = True
    sampler.rec, sampler.recf = _rr_lanes.lane_records(sampler.indptr, sampler.mode, sampler.aux)
    sampler.pend_size = _rr_lanes.LANES * 2
    pend = np.empty(sampler.pend_size, np.int64)
    key = K.stream_key(4, 0)
    ref_nodes, ref_ends, _ = one_at_a_time(sampler, key, 200)
    for room in (n, 3 * n, 50 * n):
        out = np.empty(room, np.int32)
        ends = np.empty(200, np.int64)
        vis = np.zeros(n, np.uint16)
        queues = np.empty(_rr_lanes.LANES * n, np.int32)
        done, pos, _ = _rr_lanes.sample_ic_lanes(
            sampler.rec, sampler.recf, sampler.indices, sampler.arc, sampler.accept,
            sampler.alias, key, 0, 200, -1, out, 0, ends, vis, queues, pend,
        )
        assert 1 <= done <= 200
        assert np.array_equal(ends[:done], ref_ends[:done])
        assert np.array_equal(out[:pos], ref_nodes[:pos])
        assert not vis.any()
    # Through the collection the store grows until every set fits.
    coll = RRCollection(sampler, key)
    coll.extend_to(200)
    assert np.array_equal(coll.nodes, ref_nodes)


def test_lanes_live_in_arcs_are_binomial(lanes_always):
    # Star 1..5 -> 0 with p = 0.3, roots drawn at node 0 only. Source: closed
    # form: the RR set size - 1 is Binomial(5, 0.3).
    src = np.arange(1, 6, dtype=np.int32)
    g = GraphArrays(6, True, src, np.zeros(5, np.int32), np.ones(5))
    dg = diffusion_graph(g, scheme="uniform", p=0.3)
    w = np.zeros(6)
    w[0] = 1.0
    coll = RRCollection(RRSampler(dg, weights=w), K.stream_key(3, 0))
    coll.extend_to(40_000)
    sizes = np.bincount(np.diff(coll.offsets) - 1, minlength=6)
    pmf = np.array([math.comb(5, j) * 0.3**j * 0.7 ** (5 - j) for j in range(6)])
    expected = coll.count * pmf
    stat = float(((sizes - expected) ** 2 / expected).sum())
    assert stat <= 5 + 4 * math.sqrt(10)  # chi-square, 5 dof: mean + 4 sd


def test_large_graphs_choose_the_lanes():
    # The choice follows the in-CSR footprint (see LANES_MIN_BYTES).
    small = random_graph(100, 400, seed=1, mixed=False)
    big = random_graph(40_000, 300_000, seed=2, mixed=False)
    assert not RRSampler(small).lanes
    assert RRSampler(big).lanes
    assert RRSampler(lt_graph(40_000, 300_000, seed=3, scheme="normalized")).lanes
    assert not RRSampler(lt_graph(100, 400, seed=3, scheme="normalized")).lanes


def lt_graph(n, m, seed, *, scheme):
    rng = np.random.default_rng(seed)
    src = rng.integers(0, n, m).astype(np.int32)
    dst = rng.integers(0, n, m).astype(np.int32)
    keep = src != dst
    key = np.unique(src[keep].astype(np.int64) * n + dst[keep])
    src, dst = (key // n).astype(np.int32), (key % n).astype(np.int32)
    weight = rng.integers(1, 5, src.size).astype(float)  # unequal rows: the CDF search
    g = GraphArrays(n, True, src, dst, weight if scheme == "normalized" else np.ones(src.size))
    return diffusion_graph(g, model="lt", scheme=scheme)


@pytest.mark.parametrize("scheme", ["normalized", "weighted_cascade"], ids=["cdf", "equal"])
@pytest.mark.parametrize("rounds", [None, 0, 1, 3])
@pytest.mark.parametrize("weighted", [False, True], ids=["uniform-roots", "weighted-roots"])
def test_lt_lanes_give_the_same_sets(lanes_always, scheme, rounds, weighted):
    # The one-walk-at-a-time kernel is the reference (itself checked against the
    # LT live-edge law, Kempe et al. 2003 Thm 4.6, in test_rr_kernels.py).
    n = 400
    dg = lt_graph(n, 2500, seed=8, scheme=scheme)
    w = np.random.default_rng(6).random(n) if weighted else None
    sampler = RRSampler(dg, weights=w, rounds=rounds)
    assert sampler.lanes
    key = K.stream_key(2, 3)
    coll = RRCollection(sampler, key)
    for target in (1, 9, 700, 4000):
        coll.extend_to(target)
    nodes = np.empty(4000 * n + n + 16, np.int32)
    ends = np.empty(4000, np.int64)
    done, pos, examined = K.sample_lt(
        *sampler._args(), key, 0, 4000, sampler.horizon, nodes, 0, ends, np.zeros(n, np.int32)
    )
    assert done == 4000
    assert np.array_equal(coll.nodes, nodes[:pos])
    assert np.array_equal(coll.offsets[1:], ends)
    assert coll.examined == examined
    assert not any(sc.vis.any() for sc in coll.sampler.scratch)
    assert (np.diff(coll.offsets) > 1).any() == (rounds != 0)  # walks longer than the root


@pytest.mark.parametrize("model", ["ic", "lt"])
def test_kernels_on_trial_switch_mid_collection_and_keep_the_sets(monkeypatch, model):
    # Every batch counts and one of each decides: the first batch runs the lanes, the
    # second one set at a time, then the faster stays. The store equals the one-at-a-time
    # kernel's whichever was kept.
    monkeypatch.setattr(_rr, "LANES_MIN_BYTES", -1)
    monkeypatch.setattr(_rr, "TRIAL_MIN_SECONDS", 0.0)
    monkeypatch.setattr(_rr, "TRIAL_BATCHES", 1)
    n = 400
    dg = (random_graph(n, 3000, seed=31, mixed=True) if model == "ic"
          else lt_graph(n, 2500, seed=9, scheme="normalized"))
    used = []
    real = _rr_parts.call_kernel

    def spy(fn, smp, *args):
        used.append(smp.lanes)
        return real(fn, smp, *args)

    monkeypatch.setattr(_rr_parts, "call_kernel", spy)
    sampler = RRSampler(dg, threads=1)  # one kernel call per batch
    key = K.stream_key(8, 2)
    coll = RRCollection(sampler, key)
    for target in (300, 600, 900, 3000):
        coll.extend_to(target)
    assert used[:2] == [True, False]
    assert sampler.trial_costs is not None
    assert set(used[2:]) == {sampler.lanes}
    assert sampler.lanes == (sampler.trial_costs[True] <= sampler.trial_costs[False])
    ref = RRSampler(dg)
    ref.lanes_ok = ref.lanes = False
    ref._trials = None
    want = RRCollection(ref, key)
    want.extend_to(3000)
    assert np.array_equal(coll.nodes, want.nodes)
    assert np.array_equal(coll.offsets, want.offsets)
    assert coll.examined == want.examined


def test_the_trial_keeps_the_kernel_that_took_less_time():
    big = random_graph(40_000, 300_000, seed=2, mixed=False)
    # (lanes batch times, one-at-a-time batch times, lanes kept); the best batch of each
    # decides, so the first case keeps the lanes despite one slow batch.
    for lanes_s, single_s, keep_lanes in (((0.2, 0.02), (0.03, 0.03), True),
                                          ((0.05, 0.04), (0.02, 0.025), False)):
        smp = RRSampler(big)
        assert smp.lanes_ok and smp.lanes
        sizes = []
        for lanes_t, single_t in zip(lanes_s, single_s):
            for expect_lanes, seconds in ((True, lanes_t), (False, single_t)):
                sizes.append(smp.pick_kernel(50_000))
                assert smp.lanes is expect_lanes  # they take turns, lanes first
                smp.record_batch(seconds, 1000, 20_000)
        # The first batch as asked, then about TRIAL_SECONDS at the last batch's pace.
        assert sizes == [50_000] + [int(1000 / t * _rr.TRIAL_SECONDS)
                                    for t in (lanes_s[0], single_s[0], lanes_s[1])]
        assert smp.trial_costs is not None
        assert smp.lanes is keep_lanes
        smp.record_batch(1.0, 1000, 20_000)  # decided: later batches change nothing
        assert smp.pick_kernel(50_000) == 50_000
        assert smp.lanes is keep_lanes
    smp = RRSampler(big)
    smp.pick_kernel(10)
    smp.record_batch(_rr.TRIAL_MIN_SECONDS / 2, 10, 100)  # too short to count
    assert smp.pick_kernel(40) == 40
    assert smp.lanes  # still the lanes' turn
    assert not RRSampler(random_graph(100, 400, seed=1, mixed=False)).lanes_ok  # no trial
