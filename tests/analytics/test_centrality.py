"""Tests for service.analytics.structure.centrality and .paths: every measure against NetworkX, sampled
betweenness against exact betweenness, and the scores() wrapper."""

from __future__ import annotations

import math

import igraph
import networkx as nx
import numpy as np
import pytest

from service.analytics.structure import _kernels as kernels
from service.analytics.structure import centrality as C
from service.analytics.structure import paths as P
from service.analytics.errors import Cancelled, ComputationFailed, InvalidParameter
from service.analytics.graph import GraphArrays, arcs, csr, to_igraph
from tests.datasets import snap_graph

TOL = 1e-6


def from_nx(G: nx.Graph, weight: str | None = None) -> GraphArrays:
    edges = list(G.edges(data=True))
    src = np.array([u for u, _, _ in edges], dtype=np.int32)
    dst = np.array([v for _, v, _ in edges], dtype=np.int32)
    w = np.array([float(d[weight]) if weight else 1.0 for _, _, d in edges])
    return GraphArrays(G.number_of_nodes(), G.is_directed(), src, dst, w)


def vec(d: dict, n: int) -> np.ndarray:
    return np.array([d[i] for i in range(n)], dtype=float)


def karate(weighted: bool) -> nx.Graph:
    G = nx.karate_club_graph()  # Zachary 1977; 'weight' = interaction counts 1..7
    for _, _, d in G.edges(data=True):
        if not weighted:
            del d["weight"]
    return G


def random_directed(seed: int = 1, n: int = 60, p: float = 0.08) -> nx.DiGraph:
    G = nx.gnp_random_graph(n, p, seed=seed, directed=True)
    rng = np.random.default_rng(seed)
    for _, _, d in G.edges(data=True):
        d["weight"] = float(rng.integers(1, 5))
    return G


def add_distances(G: nx.Graph) -> None:
    """'dist' = 1/w for NetworkX; 'idist' = 420/w, an integer (420 = lcm(1..7)).

    Betweenness is unchanged by scaling lengths; integers make NetworkX's exact
    float comparison of path lengths tie where 1/2 + 1/2 == 1 in exact arithmetic
    (igraph and our kernel compare with a relative tolerance).
    """
    for _, _, d in G.edges(data=True):
        d["dist"] = 1.0 / d["weight"]
        d["idist"] = 420 // int(d["weight"])


CASES = [
    pytest.param(lambda: karate(False), None, id="karate"),
    pytest.param(lambda: karate(True), "weight", id="karate-weighted"),
    pytest.param(lambda: random_directed(), "weight", id="directed-weighted"),
    pytest.param(lambda: random_directed(), None, id="directed"),
]


def test_measure_names_and_exports() -> None:
    assert C.MEASURES == (
        "degree", "in_degree", "out_degree", "strength", "in_strength", "out_strength",
        "pagerank", "eigenvector", "hub", "authority", "betweenness", "harmonic",
        "coreness", "clustering", "constraint", "community",
    )
    assert set(C.DEFAULT_MEASURES) == set(C.MEASURES) - {"betweenness", "harmonic",
                                                         "constraint"}
    for name in C.__all__:
        assert hasattr(C, name)


