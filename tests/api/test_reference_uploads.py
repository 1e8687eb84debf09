"""Uploads over HTTP checked against published counts and NetworkX."""

from __future__ import annotations

import gzip

import networkx as nx
import pytest

from tests.api.test_graphs import make_graph, upload
from tests.datasets import dataset_path

pytestmark = pytest.mark.anyio


def snap_csv(name: str) -> tuple[bytes, list[tuple[int, int]]]:
    pairs = []
    with gzip.open(dataset_path(f"{name}.edges.gz"), "rt") as fh:
        for line in fh:
            if not line.startswith("#"):
                u, v = line.split()
                pairs.append((int(u), int(v)))
    body = "source,target\n" + "".join(f"{u},{v}\n" for u, v in pairs)
    return body.encode(), pairs


@pytest.mark.shared
async def test_ca_grqc_counts_match_the_publisher_and_networkx(client) -> None:  # type: ignore[no-untyped-def]
    body, pairs = snap_csv("ca-GrQc")
    gid = await make_graph(client, directed=False, allow_self_loops=True)
    r = await upload(client, gid, body)
    assert r.status_code == 201, r.text
    v = r.json()
    s = v["summary"]
    # Source: ../shared/datasets/README.md (SNAP): 5,242 nodes, 14,496 undirected edges, 12 self-loops.
    assert (v["nodes"], v["edges"], s["self_loops"]) == (5242, 14496, 12)
    G = nx.Graph(pairs)
    # Source: NetworkX, computed in this test on the same file.
    comps = list(nx.connected_components(G))
    assert s["weak_components"] == len(comps)
    assert s["largest_weak_share"] == pytest.approx(max(map(len, comps)) / G.number_of_nodes())
    # Source: datasets README: largest WCC 4,158 nodes.
    assert round(s["largest_weak_share"] * 5242) == 4158


@pytest.mark.shared
async def test_email_eu_core_components_and_reciprocity_match_networkx(client) -> None:  # type: ignore[no-untyped-def]
    body, pairs = snap_csv("email-Eu-core")
    gid = await make_graph(client, directed=True, allow_self_loops=True)
    r = await upload(client, gid, body)
    assert r.status_code == 201, r.text
    v = r.json()
    s = v["summary"]
    # Source: datasets README: 1,005 nodes, 25,571 directed edges, 642 self-loops; largest SCC 803.
    assert (v["nodes"], v["edges"], s["self_loops"]) == (1005, 25571, 642)
    assert round(s["largest_strong_share"] * 1005) == 803
    D = nx.DiGraph(pairs)
    D.remove_edges_from(nx.selfloop_edges(D))
    # Source: NetworkX, computed in this test (reciprocity over non-loop arcs).
    assert s["reciprocity"] == pytest.approx(nx.overall_reciprocity(D))
    assert s["strong_components"] == nx.number_strongly_connected_components(D)
    assert s["weak_components"] == nx.number_weakly_connected_components(D)


async def test_karate_summary_matches_networkx(client) -> None:  # type: ignore[no-untyped-def]
    G = nx.karate_club_graph()
    body = "source,target,weight\n" + "".join(f"k{u},k{v},{d['weight']}\n" for u, v, d in G.edges(data=True))
    gid = await make_graph(client)
    r = await upload(client, gid, body)
    assert r.status_code == 201
    s = r.json()["summary"]
    # Source: published data (Zachary 1977, as shipped with NetworkX): 34 nodes, 78 edges,
    # member 34 has degree 17; density and degrees from NetworkX computed here.
    assert (r.json()["nodes"], r.json()["edges"], s["degree_max"]) == (34, 78, 17)
    assert s["density"] == pytest.approx(nx.density(G))
    degs = sorted(d for _, d in G.degree())
    assert s["degree_min"] == degs[0] and s["degree_median"] == pytest.approx((degs[16] + degs[17]) / 2)
