"""Long loops run in timed chunks (service.analytics._chunks): the chunked result equals the
unchunked one for a fixed seed, and growing buffers stop at the memory limit.

Each computation is run twice, once with all its work in one call and once
cut into uneven chunks (1, 4, 7, ... items), by replacing the module's chunk
helper; the kernels carry their random state from call to call, so the two
must agree exactly (exact betweenness to 1e-12: igraph sums the sources'
contributions in a different order). The unchunked reference for exact
betweenness and harmonic closeness is igraph's one call over every node.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np
import pytest

from service.analytics import _chunks
from service.analytics.seeding import _rr
from service.analytics.diffusion import forecasts
from service.analytics.ties import evaluation as linkpred_eval
from service.analytics.structure import paths
from service.analytics.structure import profile
from service.analytics._chunks import ChunkSizer, check_memory, memory_limit
from service.analytics.seeding._rr import RRCollection, RRSampler
from service.analytics.seeding._rr_kernels import stream_key
from service.analytics.errors import TooExpensive
from service.analytics.graph import GraphArrays, diffusion_graph, to_igraph


def one_call(total: int, step: Callable[[int, int], None], *, after: Any = None, **_: Any) -> None:
    if total:
        step(0, total)
    if after is not None:
        after(total)


def uneven(total: int, step: Callable[[int, int], None], *, after: Any = None, **_: Any) -> None:
    done, size = 0, 1
    while done < total:
        count = min(size, total - done)
        step(done, count)
        done += count
        size += 3
        if after is not None:
            after(done)


class UnevenSizer:
    """A ChunkSizer stand-in that hands out 1, 4, 7, ... whatever the timing."""

    def __init__(self, **_: Any) -> None:
        self.size = 1

    def next(self, left: int) -> int:
        out = max(1, min(self.size, left))
        self.size += 3
        return out

    def took(self, size: int, seconds: float) -> None:
        pass


class WholeSizer(UnevenSizer):
    def next(self, left: int) -> int:
        return max(1, left)


def graph(n: int = 150, m: int = 900, *, directed: bool, seed: int = 3) -> GraphArrays:
    rng = np.random.default_rng(seed)
    src = rng.integers(0, n, m).astype(np.int32)
    dst = ((src + 1 + rng.integers(0, n - 1, m)) % n).astype(np.int32)
    return GraphArrays(n, directed, src, dst, rng.integers(1, 6, m).astype(np.float64))


def both(monkeypatch: pytest.MonkeyPatch, module: Any, fn: Callable[[], Any]) -> tuple[Any, Any]:
    monkeypatch.setattr(module, "run_chunked", one_call)
    whole = fn()
    monkeypatch.setattr(module, "run_chunked", uneven)
    return whole, fn()


@pytest.mark.parametrize("weights", [False, True])
@pytest.mark.parametrize("directed", [False, True])
def test_sampled_betweenness_chunked_equals_one_call(monkeypatch, weights, directed) -> None:
    g = graph(directed=directed)
    whole, chunked = both(monkeypatch, paths, lambda: paths.betweenness(
        g, weights=weights, method="sampled", epsilon=0.05, random_seed=11))
    assert whole[1]["samples"] > 100  # many chunks
    assert np.array_equal(whole[0], chunked[0])


@pytest.mark.parametrize("directed", [False, True])
def test_exact_betweenness_and_harmonic_in_slices_equal_igraph_in_one_call(monkeypatch, directed) -> None:
    g = graph(directed=directed)
    monkeypatch.setattr(paths, "run_chunked", uneven)
    b, _ = paths.betweenness(g, method="exact")
    h = paths.harmonic_closeness(g)
    ig = to_igraph(g, weights=True)
    lengths = (1.0 / g.weight).tolist()
    # Reference: igraph's betweenness over every source in one call, scaled as betweenness() does.
    ref = np.asarray(ig.betweenness(directed=True, weights=lengths)) / ((g.n - 1) * (g.n - 2))
    ref *= 1.0 if directed else 2.0
    assert np.allclose(b, ref, rtol=1e-12, atol=0)
    href = np.asarray(ig.harmonic_centrality(mode="out", weights=lengths, normalized=False))
    assert np.array_equal(h, href)


def test_sampled_distances_chunked_equal_one_call(monkeypatch) -> None:
    g = graph(directed=True)
    whole, chunked = both(monkeypatch, profile, lambda: profile.sample_distances(g, samples=120, random_seed=5))
    assert whole == chunked and whole["sources"] == 120


def test_link_evaluation_chunked_equals_one_call(monkeypatch) -> None:
    g = graph(directed=False)
    whole, chunked = both(monkeypatch, linkpred_eval, lambda: linkpred_eval.evaluate_link_prediction(
        g, methods=["adamic_adar", "personalized_pagerank"], random_seed=2, negatives_per_positive=3))
    assert whole == chunked


def test_forecast_chunked_equals_whole_batches(monkeypatch) -> None:
    dg = diffusion_graph(graph(directed=True), scheme="uniform", p=0.1)

    def run() -> str:
        out = forecasts.forecast(dg, {"a": [0, 1, 2], "b": [5]}, simulations=600, min_simulations=300,
                                 random_seed=9)
        return repr(out)

    monkeypatch.setattr(forecasts, "ChunkSizer", WholeSizer)
    whole = run()
    monkeypatch.setattr(forecasts, "ChunkSizer", UnevenSizer)
    assert run() == whole


@pytest.mark.parametrize("model", ["ic", "lt"])
def test_rr_sets_chunked_equal_whole(monkeypatch, model) -> None:
    dg = diffusion_graph(graph(directed=True), model=model, scheme="weighted_cascade")

    def run() -> tuple[np.ndarray, np.ndarray]:
        coll = RRCollection(RRSampler(dg), stream_key(4, 1))
        coll.extend_to(3000)
        return coll.nodes.copy(), coll.offsets

    monkeypatch.setattr(_rr, "ChunkSizer", WholeSizer)
    whole = run()
    monkeypatch.setattr(_rr, "ChunkSizer", UnevenSizer)
    chunked = run()
    assert np.array_equal(whole[0], chunked[0]) and np.array_equal(whole[1], chunked[1])


def test_chunk_sizer_aims_at_the_target() -> None:
    s = ChunkSizer(first=10, target=0.25)
    s.took(10, 0.025)  # 10x too fast: grows at most fourfold
    assert s.next(10**9) == 40
    s.took(40, 1.0)  # four times too slow: shrinks in proportion
    assert s.next(10**9) == 10
    s.took(3, 0.0)  # a short last chunk says nothing about a full one
    assert s.next(10**9) == 10


def test_rr_store_stops_at_the_memory_limit() -> None:
    dg = diffusion_graph(graph(directed=True), scheme="uniform", p=0.5)
    coll = RRCollection(RRSampler(dg), stream_key(0, 1))
    token = memory_limit.set(1 << 20)
    try:
        with pytest.raises(TooExpensive) as err:
            coll.extend_to(50_000_000)
    finally:
        memory_limit.reset(token)
    data = err.value.data
    assert data["limit_bytes"] == 1 << 20 and data["estimated_bytes"] > 1 << 20
    assert "max_samples" in err.value.reason
    assert coll.count < 100_000  # stopped long before the target, not after filling memory


def test_forecast_stops_at_the_memory_limit() -> None:
    dg = diffusion_graph(graph(directed=True), scheme="uniform", p=0.1)
    token = memory_limit.set(1 << 20)
    try:
        with pytest.raises(TooExpensive) as err:
            forecasts.forecast(dg, {"a": [0]}, simulations=1_000_000, min_simulations=1_000_000)
    finally:
        memory_limit.reset(token)
    assert "lower simulations" in err.value.reason and err.value.data["estimated_bytes"] > 1 << 20


def test_no_limit_means_no_check() -> None:
    assert memory_limit.get() is None
    check_memory(1e18, what="anything", relax="nothing")
    assert _chunks.TARGET_SECONDS < 1.0