@pytest.mark.parametrize("make, wt", CASES)
def test_every_measure_matches_networkx(make, wt) -> None:
    G = make()
    add_distances(G) if wt else None
    n = G.number_of_nodes()
    g = from_nx(G, wt)
    r = C.scores(g, [m for m in C.MEASURES if m != "community"])
    v = r.values
    # Source: NetworkX functions on the same graph, computed in this test.
    if G.is_directed():
        assert v["in_degree"] == pytest.approx(vec(dict(G.in_degree()), n))
        assert v["out_degree"] == pytest.approx(vec(dict(G.out_degree()), n))
        assert v["in_strength"] == pytest.approx(vec(dict(G.in_degree(weight=wt)), n))
        assert v["out_strength"] == pytest.approx(vec(dict(G.out_degree(weight=wt)), n))
    assert v["degree"] == pytest.approx(vec(dict(G.degree()), n))
    assert v["strength"] == pytest.approx(vec(dict(G.degree(weight=wt)), n))
    assert v["pagerank"] == pytest.approx(
        vec(nx.pagerank(G, alpha=0.85, weight=wt, tol=1e-12), n), abs=TOL)
    assert v["eigenvector"] == pytest.approx(
        vec(nx.eigenvector_centrality_numpy(G, weight=wt), n), abs=TOL)
    if wt is None:
        # nx.hits always reads the 'weight' attribute; strip it for the unweighted case.
        H = nx.DiGraph(G) if G.is_directed() else nx.Graph(G)
        for _, _, d in H.edges(data=True):
            d.pop("weight", None)
    else:
        H = G
    hub, auth = nx.hits(H, max_iter=100000, tol=1e-14)
    assert v["hub"] == pytest.approx(vec(hub, n), abs=TOL)
    assert v["authority"] == pytest.approx(vec(auth, n), abs=TOL)
    assert v["betweenness"] == pytest.approx(
        vec(nx.betweenness_centrality(G, normalized=True, weight="idist" if wt else None), n),
        abs=TOL)
    rev = G.reverse() if G.is_directed() else G
    assert v["harmonic"] == pytest.approx(
        vec(nx.harmonic_centrality(rev, distance="dist" if wt else None), n), abs=TOL)
    assert v["coreness"] == pytest.approx(vec(nx.core_number(G), n))
    assert v["clustering"] == pytest.approx(vec(nx.clustering(nx.Graph(G)), n), abs=TOL)
    assert v["constraint"] == pytest.approx(vec(nx.constraint(G, weight=wt), n), abs=TOL)
    assert r.meta["betweenness"]["method"] == "exact"
    for name in r.values:
        assert r.values[name].dtype == np.float64 and r.values[name].shape == (n,)
        assert "normalization" in r.meta[name]


def test_karate_published_degrees() -> None:
    d = C.degree(from_nx(karate(False)))
    # Source: Zachary 1977 (published data, REFERENCES.md): member 34 has degree 17,
    # member 1 degree 16 (0-based indices 33 and 0).
    assert (d[33], d[0]) == (17.0, 16.0)


def test_harmonic_in_mode_and_cutoff_match_networkx() -> None:
    G = random_directed(seed=4)
    n = G.number_of_nodes()
    g = from_nx(G)
    # Source: nx.harmonic_centrality (distances *to* the node) on the same graph.
    assert P.harmonic_closeness(g, mode="in") == pytest.approx(
        vec(nx.harmonic_centrality(G), n), abs=TOL)
    # Source: NetworkX single_source_shortest_path_length with cutoff=2, summed here.
    expect = [sum(1.0 / d for d in nx.single_source_shortest_path_length(G, u, cutoff=2)
                  .values() if d > 0) for u in range(n)]
    assert P.harmonic_closeness(g, cutoff=2) == pytest.approx(expect, abs=TOL)


def test_pagerank_dangling_and_personalised_match_networkx() -> None:
    G = nx.gnp_random_graph(80, 0.04, seed=3, directed=True)
    n = 80
    g = from_nx(G)
    assert any(d == 0 for _, d in G.out_degree())  # dangling nodes present
    pers = {i: (1.0 if i in (0, 5) else 0.0) for i in range(n)}
    # Source: nx.pagerank(G, personalization=...), dangling=None jumps to personalization.
    assert C.pagerank(g, personalization=[0, 5]) == pytest.approx(
        vec(nx.pagerank(G, personalization=pers, tol=1e-13), n), abs=TOL)
    w = np.linspace(0.0, 2.0, n)
    assert C.pagerank(g, personalization=w, damping=0.6) == pytest.approx(
        vec(nx.pagerank(G, alpha=0.6, personalization=dict(enumerate(w)), tol=1e-13), n),
        abs=TOL)
    hub, auth = nx.hits(G, max_iter=100000, tol=1e-14)
    h, a = C.hits(g)
    assert h == pytest.approx(vec(hub, n), abs=TOL)  # Source: nx.hits
    assert a == pytest.approx(vec(auth, n), abs=TOL)


