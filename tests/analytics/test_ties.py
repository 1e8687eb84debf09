"""Tests for service.analytics.ties.strength: tie strength (Onnela et al. 2007) and the neighbour index."""

from __future__ import annotations

import pickle

import networkx as nx
import numpy as np
import pytest

from service.analytics.ties import strength as ties_module
from service.analytics.errors import InvalidParameter
from service.analytics.graph import GraphArrays
from service.analytics.ties.strength import neighbour_index, tie_strength


def from_nx(G: nx.Graph, weight: str | None = None) -> GraphArrays:
    edges = np.array(list(G.edges()), dtype=np.int32).reshape(-1, 2)
    w = (
        np.array([G.edges[e][weight] for e in G.edges()], dtype=np.float64)
        if weight
        else np.ones(len(edges))
    )
    return GraphArrays(G.number_of_nodes(), G.is_directed(), edges[:, 0].copy(),
                       edges[:, 1].copy(), w)


def graphs() -> list[tuple[str, nx.Graph]]:
    return [
        ("karate", nx.karate_club_graph()),
        ("gnp", nx.gnp_random_graph(80, 0.08, seed=3)),
    ]


def test_triangle_overlap_is_one() -> None:
    g = from_nx(nx.complete_graph(3))
    # Source: Onnela et al. (2007) definition (REFERENCES.md): 1 on every edge of a triangle.
    assert tie_strength(g).overlap.tolist() == [1.0, 1.0, 1.0]


def test_bridge_overlap_is_zero() -> None:
    # Two triangles {0,1,2} and {3,4,5} joined by the bridge 2-3.
    G = nx.Graph([(0, 1), (0, 2), (1, 2), (2, 3), (3, 4), (3, 5), (4, 5)])
    g = from_nx(G)
    ov = dict(zip(map(tuple, np.column_stack((g.src, g.dst)).tolist()), tie_strength(g).overlap))
    # Source: Onnela et al. (2007) definition (REFERENCES.md): 0 on a bridge.
    assert ov[(2, 3)] == 0.0
    # Source: the definition O = n / ((k_i - 1) + (k_j - 1) - n): (0,1) 1/(1+1-1), (0,2) 1/(1+2-1).
    assert ov[(0, 1)] == 1.0 and ov[(0, 2)] == 0.5


def test_isolated_pair_overlap_defined_as_zero() -> None:
    g = GraphArrays(2, False, np.array([0], np.int32), np.array([1], np.int32), np.ones(1))
    # Source: our convention (k_i = k_j = 1 leaves O undefined; we define 0, see docstring).
    assert tie_strength(g).overlap.tolist() == [0.0]


@pytest.mark.parametrize("name,G", graphs())
def test_overlap_matches_networkx_neighbourhoods(name: str, G: nx.Graph) -> None:
    g = from_nx(G)
    t = tie_strength(g)
    for e, (i, j) in enumerate(zip(g.src.tolist(), g.dst.tolist())):
        n_ij = len(list(nx.common_neighbors(G, i, j)))
        denom = (G.degree(i) - 1) + (G.degree(j) - 1) - n_ij
        # Source: NetworkX nx.common_neighbors and G.degree, computed in this test.
        assert t.common[e] == n_ij
        assert t.overlap[e] == pytest.approx(n_ij / denom if denom > 0 else 0.0, abs=1e-15)


def test_weak_ties_are_bridges_on_karate() -> None:
    # Granovetter (1973) / Onnela et al. (2007): ties across communities have low overlap.
    # Source: NetworkX nx.bridges(G) on karate, computed in this test.
    G = nx.karate_club_graph()
    g = from_nx(G)
    t = tie_strength(g)
    bridges = {frozenset(e) for e in nx.bridges(G)}
    assert bridges  # karate has the pendant tie 0-11
    for e, (i, j) in enumerate(zip(g.src.tolist(), g.dst.tolist())):
        if frozenset((i, j)) in bridges:
            assert t.overlap[e] == 0.0


def test_reciprocity_matches_networkx_digraph() -> None:
    G = nx.gnp_random_graph(40, 0.15, seed=5, directed=True)
    g = from_nx(G)
    t = tie_strength(g)
    for e, (i, j) in enumerate(zip(g.src.tolist(), g.dst.tolist())):
        # Source: NetworkX G.has_edge(j, i), computed in this test.
        assert bool(t.reciprocal[e]) == G.has_edge(j, i)
    # Overlap uses the undirected view.
    U = G.to_undirected()
    for e, (i, j) in enumerate(zip(g.src.tolist(), g.dst.tolist())):
        n_ij = len(list(nx.common_neighbors(U, i, j)))
        denom = U.degree(i) + U.degree(j) - 2 - n_ij
        assert t.overlap[e] == pytest.approx(n_ij / denom if denom > 0 else 0.0)


