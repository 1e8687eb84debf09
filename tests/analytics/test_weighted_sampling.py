"""Weighted shortest-path sampling for Riondato-Kornaropoulos betweenness.

``_weighted_sampling.rk_sample_weighted`` (balanced bidirectional Dijkstra)
must draw, for each ordered pair, every shortest path with probability
``1 / sigma_st``. Checked three ways: path frequencies for fixed pairs
against NetworkX's enumeration of all shortest paths (chi-square), per-node
counts over random pairs against NetworkX's exact betweenness, and against
the one-directional Dijkstra sampler kept as the reference.

Thresholds: a chi-square statistic may not exceed the chi-square quantile
whose upper tail equals that of 4.5 standard deviations of a normal
(p = 3.4e-6); a binomial count may not differ from its mean by more than
4.5 standard deviations. Seeds are fixed, so every run is the same.
"""

from __future__ import annotations

from collections import Counter

import networkx as nx
import numpy as np
import pytest
from scipy import stats

from service.analytics.structure import _kernels as K
from service.analytics.structure import _weighted_sampling as W
from service.analytics.structure import paths as P
from service.analytics.graph import GraphArrays, csr

RTOL = 1e-10  # as service.analytics.structure.paths._RTOL
Z = 4.5
P_TAIL = float(stats.norm.sf(Z))


def lengths_csr(G: nx.Graph, attr: str):
    """Out- and in-CSR of G (both directions when undirected) with lengths G[u][v][attr]."""
    src, dst, ln = [], [], []
    for u, v, d in G.edges(data=True):
        src.append(u), dst.append(v), ln.append(float(d[attr]))
        if not G.is_directed():
            src.append(v), dst.append(u), ln.append(float(d[attr]))
    src_a, dst_a, ln_a = np.array(src), np.array(dst), np.array(ln)
    n = G.number_of_nodes()
    return n, csr(n, src_a, dst_a, ln_a), csr(n, dst_a, src_a, ln_a)


def draw_paths(G: nx.Graph, attr: str, s: int, t: int, r: int, seed: int) -> Counter:
    """Frequencies of the interior-node sequences the bidirectional sampler draws for (s, t)."""
    n, out, inn = lengths_csr(G, attr)
    rows = W._weighted_paths_between(n, out.indptr, out.indices, out.data, inn.indptr,
                                     inn.indices, inn.data, s, t, r, K.seed_state(seed), RTOL)
    return Counter(tuple(int(x) for x in row if x >= 0) for row in rows)


def chi_square_ok(observed: Counter, expected: dict[tuple, float], r: int) -> tuple[float, float]:
    """(statistic, threshold) of Pearson's chi-square of ``observed`` against ``expected`` probabilities."""
    assert set(observed) <= set(expected), set(observed) - set(expected)
    keys = sorted(expected)
    f_obs = np.array([observed.get(k, 0) for k in keys], dtype=float)
    f_exp = np.array([expected[k] * r for k in keys])
    stat = float(((f_obs - f_exp) ** 2 / f_exp).sum())
    return stat, float(stats.chi2.isf(P_TAIL, len(keys) - 1))


def uniform_over_shortest(G: nx.Graph, s: int, t: int, weight: str) -> dict[tuple, float]:
    """Every shortest s-t path (NetworkX enumeration) as its interior sequence, probability 1/sigma."""
    found = [tuple(p[1:-1]) for p in nx.all_shortest_paths(G, s, t, weight=weight)]
    assert len(set(found)) == len(found)
    return {p: 1.0 / len(found) for p in found}


# --- tiny graphs -----------------------------------------------------------------------

def split_diamond() -> nx.DiGraph:
    """s=0 to t=6: 0-1-6, 0-2-3-6 and 0-2-4-6 have length 3 (so 2 carries 2/3 of them),
    0-5-6 has length 3.5. Every arc's 'len' is also an integer 'ilen' (twice it)."""
    G = nx.DiGraph()
    for u, v, w in [(0, 1, 1.0), (1, 6, 2.0), (0, 2, 1.0), (2, 3, 1.0), (2, 4, 1.0),
                    (3, 6, 1.0), (4, 6, 1.0), (0, 5, 1.0), (5, 6, 2.5)]:
        G.add_edge(u, v, len=w, ilen=int(2 * w))
    return G