def test_pagerank_invariants_and_bad_personalization() -> None:
    g = from_nx(karate(True), "weight")
    perm = np.random.default_rng(0).permutation(g.n).astype(np.int32)
    h = GraphArrays(g.n, False, perm[g.src], perm[g.dst], g.weight)
    pr = C.pagerank(g)
    assert pr.sum() == pytest.approx(1.0)
    assert C.pagerank(h)[perm] == pytest.approx(pr, abs=1e-9)  # relabelling invariance
    with pytest.raises(InvalidParameter) as err:
        C.pagerank(g, personalization=[0, 99])
    assert err.value.data["node_index"] == 99
    with pytest.raises(InvalidParameter):
        C.pagerank(g, personalization=np.zeros(g.n))
    with pytest.raises(InvalidParameter):
        C.pagerank(g, personalization=np.full(g.n, -1.0))
    with pytest.raises(InvalidParameter):
        C.pagerank(g, damping=1.0)


def test_undirected_hubs_equal_eigenvector() -> None:
    g = from_nx(karate(True), "weight")
    e = C.eigenvector_centrality(g)
    hub, auth = C.hits(g)
    assert hub == pytest.approx(e / e.sum()) and auth == pytest.approx(hub)


def _true_vertex_diameter(G: nx.Graph) -> int:
    return 1 + max(max(d.values()) for _, d in nx.all_pairs_shortest_path_length(G))


@pytest.mark.parametrize("G", [karate(False), random_directed(seed=2, n=120, p=0.02),
                               nx.path_graph(7)], ids=["karate", "directed-sparse", "path"])
def test_vertex_diameter_bound_is_an_upper_bound(G) -> None:
    g = from_nx(G)
    a = arcs(g)
    out, inn = csr(g.n, a.src, a.dst, a.weight), csr(g.n, a.dst, a.src, a.weight)
    from scipy.sparse import csr_matrix
    from scipy.sparse.csgraph import connected_components

    adj = csr_matrix((np.ones(len(a.src)), (a.src, a.dst)), shape=(g.n, g.n))
    k, labels = connected_components(adj, directed=g.directed, connection="strong")
    vd = kernels.vertex_diameter_bound(g.n, out.indptr, out.indices, inn.indptr, inn.indices,
                                       labels.astype(np.int64), k)
    # Source: NetworkX all-pairs BFS, longest shortest path + 1 vertices.
    true = _true_vertex_diameter(G)
    assert true <= vd <= 2 * true + 1 if not G.is_directed() else true <= vd


@pytest.mark.parametrize("make, wt", CASES[:3])
def test_sampled_betweenness_converges_to_exact(make, wt) -> None:
    G = make()
    g = from_nx(G, wt)
    n = g.n
    exact, _ = P.betweenness(g, method="exact")
    est, meta = P.betweenness(g, method="sampled", epsilon=0.01, delta=0.1, random_seed=5)
    r = meta["samples"]
    # RK scale: share of the n(n-1) ordered pairs; each sample is a Bernoulli draw
    # for every node with mean b_rk, so the estimate has standard error
    # sqrt(b(1-b)/r). Source: exact betweenness (igraph, checked against NetworkX above).
    b_rk = exact * (n - 2) / n
    e_rk = est * (n - 2) / n
    se = np.sqrt(b_rk * (1 - b_rk) / r)
    assert np.all(np.abs(e_rk - b_rk) <= 4.5 * se + 1e-12)
    assert meta["method"] == "sampled" and meta["epsilon"] == 0.01
    assert r == P.rk_sample_size(meta["vertex_diameter_bound"], 0.01, 0.1)
    assert meta["error_bound"] == pytest.approx(0.01 * n / (n - 2))


def test_rk_sample_size_formula() -> None:
    # Source: Riondato and Kornaropoulos 2014, r = (c/eps^2)(floor(log2(VD-2)) + 1
    # + ln(1/delta)), c = 0.5 (formula from memory, REFERENCES.md); evaluated by hand.
    assert P.rk_sample_size(18, 0.01, 0.1) == math.ceil(5000 * (4 + 1 + math.log(10)))
    assert P.rk_sample_size(2, 0.01, 0.1) == 0