def test_weight_score_and_combination() -> None:
    # Directed: 0->1 (w 1) and 1->0 (w 3) form one pair of weight 4; 1->2 (w 2); 2->3 (w 6).
    g = GraphArrays(4, True, np.array([0, 1, 1, 2], np.int32), np.array([1, 0, 2, 3], np.int32),
                    np.array([1.0, 3.0, 2.0, 6.0]))
    t = tie_strength(g, weight_share=0.5, overlap_share=0.3, reciprocity_share=0.2)
    # Source: the documented formula w / (w + median), pair weights {4, 2, 6}, median 4.
    expected_ws = np.array([4 / 8, 4 / 8, 2 / 6, 6 / 10])
    np.testing.assert_allclose(t.weight_score, expected_ws)
    assert t.reciprocal.tolist() == [True, True, False, False]
    assert t.shares == pytest.approx((0.5, 0.3, 0.2))
    # Source: the documented convex combination; overlap is 0 everywhere on this path.
    np.testing.assert_allclose(t.strength, 0.5 * expected_ws + 0.2 * t.reciprocal)


def test_uninformative_signals_give_their_share_away() -> None:
    G = nx.karate_club_graph()
    t = tie_strength(from_nx(G))
    # Undirected and unweighted: only overlap varies, so strength = overlap (documented rule).
    np.testing.assert_allclose(t.strength, t.overlap)
    assert t.shares == (0.0, 1.0, 0.0)
    tw = tie_strength(from_nx(G, weight="weight"))
    # Karate's edge weights are interaction counts; reciprocity's share goes to the other two.
    np.testing.assert_allclose(tw.strength, 0.5 * tw.weight_score + 0.5 * tw.overlap)
    assert np.all((tw.strength >= 0) & (tw.strength <= 1))


@pytest.mark.parametrize(
    "kwargs,field",
    [
        ({"weight_share": -0.1}, "weight_share"),
        ({"overlap_share": float("nan")}, "overlap_share"),
        ({"weight_share": 0, "overlap_share": 0, "reciprocity_share": 0}, "weight_share"),
    ],
)
def test_bad_shares(kwargs: dict[str, float], field: str) -> None:
    g = from_nx(nx.path_graph(3))
    with pytest.raises(InvalidParameter) as err:
        tie_strength(g, **kwargs)
    assert err.value.data["field"] == field


def test_self_loops_are_not_ties() -> None:
    g = GraphArrays(3, False, np.array([0, 1, 1], np.int32), np.array([1, 1, 2], np.int32),
                    np.ones(3))
    t = tie_strength(g)
    assert t.strength[1] == 0.0 and not t.reciprocal[1] and t.common[1] == 0
    ix = neighbour_index(g)
    assert ix.neighbours(1).tolist() == [0, 2]
    assert ix.degree.tolist() == [1, 2, 1]


@pytest.mark.parametrize("directed", [False, True])
def test_index_matches_networkx(directed: bool) -> None:
    G = nx.gnp_random_graph(70, 0.1, seed=11, directed=directed)
    g = from_nx(G)
    ix = neighbour_index(g)
    U = G.to_undirected() if directed else G
    for v in range(g.n):
        # Source: NetworkX U.neighbors(v) / U.degree(v), computed in this test.
        assert ix.neighbours(v).tolist() == sorted(U.neighbors(v))
        assert ix.degree[v] == U.degree(v)
    order = ix.by_degree.tolist()
    assert order == sorted(range(g.n), key=lambda v: (-U.degree(v), v))
    # Entry strengths are symmetric and equal the edge's strength.
    lookup = {}
    for u in range(g.n):
        for p in range(ix.indptr[u], ix.indptr[u + 1]):
            lookup[(u, int(ix.indices[p]))] = ix.strength[p]
    for e, (i, j) in enumerate(zip(g.src.tolist(), g.dst.tolist())):
        assert lookup[(i, j)] == lookup[(j, i)] == ix.ties.strength[e]
    if directed:
        assert ix.out_csr is not None and ix.in_csr is not None
        for v in range(g.n):
            out = ix.out_csr.indices[ix.out_csr.indptr[v] : ix.out_csr.indptr[v + 1]]
            inn = ix.in_csr.indices[ix.in_csr.indptr[v] : ix.in_csr.indptr[v + 1]]
            assert sorted(out.tolist()) == sorted(G.successors(v))
            assert sorted(inn.tolist()) == sorted(G.predecessors(v))
    else:
        assert ix.out_csr is None and ix.in_csr is None


def test_index_pickles_without_scratch() -> None:
    ix = neighbour_index(from_nx(nx.karate_club_graph()))
    ix.scratch()
    back = pickle.loads(pickle.dumps(ix))
    assert back.neighbours(33).tolist() == ix.neighbours(33).tolist()
    assert float(back.scratch().acc.sum()) == 0.0


def test_empty_graph() -> None:
    g = GraphArrays(3, False, np.zeros(0, np.int32), np.zeros(0, np.int32), np.zeros(0))
    ix = neighbour_index(g)
    assert ix.degree.tolist() == [0, 0, 0] and ix.ties.strength.shape == (0,)


def test_all_exported() -> None:
    for name in ties_module.__all__:
        assert hasattr(ties_module, name)
