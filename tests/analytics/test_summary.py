"""Tests for service.analytics.structure.summary against NetworkX and published dataset figures."""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest

from service.analytics.structure import summary
from service.analytics.graph import GraphArrays
from service.analytics.structure.summary import graph_summary
from tests.datasets import snap_edges


def from_nx(G: nx.Graph, *, weight: str | None = None) -> GraphArrays:
    nodes = sorted(G.nodes())
    index = {u: i for i, u in enumerate(nodes)}
    edges = list(G.edges(data=True))
    src = np.array([index[u] for u, _, _ in edges], dtype=np.int32)
    dst = np.array([index[v] for _, v, _ in edges], dtype=np.int32)
    w = np.array([float(d.get(weight, 1.0)) if weight else 1.0 for _, _, d in edges])
    return GraphArrays(len(nodes), G.is_directed(), src, dst, w)


def nx_reference(G: nx.Graph) -> dict:
    """The same figures computed with NetworkX (the reference)."""
    n = G.number_of_nodes()
    deg = np.array([d for _, d in G.degree()])
    weak = list(nx.weakly_connected_components(G) if G.is_directed()
                else nx.connected_components(G))
    ref = {
        "nodes": n,
        "edges": G.number_of_edges(),
        "self_loops": nx.number_of_selfloops(G),
        "weak_components": len(weak),
        "largest_weak_share": max(map(len, weak)) / n,
        "degree_min": int(deg.min()),
        "degree_median": float(np.median(deg)),
        "degree_max": int(deg.max()),
    }
    if G.is_directed():
        strong = list(nx.strongly_connected_components(G))
        ref["strong_components"] = len(strong)
        ref["largest_strong_share"] = max(map(len, strong)) / n
        ref["in_degree_max"] = max(d for _, d in G.in_degree())
        ref["out_degree_max"] = max(d for _, d in G.out_degree())
    return ref


def test_all_names_exported() -> None:
    assert summary.__all__ == ["graph_summary"]


def test_karate_club_matches_networkx_and_published_data() -> None:
    G = nx.karate_club_graph()
    s = graph_summary(from_nx(G, weight="weight"))
    # Source: Zachary 1977 via NetworkX karate_club_graph: 34 nodes, 78 edges,
    # member 34 has degree 17 (published data, REFERENCES.md).
    assert (s["nodes"], s["edges"], s["degree_max"]) == (34, 78, 17)
    # Source: NetworkX functions on the same graph, computed in this test.
    for key, value in nx_reference(G).items():
        assert s[key] == pytest.approx(value), key
    assert s["density"] == pytest.approx(nx.density(G))  # Source: nx.density
    assert s["weighted"] is True  # karate 'weight' holds interaction counts 1..7
    assert s["directed"] is False
    assert s["reciprocity"] is None and s["strong_components"] is None
    assert s["in_degree_max"] is None and s["out_degree_max"] is None
    # Without weights every weight is 1.
    assert graph_summary(from_nx(G))["weighted"] is False


def test_random_directed_graph_matches_networkx() -> None:
    G = nx.gnp_random_graph(300, 0.01, seed=7, directed=True)
    # Add some reciprocated arcs so reciprocity is not trivially small.
    for u, v in list(G.edges())[:: 4]:
        G.add_edge(v, u)
    s = graph_summary(from_nx(G))
    # Source: NetworkX on the same graph, computed in this test.
    for key, value in nx_reference(G).items():
        assert s[key] == pytest.approx(value), key
    assert s["density"] == pytest.approx(nx.density(G))
    assert s["reciprocity"] == pytest.approx(nx.overall_reciprocity(G))
    assert s["self_loops"] == 0
    assert 0.3 < s["reciprocity"] < 0.6  # a quarter of arcs were mirrored


