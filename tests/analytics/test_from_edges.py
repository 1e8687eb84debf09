"""``from_edges``: small graphs for tests and doctests (service/analytics/graph.py)."""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest

from service.analytics.errors import InvalidParameter
from service.analytics.graph import from_edges, to_igraph


def test_the_graph_is_the_one_networkx_builds_from_the_same_pairs() -> None:
    # Outside reference: NetworkX's Graph/DiGraph from the same edge list.
    pairs = [(0, 1), (1, 2), (2, 0), (3, 4)]
    for directed in (False, True):
        g = from_edges(pairs, n=6, directed=directed, weights=[1, 2, 3, 4])
        ref = (nx.DiGraph if directed else nx.Graph)()
        ref.add_nodes_from(range(6))
        ref.add_weighted_edges_from([(u, v, w) for (u, v), w in zip(pairs, [1, 2, 3, 4])])
        ig = to_igraph(g)
        assert ig.vcount() == ref.number_of_nodes() and ig.ecount() == ref.number_of_edges()
        assert sorted(ig.degree()) == sorted(d for _, d in ref.degree())
        assert g.src.dtype == np.int32 and g.weight.dtype == np.float64 and g.probability is None


@pytest.mark.parametrize(("kwargs", "field"), [
    ({"edges": [(0, 1), (1, 0)]}, "edges"),  # the same undirected edge twice
    ({"edges": [(0, 1)], "n": 1}, "edges"),
    ({"edges": [(0, -1)]}, "edges"),
    ({"edges": [(0, 1)], "weights": [1.0, 2.0]}, "weights"),
    ({"edges": [(0, 1)], "probabilities": []}, "probabilities"),
])
def test_bad_lists_are_refused_naming_the_field(kwargs: dict[str, object], field: str) -> None:
    with pytest.raises(InvalidParameter) as err:
        from_edges(**kwargs)  # type: ignore[arg-type]
    assert err.value.data["field"] == field


def test_a_reversed_pair_is_another_arc_when_directed() -> None:
    g = from_edges([(0, 1), (1, 0)], directed=True)
    assert g.m == 2 and g.n == 2
