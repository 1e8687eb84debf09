"""Tests for service.analytics.diffusion._kernels: thresholds, zero arcs, geometric skipping,
run-index reproducibility (batches, threads), and the integer round accumulators."""

from __future__ import annotations

import numpy as np
import pytest

from service.analytics.diffusion import _kernels as K
from service.analytics.graph import GraphArrays, diffusion_graph

NO_W = np.zeros(0)


def graph(n: int, arcs: list[tuple[int, int]], probs: list[float] | float,
          *, directed: bool = True, model: str = "ic"):
    src = np.array([a for a, _ in arcs], dtype=np.int32)
    dst = np.array([b for _, b in arcs], dtype=np.int32)
    p = np.broadcast_to(np.asarray(probs, dtype=np.float64), src.shape).copy()
    g = GraphArrays(n, directed, src, dst, np.ones(len(arcs)), probability=p)
    return diffusion_graph(g, model=model, scheme="explicit")


def random_graph(n: int, m: int, seed: int, *, p: float | None = None):
    rng = np.random.default_rng(seed)
    pairs = rng.integers(0, n, size=(m, 2))
    pairs = np.unique(pairs[pairs[:, 0] != pairs[:, 1]], axis=0).astype(np.int32)
    g = GraphArrays(n, True, pairs[:, 0], pairs[:, 1], np.ones(len(pairs)))
    if p is None:
        return diffusion_graph(g, scheme="weighted_cascade")
    return diffusion_graph(g, scheme="uniform", p=p)


def kg_of(dg, **kw):
    return K.prepare(dg.n, dg.model, dg.out_indptr, dg.out_indices, dg.out_prob, **kw)


def test_thresholds_and_zero_arcs_removed():
    dg = graph(4, [(0, 1), (0, 2), (0, 3)], [1.0, 0.5, 0.0])
    kg = kg_of(dg)
    # Source: definition in _kernels: live iff coin <= ceil(p * 2**32) - 1; p = 0 arcs dropped.
    assert kg.indptr.tolist() == [0, 2, 2, 2, 2]
    assert kg.indices.tolist() == [1, 2]
    assert kg.thr.tolist() == [2**32 - 1, 2**31 - 1]


def test_zero_probability_arc_never_fires():
    dg = graph(3, [(0, 1), (0, 2)], [0.0, 1e-12])
    r = K.run_chunk(kg_of(dg), np.array([0], np.int32), 123, 0, 20_000, -1, NO_W)
    assert r.count[1] == 0  # Source: p = 0 means never (the arc is removed).
    assert r.reach.max() <= 2


def test_skip_factor_only_for_shared_probability_and_high_degree():
    leaves = K.SKIP_MIN_DEGREE + 4
    arcs = [(0, i) for i in range(1, leaves + 1)] + [(1, 2), (1, 3)]
    kg = kg_of(graph(leaves + 1, arcs, 0.15))
    # Source: closed form 1 / log(1 - p) for the node with >= SKIP_MIN_DEGREE equal arcs.
    assert kg.skip[0] == pytest.approx(1.0 / np.log1p(-0.15), rel=1e-15)
    assert kg.skip[1] == 0.0 and kg.use_skip
    mixed = kg_of(graph(leaves + 1, arcs, [0.15] * (leaves - 1) + [0.1, 0.15, 0.15]))
    assert not mixed.use_skip
    assert not kg_of(graph(leaves + 1, arcs, K.SKIP_MAX_P + 0.1)).use_skip


@pytest.mark.parametrize("skip_min_degree", [K.SKIP_MIN_DEGREE, 10**9])
def test_star_spread_with_and_without_geometric_skipping(skip_min_degree):
    n_leaves, p = 40, 0.15
    arcs = [(0, i) for i in range(1, n_leaves + 1)]
    dg = graph(n_leaves + 1, arcs, p, directed=False)
    kg = kg_of(dg, skip_min_degree=skip_min_degree)
    assert kg.use_skip == (skip_min_degree == K.SKIP_MIN_DEGREE)
    runs = 40_000
    centre = K.run_chunk(kg, np.array([0], np.int32), 1, 0, runs, -1, NO_W)
    leaf = K.run_chunk(kg, np.array([1], np.int32), 2, 0, runs, -1, NO_W)
    # Source: closed form (REFERENCES.md, star with arcs both ways):
    # sigma(centre) = 1 + n p, sigma(leaf) = 1 + p + (n - 1) p^2.
    for r, exact in ((centre, 1 + n_leaves * p), (leaf, 1 + p + (n_leaves - 1) * p * p)):
        se = r.reach.std(ddof=1) / np.sqrt(runs)
        assert abs(r.reach.mean() - exact) < 4 * se
    # Each leaf is reached from the centre with probability p (binomial, 4 standard errors).
    probs = centre.count[1:] / runs
    assert np.all(np.abs(probs - p) < 4 * np.sqrt(p * (1 - p) / runs))