def test_sampled_betweenness_is_reproducible_and_chunk_independent() -> None:
    g = from_nx(karate(False))
    a, _ = P.betweenness(g, method="sampled", epsilon=0.05, random_seed=3)
    b, _ = P.betweenness(g, method="sampled", epsilon=0.05, random_seed=3)
    c, _ = P.betweenness(g, method="sampled", epsilon=0.05, random_seed=4)
    assert np.array_equal(a, b) and not np.array_equal(a, c)
    seen: list[float] = []
    P.betweenness(g, method="sampled", epsilon=0.005, progress=lambda f, m: seen.append(f))
    assert seen and seen[-1] == 1.0 and seen == sorted(seen)


@pytest.mark.shared
def test_sampled_betweenness_on_ca_grqc_within_eps() -> None:
    g, _ = snap_graph("ca-GrQc", directed=False)
    n = g.n
    eps, delta = 0.01, 0.1
    exact, _ = P.betweenness(g, method="exact")
    est, meta = P.betweenness(g, method="sampled", epsilon=eps, delta=delta, random_seed=0)
    # Normalised as RK do: divide the ordered-pair sum by n(n-1).
    # Source: exact Brandes betweenness (igraph) on ca-GrQc (SNAP, datasets/).
    err = np.abs(est - exact) * (n - 2) / n
    assert np.mean(err <= eps) >= 1 - delta
    assert err.max() <= eps  # RK: all nodes at once, with probability >= 1 - delta
    # Source: igraph diameter() of the same graph (longest shortest path, in hops).
    true_vd = to_igraph(g, weights=False).diameter(directed=False) + 1
    assert true_vd <= meta["vertex_diameter_bound"] <= 2 * true_vd + 1


def test_scores_progress_cancel_and_errors(monkeypatch) -> None:
    g = from_nx(karate(True), "weight")
    seen: list[tuple[float, str]] = []
    r = C.scores(g, ["degree", "pagerank", "betweenness"], betweenness_exact_limit=1.0,
                 betweenness_epsilon=0.05, progress=lambda f, m: seen.append((f, m)))
    fractions = [f for f, _ in seen]
    assert fractions == sorted(fractions) and fractions[-1] == 1.0
    assert list(r.values) == ["degree", "pagerank", "betweenness"]
    assert r.meta["betweenness"]["method"] == "sampled"
    assert r.meta["betweenness"]["distance"] == "1/weight"

    def cancel(fraction: float, message: str) -> None:
        raise Cancelled(job="x")

    with pytest.raises(Cancelled):
        C.scores(g, ["degree", "pagerank"], progress=cancel)
    with pytest.raises(InvalidParameter) as err:
        C.scores(g, ["degree", "fame"])
    assert err.value.data["field"] == "measures"

    def broken(self, *a, **k):
        raise igraph.InternalError("boom")

    monkeypatch.setattr(igraph.Graph, "coreness", broken)
    with pytest.raises(ComputationFailed) as failed:
        C.scores(g, ["coreness"])
    assert isinstance(failed.value.__cause__, igraph.InternalError)


def test_scores_defaults_and_community() -> None:
    g = from_nx(karate(True), "weight")
    assert C.default_measures(g) == list(C.MEASURES)  # n * m = 34 * 78, small
    assert C.default_measures(g, exact_limit=10) == list(C.DEFAULT_MEASURES)
    r = C.scores(g, ["community", "hub"])
    assert r.meta["community"]["modularity"] > 0.3
    assert "eigenvector" in r.meta["hub"]["normalization"]
    # An undirected star: constraint is NaN only for the isolated node.
    star = GraphArrays(5, False, np.array([0, 0, 0], np.int32), np.array([1, 2, 3], np.int32),
                       np.ones(3))
    c = C.constraint(star)
    assert np.isnan(c[4]) and not np.isnan(c[:4]).any()
    # Source: closed form. Centre with 3 unlinked contacts: 3 * (1/3)^2 = 1/3.
    assert c[0] == pytest.approx(1 / 3)
