"""Results do not depend on the thread count (1, 2 or 4 threads, and more threads than
cores): RR sets, reach estimates from RR sets, forecasts, paired comparisons and sampled
betweenness are bit-identical, because item ``i`` is drawn from a stream keyed only on
``(random_seed, i)`` and parts are merged in index order.

The reference for every comparison is the one-thread result; the one-thread kernels are
themselves checked against closed forms, exact enumeration and NetworkX in
test_rr_kernels.py, test_rr_lanes.py, test_forecasts.py and test_centrality.py. Here the
unbiasedness checks of those files are repeated with several threads.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from service.analytics import _chunks
from service.analytics.graph import GraphArrays, diffusion_graph
from service.analytics.seeding import _rr, _rr_parts
from service.analytics.seeding import _rr_kernels as K
from service.analytics.seeding._rr import RRCollection, RRSampler
from service.analytics.errors import InvalidParameter

THREADS = (1, 2, 4)


def random_graph(n, m, seed, *, model="ic"):
    rng = np.random.default_rng(seed)
    src = rng.integers(0, n, m).astype(np.int32)
    dst = rng.integers(0, n, m).astype(np.int32)
    keep = src != dst
    key = np.unique(src[keep].astype(np.int64) * n + dst[keep])
    src, dst = (key // n).astype(np.int32), (key % n).astype(np.int32)
    g = GraphArrays(n, True, src, dst, np.ones(src.size))
    return diffusion_graph(g, model=model, scheme="weighted_cascade")


@pytest.fixture
def small_parts(monkeypatch):
    """Split even small batches over threads, so the tests exercise the split."""
    monkeypatch.setattr(_rr_parts, "PARALLEL_MIN_SETS", 1)


@pytest.mark.parametrize("model", ["ic", "lt"])
@pytest.mark.parametrize("lanes", [False, True], ids=["one-at-a-time", "lanes"])
def test_rr_sets_are_identical_across_thread_counts(small_parts, monkeypatch, model, lanes):
    monkeypatch.setattr(_rr, "LANES_MIN_BYTES", -1 if lanes else 1 << 40)
    monkeypatch.setattr(_rr, "TRIAL_MIN_SECONDS", math.inf)  # no trial: the kernel stays
    dg = random_graph(500, 4000, seed=3, model=model)
    key = K.stream_key(11, 2)
    stores = []
    for threads in THREADS:
        sampler = RRSampler(dg, threads=threads)
        assert sampler.lanes == lanes
        coll = RRCollection(sampler, key)
        for target in (1, 7, 300, 5000):  # batches of every size, split over the threads
            coll.extend_to(target)
        stores.append((coll.nodes.copy(), coll.offsets.copy(), coll.examined))
    for nodes, offsets, examined in stores[1:]:
        assert np.array_equal(nodes, stores[0][0])
        assert np.array_equal(offsets, stores[0][1])
        assert examined == stores[0][2]


@pytest.mark.parametrize("model", ["ic", "lt"])
def test_rr_hit_counts_are_identical_across_thread_counts(small_parts, model):
    dg = random_graph(500, 4000, seed=4, model=model)
    seeds = np.zeros(500, dtype=np.bool_)
    seeds[[1, 50, 300]] = True
    key = K.stream_key(5, 1)
    counts = {t: RRSampler(dg, threads=t).count_hits(seeds, key, 17, 20_000) for t in THREADS}
    assert len(set(counts.values())) == 1, counts
    # And they count exactly the stored sets that meet a seed (same streams).
    coll = RRCollection(RRSampler(dg, threads=1), key)
    coll.extend_to(20_017)
    covered = K.covered_by(coll.nodes, coll.offsets, seeds) - K.covered_by(
        coll.nodes[: coll.offsets[17]], coll.offsets[:18], seeds)
    assert counts[1][0] == covered


def test_rr_estimate_is_unbiased_with_several_threads(small_parts):
    # Diamond s->a, s->b, a->t, b->t, all p = 0.5. Source: exact enumeration
    # (REFERENCES.md, derived): sigma({s}) = 1 + 2p + 2p^2 - p^4 = 2.4375.
    g = GraphArrays(4, True, np.array([0, 0, 1, 2], np.int32), np.array([1, 2, 3, 3], np.int32),
                    np.ones(4))
    dg = diffusion_graph(g, scheme="uniform", p=0.5)
    coll = RRCollection(RRSampler(dg, threads=4), K.stream_key(1, 0))
    coll.extend_to(200_000)
    est = coll.hits(np.array([0])) * coll.scale()
    p = 0.5
    exact = 1 + 2 * p + 2 * p**2 - p**4
    # Binomial standard error of n * hits / N: n * sqrt(q (1 - q) / N), q = exact / n.
    q = exact / 4
    assert abs(est - exact) <= 5 * 4 * np.sqrt(q * (1 - q) / 200_000)


def test_thread_count_rules():
    assert _chunks.thread_count(3) == 3
    assert _chunks.thread_count() == _chunks.usable_cores()
    token = _chunks.thread_limit.set(2)
    try:
        assert _chunks.thread_count() == 2
        assert _chunks.thread_count(5) == 5
    finally:
        _chunks.thread_limit.reset(token)
    for bad in (0, -1, 1.5, True, 10_000):
        with pytest.raises(InvalidParameter):
            _chunks.thread_count(bad)
    assert _chunks.split_range(10, 7, 3) == [(10, 3), (13, 2), (15, 2)]
    assert _chunks.split_range(0, 2, 5) == [(0, 1), (1, 1)]


def _forecast_figures(r):
    return (r.expected_reach, r.percentiles, r.by_round, r.top_nodes, r.simulations,
            r.stopped_because, r.outcome_histogram, r.per_run.tobytes())


@pytest.mark.parametrize("model", ["ic", "lt"])
def test_forecasts_are_identical_across_thread_counts(model):
    from service.analytics.diffusion import forecasts as F

    dg = random_graph(800, 6000, seed=7, model=model)
    sets = {"a": [0, 1, 2], "b": [10, 400]}
    results = {t: F.forecast(dg, sets, simulations=3000, min_simulations=300,
                             relative_precision=0.004, random_seed=9, threads=t)
               for t in THREADS}
    for t in THREADS[1:]:
        for name in sets:
            assert _forecast_figures(results[t][name]) == _forecast_figures(results[1][name])
            assert results[t][name].threads == t


def test_paired_comparisons_and_spread_are_identical_across_thread_counts():
    from service.analytics.diffusion.cascades import estimate_spread
    from service.analytics.diffusion.paired import compare_reach

    dg = random_graph(800, 6000, seed=8)
    sets = {"ref": [0, 1, 2], "other": [3, 4]}
    cmp = {t: compare_reach(dg, sets, reference="ref", min_simulations=400,
                            max_simulations=4000, random_seed=2, threads=t) for t in THREADS}
    spread = {t: estimate_spread(dg, [0, 1], runs=5000, random_seed=3, threads=t)
              for t in THREADS}
    for t in THREADS[1:]:
        assert cmp[t].differences == cmp[1].differences
        assert all(np.array_equal(cmp[t].per_world[k], cmp[1].per_world[k]) for k in sets)
        assert spread[t] == spread[1]


def test_forecast_is_unbiased_with_several_threads():
    # Star with 3 leaves, arcs both ways, p = 0.3. Source: exact enumeration
    # (REFERENCES.md, derived): sigma(centre) = 1 + 3p = 1.9.
    from service.analytics.diffusion.forecasts import forecast

    src = np.array([0, 0, 0, 1, 2, 3], np.int32)
    dst = np.array([1, 2, 3, 0, 0, 0], np.int32)
    dg = diffusion_graph(GraphArrays(4, True, src, dst, np.ones(6)), scheme="uniform", p=0.3)
    r = forecast(dg, {"c": [0]}, simulations=100_000, min_simulations=100_000, threads=4)["c"]
    assert abs(r.expected_reach.mean - 1.9) <= 5 * r.expected_reach.stderr
    # Per-node probabilities: each leaf is reached with p (closed form).
    for node in r.top_nodes:
        assert abs(node.probability - 0.3) <= 5 * node.stderr


@pytest.mark.parametrize("weighted", [False, True], ids=["hops", "arc-lengths"])
def test_sampled_betweenness_is_identical_across_thread_counts(weighted):
    from service.analytics.structure.paths import betweenness

    rng = np.random.default_rng(12)
    n, m = 300, 1500
    src = rng.integers(0, n, m).astype(np.int32)
    dst = rng.integers(0, n, m).astype(np.int32)
    keep = src != dst
    w = rng.integers(1, 4, keep.sum()).astype(float) if weighted else np.ones(keep.sum())
    g = GraphArrays(n, False, src[keep], dst[keep], w)
    runs = {t: betweenness(g, method="sampled", epsilon=0.05, random_seed=4, threads=t)
            for t in THREADS}
    for t in THREADS[1:]:
        assert np.array_equal(runs[t][0], runs[1][0])
        assert runs[t][1] == runs[1][1]
    # The sampled scores stay within the stated bound of the exact ones (Riondato and
    # Kornaropoulos 2014; exact values from Brandes' algorithm, checked against NetworkX
    # in test_centrality.py), with several threads.
    exact, _ = betweenness(g, method="exact")
    assert np.abs(runs[4][0] - exact).max() <= runs[4][1]["error_bound"]


@pytest.mark.parametrize("threads", [2, 3, 4])
def test_inverted_index_is_identical_across_thread_counts(small_parts, threads):
    # Reference: the one-thread index (itself checked against a direct scan in
    # test_rr_kernels.py); rows must list their sets in ascending order either way.
    dg = random_graph(300, 3000, seed=9)
    ref = RRCollection(RRSampler(dg, threads=1), K.stream_key(3, 3))
    ref.extend_to(30_000)
    par = RRCollection(RRSampler(dg, threads=threads), K.stream_key(3, 3))
    par.extend_to(30_000)
    assert min(threads, par.count, par.entries // (4 * 300)) == threads  # really split
    for a, b in zip(ref.index(), par.index()):
        assert np.array_equal(a, b)


def test_parts_run_in_order_and_nested_calls_do_not_wait_on_the_pool():
    def inner(i):
        return [x * i for x in _chunks.map_ordered(lambda a: a + 1, [(1,), (2,), (3,)])]

    # Nested from pool threads: run in the calling thread, same results in the same order.
    assert _chunks.map_ordered(inner, [(i,) for i in range(8)]) == [
        [2 * i, 3 * i, 4 * i] for i in range(8)]

    def boom(i):
        if i == 1:
            raise ValueError("part 1")
        return i

    with pytest.raises(ValueError, match="part 1"):
        _chunks.map_ordered(boom, [(0,), (1,), (2,)])


def test_shared_calls_are_taken_by_free_threads_and_return_in_order():
    import threading
    import time

    taken: dict[int, list[int]] = {}
    lock = threading.Lock()

    def call(w, i):
        with lock:
            taken.setdefault(w, []).append(i)
        if i == 0:
            time.sleep(0.3)  # one slow call: the other thread takes the rest meanwhile
        return i * i

    assert _chunks.map_shared(call, [(i,) for i in range(12)], 2) == [i * i for i in range(12)]
    assert set(taken) <= {0, 1}
    slow = next(w for w, calls in taken.items() if 0 in calls)
    assert taken[slow] == [0]  # busy with the slow call while the other took all 11
    assert sorted(taken[1 - slow]) == list(range(1, 12))
    for calls in taken.values():
        assert calls == sorted(calls)  # each thread takes the calls in index order

    started: list[int] = []

    def boom(w, i):
        started.append(i)
        if i == 2:
            raise ValueError("call 2")
        return i

    with pytest.raises(ValueError, match="call 2"):
        _chunks.map_shared(boom, [(i,) for i in range(50)], 1)
    assert started == [0, 1, 2]  # nothing started after the failure


def test_rr_sets_are_identical_when_one_thread_runs_slow(small_parts, monkeypatch):
    # Which thread samples which piece depends on timing; the store must not.
    dg = random_graph(400, 3000, seed=9)
    key = K.stream_key(5, 1)
    ref = RRCollection(RRSampler(dg, threads=1), key)
    ref.extend_to(3000)
    real = _rr_parts.call_kernel
    import time

    def slow_first_thread(fn, smp, sc, *args):
        if sc is smp.scratch[0]:
            time.sleep(0.002)
        return real(fn, smp, sc, *args)

    monkeypatch.setattr(_rr_parts, "call_kernel", slow_first_thread)
    par = RRCollection(RRSampler(dg, threads=3), key)
    par.extend_to(3000)
    assert np.array_equal(par.nodes, ref.nodes)
    assert np.array_equal(par.offsets, ref.offsets)
    assert par.examined == ref.examined


@pytest.mark.parametrize("method", ["imm", "opim"])
def test_brute_force_guarantees_hold_with_four_threads(small_parts, method):
    # The checks of tests/jobs/test_shortlist_kind.py (exact enumeration of every
    # live-edge world, brute force over every seed set; IMM and OPIM-C within
    # 1 - 1/e - epsilon of the optimum, Tang et al. 2015 and 2018), rerun with every RR
    # batch, hit count and forecast split over four threads.
    from tests.jobs import test_shortlist_kind as S

    token = _chunks.thread_limit.set(4)
    try:
        S.test_reach_is_within_the_guarantee_of_brute_force(method, S.ONE_MINUS_INV_E - 0.1)
        if method == "imm":  # the Linear Threshold check runs IMM
            S.test_linear_threshold_against_brute_force()
    finally:
        _chunks.thread_limit.reset(token)