def test_directed_self_loops_left_out_of_density_and_reciprocity() -> None:
    # 0 <-> 1, 1 -> 2, 2 -> 2: closed form density 3 / (3 * 2) = 0.5;
    # reciprocity 2 of 3 non-loop arcs.
    g = GraphArrays(3, True, np.array([0, 1, 1, 2], np.int32),
                    np.array([1, 0, 2, 2], np.int32), np.ones(4))
    s = graph_summary(g)
    assert s["density"] == pytest.approx(0.5)  # Source: closed form above.
    assert s["reciprocity"] == pytest.approx(2 / 3)  # Source: closed form above.
    assert s["self_loops"] == 1
    # Source: closed form. Strong components {0, 1} and {2}.
    assert s["strong_components"] == 2
    assert s["largest_strong_share"] == pytest.approx(2 / 3)
    assert (s["in_degree_max"], s["out_degree_max"]) == (2, 2)


def test_isolated_nodes_and_empty_cases() -> None:
    g = GraphArrays(5, False, np.array([0], np.int32), np.array([1], np.int32), np.ones(1))
    s = graph_summary(g)
    # Source: closed form. One edge among 5 nodes: 2 / 20; components {0,1},{2},{3},{4}.
    assert s["density"] == pytest.approx(0.1)
    assert (s["weak_components"], s["largest_weak_share"]) == (4, 0.4)
    assert (s["degree_min"], s["degree_median"], s["degree_max"]) == (0, 0.0, 1)
    one = graph_summary(GraphArrays(1, True, np.zeros(0, np.int32), np.zeros(0, np.int32),
                                    np.zeros(0)))
    assert one["density"] == 0.0 and one["reciprocity"] is None and one["edges"] == 0


def load_with_self_loops(name: str) -> tuple[GraphArrays, nx.Graph]:
    """SNAP undirected file as stored (self-loops kept), plus the NetworkX graph."""
    e = snap_edges(name)
    ids, inv = np.unique(e.ravel(), return_inverse=True)
    inv = inv.reshape(-1, 2).astype(np.int32)
    g = GraphArrays(len(ids), False, inv[:, 0].copy(), inv[:, 1].copy(), np.ones(len(inv)))
    G = nx.Graph()
    G.add_nodes_from(range(len(ids)))
    G.add_edges_from(inv.tolist())
    return g, G


@pytest.mark.shared
def test_ca_grqc_matches_published_counts_and_networkx() -> None:
    g, G = load_with_self_loops("ca-GrQc")
    s = graph_summary(g)
    # Source: datasets/README.md (SNAP ca-GrQc page): 5,242 nodes, 14,496 edges
    # including 12 self-loops; largest WCC 4,158 nodes.
    assert (s["nodes"], s["edges"], s["self_loops"]) == (5242, 14496, 12)
    assert s["largest_weak_share"] == pytest.approx(4158 / 5242)
    # Source: NetworkX on the same edges, computed in this test.
    assert s["weak_components"] == nx.number_connected_components(G)
    deg = np.array([d for _, d in G.degree()])
    assert (s["degree_min"], s["degree_max"]) == (deg.min(), deg.max())
    assert s["degree_median"] == np.median(deg)
    # Source: nx.density on the graph without self-loops (our stated convention).
    H = G.copy()
    H.remove_edges_from(nx.selfloop_edges(H))
    assert s["density"] == pytest.approx(nx.density(H))


# ------------------------------------------------------------------ compiled kernels


def random_arrays(rng: np.random.Generator, n: int, m: int, *, loops: bool) -> tuple:
    """Unique random arcs over n nodes (some isolated), optionally with self-loops."""
    src = rng.integers(0, n, m)
    dst = rng.integers(0, n, m)
    if not loops:
        keep = src != dst
        src, dst = src[keep], dst[keep]
    pairs = np.unique(np.column_stack((src, dst)), axis=0)  # sorted by (source, target)
    return pairs[:, 0].astype(np.int32), pairs[:, 1].astype(np.int32)