def grid(rows: int = 4, cols: int = 5) -> nx.Graph:
    """Undirected grid, every edge of length 1: C(rows+cols-2, rows-1) corner-to-corner paths."""
    G = nx.convert_node_labels_to_integers(nx.grid_2d_graph(rows, cols), ordering="sorted")
    nx.set_edge_attributes(G, 1.0, "len")
    nx.set_edge_attributes(G, 1, "ilen")
    return G


def float_ties() -> nx.Graph:
    """Lengths in tenths: s=0 to t=7 by 0-1-2-7 (0.1 + 0.2 + 0.3), 0-3-7 (0.3 + 0.3),
    0-4-7 (0.4 + 0.2), 0-5-6-7 (0.1 + 0.1 + 0.4, three arcs of 1/w with w = 10, 10, 2.5),
    and 0-7 (0.7, longer). In floating point the sums differ in the last bits; 'ilen'
    (tenths as integers) is the exact length."""
    G = nx.Graph()
    for u, v, tenths in [(0, 1, 1), (1, 2, 2), (2, 7, 3), (0, 3, 3), (3, 7, 3), (0, 4, 4),
                         (4, 7, 2), (0, 5, 1), (5, 6, 1), (6, 7, 4), (0, 7, 7)]:
        G.add_edge(u, v, len=1.0 / (10.0 / tenths), ilen=tenths)
    return G


def direct_arc_tie() -> nx.DiGraph:
    """s=0 to t=3: the arc 0-3 (length 2) ties 0-1-3 and 0-2-3 (1 + 1); 0-4-3 is longer."""
    G = nx.DiGraph()
    for u, v, w in [(0, 3, 2), (0, 1, 1), (1, 3, 1), (0, 2, 1), (2, 3, 1), (0, 4, 1), (4, 3, 2)]:
        G.add_edge(u, v, len=float(w), ilen=w)
    return G


def random_directed(seed: int = 7, n: int = 40, p: float = 0.12) -> nx.DiGraph:
    """G(n, p) directed with integer lengths 1..3 (many ties)."""
    G = nx.gnp_random_graph(n, p, seed=seed, directed=True)
    rng = np.random.default_rng(seed)
    for _, _, d in G.edges(data=True):
        d["ilen"] = int(rng.integers(1, 4))
        d["len"] = float(d["ilen"])
    return G


def most_tied_pairs(G: nx.Graph, k: int) -> list[tuple[int, int]]:
    """The k reachable pairs with the most shortest paths (NetworkX enumeration)."""
    counts = []
    for s in G:
        reach = nx.single_source_dijkstra_path_length(G, s, weight="ilen")
        for t in reach:
            if t != s:
                counts.append((len(list(nx.all_shortest_paths(G, s, t, weight="ilen"))), s, t))
    counts.sort(reverse=True)
    return [(s, t) for _, s, t in counts[:k]]


def test_float_ties_graph_ties_only_within_rtol() -> None:
    # The fixture must exercise the tolerance: NetworkX on the float lengths sees
    # fewer shortest paths than on the exact integer ones.
    G = float_ties()
    exact = list(nx.all_shortest_paths(G, 0, 7, weight="ilen"))
    floats = list(nx.all_shortest_paths(G, 0, 7, weight="len"))
    assert len(exact) == 4 and len(floats) < len(exact)


TINY = [
    pytest.param(split_diamond, 0, 6, id="split-diamond"),
    pytest.param(grid, 0, 19, id="grid-4x5-corners"),
    pytest.param(grid, 1, 18, id="grid-4x5-inner"),
    pytest.param(float_ties, 0, 7, id="float-ties"),
    pytest.param(float_ties, 7, 0, id="float-ties-reversed"),
    pytest.param(direct_arc_tie, 0, 3, id="direct-arc-tie"),
]


@pytest.mark.parametrize("make, s, t", TINY)
def test_fixed_pair_draws_every_shortest_path_uniformly(make, s, t) -> None:
    G = make()
    r = 30_000
    observed = draw_paths(G, "len", s, t, r, seed=11)
    # Source: NetworkX all_shortest_paths on the exact integer lengths.
    expected = uniform_over_shortest(G, s, t, "ilen")
    stat, limit = chi_square_ok(observed, expected, r)
    assert stat <= limit, (stat, limit, observed)