@pytest.mark.parametrize("model", ["ic", "lt"])
def test_runs_depend_only_on_their_index(model, monkeypatch):
    dg = random_graph(400, 2400, 5)
    if model == "lt":
        dg = dg._replace(model="lt")  # weighted cascade weights sum to 1 per node
    kg = kg_of(dg)
    seeds = np.array([0, 7, 9], np.int32)
    w = np.linspace(0.0, 2.0, dg.n)
    whole = K.run_chunk(kg, seeds, 99, 0, 300, -1, w)
    pieces = K.merge([K.run_chunk(kg, seeds, 99, a, b - a, -1, w)
                      for a, b in ((0, 1), (1, 117), (117, 300))])
    monkeypatch.setattr(K, "_PARALLEL_MIN_SECONDS", 0.0)
    threaded = K.simulate(kg, seeds, 99, 0, 300, -1, w, threads=2)
    serial = K.simulate(kg, seeds, 99, 0, 300, -1, w, threads=1)
    for name in K.ChunkResult._fields:
        for other in (pieces, threaded, serial):
            assert np.array_equal(getattr(whole, name), getattr(other, name)), name
    assert not np.array_equal(whole.reach, K.run_chunk(kg, seeds, 100, 0, 300, -1, w).reach)


@pytest.mark.parametrize("model", ["ic", "lt"])
def test_run_one_is_run_zero_of_the_stream(model):
    dg = random_graph(300, 1500, 3)
    if model == "lt":
        dg = dg._replace(model="lt")
    kg = kg_of(dg)
    seeds = np.array([1, 2], np.int32)
    rounds = K.run_one(kg, seeds, 42, -1)
    r = K.run_chunk(kg, seeds, 42, 0, 1, -1, NO_W)
    assert r.reach[0] == np.count_nonzero(rounds >= 0)
    assert r.new.tolist() == np.bincount(rounds[rounds >= 0]).tolist()
    assert r.depth[0] == rounds.max()
    assert np.array_equal(r.count, (rounds >= 0).astype(np.int64))


def test_round_accumulators_exact_on_a_deterministic_path():
    # Path 0 -> 1 -> ... -> 5 with p = 1: cumulative reach after round r is r + 1.
    dg = graph(6, [(i, i + 1) for i in range(5)], 1.0)
    kg = kg_of(dg)
    runs = 7
    r = K.run_chunk(kg, np.array([0], np.int32), 0, 0, runs, 3, NO_W)
    # Source: closed form; with horizon 3 the reach is 4 and rounds 0..3 add one node each.
    assert r.reach.tolist() == [4] * runs and r.depth.tolist() == [3] * runs
    assert r.new.tolist() == [runs] * 4
    sq = (r.sq_hi.astype(object) << 32) + r.sq_lo.astype(object)
    assert sq.tolist() == [runs * (k + 1) ** 2 for k in range(4)]
    assert r.tail_lo.tolist() == [0, 0, 0, 0, runs * 16]


def test_last_round_square_sum_equals_sum_of_squared_reach():
    # Every run has stopped by the last round, so its sum of squares is sum(reach^2).
    dg = random_graph(3000, 15_000, 11, p=0.2)
    kg = kg_of(dg)
    r = K.run_chunk(kg, np.array([0, 1, 2], np.int32), 8, 0, 200, -1, NO_W)
    hi = int(r.sq_hi[-1] + r.tail_hi[: len(r.sq_hi)].sum())
    lo = int(r.sq_lo[-1] + r.tail_lo[: len(r.sq_lo)].sum())
    assert (hi << 32) + lo == sum(int(x) ** 2 for x in r.reach)
    assert int(r.new.sum()) == int(r.reach.sum())


def test_kernel_graph_cache_is_by_identity():
    dg = random_graph(50, 200, 1)
    assert K.kernel_graph(dg) is K.kernel_graph(dg)
    other = dg._replace(out_prob=dg.out_prob.copy())
    assert K.kernel_graph(other) is not K.kernel_graph(dg)