@pytest.mark.parametrize("seed", range(8))
def test_kernels_match_networkx_on_random_graphs(seed: int) -> None:
    from service.analytics.structure import _summary_kernels as k

    rng = np.random.default_rng(seed)
    n = int(rng.integers(1, 120))
    # From nearly empty (mostly isolated nodes) to dense enough for a giant component.
    m = int(rng.integers(0, 3 * n))
    src, dst = random_arrays(rng, n, m, loops=seed % 2 == 0)
    D = nx.DiGraph()
    D.add_nodes_from(range(n))
    D.add_edges_from(zip(src.tolist(), dst.tolist()))
    U = D.to_undirected()
    out_deg, in_deg, loops = k.degrees(n, src, dst)
    indptr = k.row_pointer(out_deg)

    # Source: NetworkX degrees, self-loop count, weakly/strongly connected
    # components and overall_reciprocity, computed in this test on the same arcs.
    assert out_deg.tolist() == [D.out_degree(v) for v in range(n)]
    assert in_deg.tolist() == [D.in_degree(v) for v in range(n)]
    assert loops == nx.number_of_selfloops(D)
    weak = list(nx.weakly_connected_components(D))
    assert k.weak_components(n, src, dst) == (len(weak), max(map(len, weak)))
    conn = list(nx.connected_components(U))
    assert k.weak_components(n, dst, src) == (len(conn), max(map(len, conn)))
    strong = list(nx.strongly_connected_components(D))
    assert k.strong_components(n, indptr, dst) == (len(strong), max(map(len, strong)))
    H = D.copy()
    H.remove_edges_from(nx.selfloop_edges(H))
    if H.number_of_edges():
        rec = k.reciprocal_arcs(indptr, src, dst) / H.number_of_edges()
        assert rec == pytest.approx(nx.overall_reciprocity(H))


@pytest.mark.parametrize("directed", [True, False])
def test_summary_of_unsorted_arcs_matches_networkx(directed: bool) -> None:
    rng = np.random.default_rng(11)
    n = 200
    src, dst = random_arrays(rng, n, 500, loops=True)
    if not directed:  # one edge per unordered pair
        keep = src <= dst
        src, dst = src[keep], dst[keep]
    shuffle = rng.permutation(src.size)
    g = GraphArrays(n, directed, src[shuffle], dst[shuffle], np.ones(src.size))
    G = nx.DiGraph() if directed else nx.Graph()
    G.add_nodes_from(range(n))
    G.add_edges_from(zip(src.tolist(), dst.tolist()))
    s = graph_summary(g)
    # Source: NetworkX on the same graph, computed in this test.
    for key, value in nx_reference(G).items():
        assert s[key] == pytest.approx(value), key
    if directed:
        H = G.copy()
        H.remove_edges_from(nx.selfloop_edges(H))
        assert s["reciprocity"] == pytest.approx(nx.overall_reciprocity(H))
    assert graph_summary(GraphArrays(n, directed, src, dst, np.ones(src.size))) == s


def test_strong_components_survive_a_long_path() -> None:
    from service.analytics.structure import _summary_kernels as k

    # A directed cycle of 200,000 nodes: recursion this deep would overflow a stack.
    n = 200_000
    src = np.arange(n, dtype=np.int32)
    dst = np.roll(src, -1)
    # Source: closed form. A cycle is one strong component; cut one arc and
    # every node is its own component, all in one weak component.
    assert k.strong_components(n, k.row_pointer(k.degrees(n, src, dst)[0]), dst) == (1, n)
    cut_src, cut_dst = src[:-1], dst[:-1]
    assert k.strong_components(n, k.row_pointer(k.degrees(n, cut_src, cut_dst)[0]), cut_dst) == (n, 1)
    assert k.weak_components(n, cut_src, cut_dst) == (1, n)


def test_kernels_on_graphs_without_arcs() -> None:
    from service.analytics.structure import _summary_kernels as k

    none = np.zeros(0, np.int32)
    # Source: closed form. Five isolated nodes are five components of one node.
    assert k.weak_components(5, none, none) == (5, 1)
    assert k.strong_components(5, k.row_pointer(np.zeros(5, np.int64)), none) == (5, 1)
    assert k.reciprocal_arcs(k.row_pointer(np.zeros(5, np.int64)), none, none) == 0
    assert k.is_sorted_by_source(none, none, True)
    assert not k.is_sorted_by_source(np.array([1, 0], np.int32), np.array([0, 1], np.int32), False)
    assert not k.is_sorted_by_source(np.array([0, 0], np.int32), np.array([1, 1], np.int32), True)