def test_directed_pairs_with_many_ties() -> None:
    G = random_directed()
    r = 20_000
    for s, t in most_tied_pairs(G, 4):
        observed = draw_paths(G, "len", s, t, r, seed=s * 100 + t)
        # Source: NetworkX all_shortest_paths (directed, integer lengths).
        expected = uniform_over_shortest(G, s, t, "ilen")
        assert len(expected) >= 3
        stat, limit = chi_square_ok(observed, expected, r)
        assert stat <= limit, (s, t, stat, limit)


def test_unreachable_pair_and_single_arc_draw_no_interior() -> None:
    G = split_diamond()
    G.add_node(7)  # isolated
    n, out, inn = lengths_csr(G, "len")
    for s, t in [(0, 7), (7, 0), (6, 0)]:  # Source: no s-t path exists (by construction)
        rows = W._weighted_paths_between(n, out.indptr, out.indices, out.data, inn.indptr,
                                         inn.indices, inn.data, s, t, 50, K.seed_state(1), RTOL)
        assert (rows == -1).all()


@pytest.mark.parametrize("make, s, t", [pytest.param(split_diamond, 0, 6, id="split-diamond"),
                                        pytest.param(grid, 0, 19, id="grid-4x5-corners")])
def test_chi_square_rejects_a_biased_walk(make, s, t) -> None:
    """The check has power: the observed draws are rejected against the walk from s that
    picks each next node uniformly among those on a shortest path to t (a plausible bug:
    a half traced without its path counts)."""
    G = make()
    r = 30_000
    observed = draw_paths(G, "len", s, t, r, seed=11)
    # Source: NetworkX dijkstra_predecessor_and_distance from t on the reversed graph
    # gives each node's next nodes on shortest paths to t; the biased walk's path
    # probabilities are products of 1 / (their number).
    nxt, _ = nx.dijkstra_predecessor_and_distance(G.reverse() if G.is_directed() else G, t,
                                                  weight="ilen")
    biased = {}
    for path in nx.all_shortest_paths(G, s, t, weight="ilen"):
        biased[tuple(path[1:-1])] = float(np.prod([1.0 / len(nxt[v]) for v in path[:-1]]))
    assert max(biased.values()) > 1.2 / len(biased)
    assert sum(biased.values()) == pytest.approx(1.0)
    stat, limit = chi_square_ok(observed, biased, r)
    assert stat > limit


# --- random pairs: counts against exact betweenness ------------------------------------

def two_components() -> nx.DiGraph:
    """A directed graph with unreachable pairs: two random directed parts, one-way links."""
    A = random_directed(seed=3, n=25, p=0.15)
    B = nx.relabel_nodes(random_directed(seed=4, n=20, p=0.2), {i: i + 25 for i in range(20)})
    G = nx.compose(A, B)
    G.add_edge(0, 30, len=2.0, ilen=2)
    G.add_edge(5, 40, len=1.0, ilen=1)
    return G


@pytest.mark.parametrize("make", [grid, float_ties, random_directed, two_components],
                         ids=["grid", "float-ties", "directed", "two-components"])
def test_random_pair_counts_match_networkx_betweenness(make) -> None:
    G = make()
    n, out, inn = lengths_csr(G, "len")
    r = 100_000
    counts = np.zeros(n)
    W.rk_sample_weighted(n, out.indptr, out.indices, out.data, inn.indptr, inn.indices,
                         inn.data, r, K.seed_state(21), counts, RTOL)
    # Source: NetworkX betweenness_centrality(normalized=False) on the exact integer
    # lengths: the sum over pairs of the share of shortest paths through v (unordered
    # pairs when undirected, so doubled). A sample contains v at most once, so
    # counts[v] is binomial with p = that sum / (n (n - 1)).
    bc = nx.betweenness_centrality(G, normalized=False, weight="ilen")
    pairs_sum = np.array([bc[v] for v in range(n)]) * (1 if G.is_directed() else 2)
    p = pairs_sum / (n * (n - 1))
    sd = np.sqrt(r * p * (1 - p))
    assert np.all(np.abs(counts - r * p) <= Z * sd + 1e-9), np.max(np.abs(counts - r * p) / (sd + 1e-12))
    assert counts[p == 0].sum() == 0


def test_chunks_give_the_same_counts() -> None:
    G = random_directed()
    n, out, inn = lengths_csr(G, "len")
    args = (n, out.indptr, out.indices, out.data, inn.indptr, inn.indices, inn.data)
    whole, parts = np.zeros(n), np.zeros(n)
    W.rk_sample_weighted(*args, 3000, K.seed_state(5), whole, RTOL)
    state = K.seed_state(5)
    for todo in (1000, 1500, 500):
        W.rk_sample_weighted(*args, todo, state, parts, RTOL)
    assert np.array_equal(whole, parts)


# --- larger graphs: the RK bound, and agreement with the reference sampler ------------

def integer_weights(G: nx.Graph, seed: int) -> GraphArrays:
    """Interaction counts 1..7 as 'weight' (so paths use 1/w) and 'idist' = 420/w, exact."""
    rng = np.random.default_rng(seed)
    for _, _, d in G.edges(data=True):
        d["weight"] = int(rng.integers(1, 8))
        d["idist"] = 420 // d["weight"]
    edges = list(G.edges(data=True))
    return GraphArrays(G.number_of_nodes(), G.is_directed(),
                       np.array([u for u, _, _ in edges], np.int32),
                       np.array([v for _, v, _ in edges], np.int32),
                       np.array([float(d["weight"]) for _, _, d in edges]))


def geometric(seed: int = 2, n: int = 150) -> nx.Graph:
    G = nx.random_geometric_graph(n, 0.16, seed=seed)
    big = max(nx.connected_components(G), key=len)
    G = nx.convert_node_labels_to_integers(G.subgraph(big).copy())
    for _, d in G.nodes(data=True):
        d.clear()
    return G


@pytest.mark.parametrize("make", [nx.karate_club_graph, geometric], ids=["karate", "geometric"])
def test_sampled_betweenness_within_epsilon_of_networkx(make) -> None:
    G = make()
    g = integer_weights(G, seed=9)
    n = g.n
    est, meta = P.betweenness(g, method="sampled", epsilon=0.01, delta=0.1, random_seed=4)
    assert meta["weighted"] and meta["samples"] > 10_000
    # Source: NetworkX exact weighted betweenness (Brandes) on lengths 420/w, which are
    # exact integers proportional to the 1/w the service uses.
    bc = nx.betweenness_centrality(G, normalized=True, weight="idist")
    exact = np.array([bc[v] for v in range(n)])
    # Riondato-Kornaropoulos: with probability >= 1 - delta every node within epsilon
    # on their n(n-1) scale, i.e. error_bound on NetworkX's scale.
    assert np.max(np.abs(est - exact)) <= meta["error_bound"]


def test_new_and_reference_samplers_agree() -> None:
    G = nx.powerlaw_cluster_graph(400, 3, 0.3, seed=6)
    rng = np.random.default_rng(6)
    for _, _, d in G.edges(data=True):
        d["len"] = 1.0 / int(rng.integers(1, 8))  # 1/w, as the service's lengths
    n, out, inn = lengths_csr(G, "len")
    args = (n, out.indptr, out.indices, out.data, inn.indptr, inn.indices, inn.data)
    r = 40_000
    new, old = np.zeros(n), np.zeros(n)
    work_new = W.rk_sample_weighted(*args, r, K.seed_state(31), new, RTOL)
    work_old = W._rk_sample_weighted_dijkstra(*args, r, K.seed_state(32), old, RTOL)
    # Source: the one-directional Dijkstra sampler (reference). Independent seeds: per
    # node the two shares are independent binomials with equal means.
    p1, p2 = new / r, old / r
    se = np.sqrt(p1 * (1 - p1) / r + p2 * (1 - p2) / r)
    assert np.all(np.abs(p1 - p2) <= Z * se + 1e-12)
    # The point of the bidirectional search: far fewer nodes settled per sample.
    assert work_new < work_old / 2
