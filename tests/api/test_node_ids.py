"""Node ids in URL paths (service/api/node_ids.py), over HTTP on both node routes.

The graph is a ring (NetworkX ``cycle_graph``) over ids chosen to be awkward in a
path: slashes, a literal ``%2F``, ``%``, spaces, ``?`` and ``#``, non-ASCII, ``..``,
and ids that end in, or are, the word ``recommendations``. In a ring every person
has degree 2 and exactly two people at distance 2, so the neighbours and the
introductions (Source: NetworkX ``adamic_adar_index``, computed in the test)
say which person the route looked up.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any
from urllib.parse import quote

import httpx
import networkx as nx
import pytest

from tests.conftest import make_settings
from tests.jobs.api_helpers import assert_problem
from tests.live import live_server
from tests.ops.helpers import bearer, make_key, secured_app

pytestmark = pytest.mark.anyio

IDS = [
    "a/b", "a/recommendations", "recommendations", "50%", "a%2Fb", "Mr Hi", "zoë/ø", "..",
    "x/", "/x", "a?b#c", "+1 (555)", "渋谷/駅", "m0", "m1",
]
ENCODE_SLASH = "must be sent percent-encoded as %2F"


def encode(node: str) -> str:
    """One path segment: percent-encoded UTF-8; dot segments as %2E, which clients would drop."""
    return "%2E" * len(node) if node in (".", "..") else quote(node, safe="")


def ring() -> nx.Graph:
    return nx.relabel_nodes(nx.cycle_graph(len(IDS)), dict(enumerate(IDS)))


def ring_csv() -> str:
    quoted = ['"' + n.replace('"', '""') + '"' for n in IDS]
    return "source,target\n" + "".join(f"{quoted[i]},{quoted[(i + 1) % len(IDS)]}\n" for i in range(len(IDS)))


async def upload_ring(client: httpx.AsyncClient, headers: dict[str, str] | None = None) -> str:
    r = await client.post("/v1/graphs", json={"name": "ring", "directed": False}, headers=headers)
    assert r.status_code == 201, r.text
    gid = str(r.json()["id"])
    r = await client.post(f"/v1/graphs/{gid}/versions", content=ring_csv(),
                          headers={"Content-Type": "text/csv", **(headers or {})})
    assert r.status_code == 201, r.text
    return gid


def check_node(body: dict[str, Any], g: nx.Graph, node: str) -> None:
    assert body["node_id"] == node
    assert body["degree"] == g.degree(node) == 2  # Source: NetworkX G.degree on the ring


def check_recommendations(body: dict[str, Any], g: nx.Graph, node: str) -> None:
    assert body["node_id"] == node
    got = {x["node_id"]: x["score"] for x in body["items"] if x["score"] > 0}
    # Source: NetworkX nx.adamic_adar_index over the node's non-neighbours, computed here.
    ref = {v: s for _, v, s in nx.adamic_adar_index(g, [(node, v) for v in nx.non_neighbors(g, node)]) if s > 0}
    assert set(got) == set(ref) and len(ref) == 2
    assert all(got[v] == pytest.approx(ref[v], rel=5.0001e-4) for v in ref)  # four significant digits


async def test_every_id_reaches_both_routes(client) -> None:  # type: ignore[no-untyped-def]
    g = ring()
    gid = await upload_ring(client)
    for node in IDS:
        r = await client.get(f"/v1/graphs/{gid}/nodes/{encode(node)}")
        assert r.status_code == 200, (node, r.text)
        check_node(r.json(), g, node)
        r = await client.get(f"/v1/graphs/{gid}/nodes/{encode(node)}/recommendations")
        assert r.status_code == 200, (node, r.text)
        check_recommendations(r.json(), g, node)
    # Hex digits in either case, and bytes encoded that need not be, name the same id.
    for segment, node in [("a%2fb", "a/b"), ("%61%2F%62", "a/b"), ("zo%c3%ab%2f%c3%b8", "zoë/ø"), ("m0", "m0")]:
        check_node((await client.get(f"/v1/graphs/{gid}/nodes/{segment}")).json(), g, node)
        check_recommendations((await client.get(f"/v1/graphs/{gid}/nodes/{segment}/recommendations")).json(), g, node)
    # Decoded once: a%252Fb is the id "a%2Fb" (five characters), not "a/b".
    assert (await client.get(f"/v1/graphs/{gid}/nodes/a%252Fb")).json()["node_id"] == "a%2Fb"
    assert (await client.get(f"/v1/graphs/{gid}/nodes/50%25/recommendations")).json()["node_id"] == "50%"


async def test_a_slash_outside_the_id_is_the_404_that_says_to_encode_it(client) -> None:  # type: ignore[no-untyped-def]
    gid = await upload_ring(client)
    base = f"/v1/graphs/{gid}/nodes"
    for path in [
        f"{base}/a/b",  # a literal slash: two segments
        f"{base}/zo%C3%AB/%C3%B8",
        f"{base}/a/b/recommendations",
        f"{base}/a%2Fb/",  # a trailing segment
        f"{base}/a%2Fb/recommendations/",
        f"{base}/a%2Fb/x",
        f"{base}/m0/recommendations/extra",
        f"{base}//recommendations",  # an empty segment where the id belongs
        f"/v1%2Fgraphs/{gid}/nodes/a%2Fb",  # %2F outside the id
        f"/v1/graphs/{gid}/nodes%2Fa/b",
    ]:
        body = assert_problem(await client.get(path), 404, "not-found")
        assert ENCODE_SLASH in body["detail"] and body["resource"] == "node", path


async def test_unknown_empty_and_undecodable_ids(client) -> None:  # type: ignore[no-untyped-def]
    gid = await upload_ring(client)
    base = f"/v1/graphs/{gid}/nodes"
    for node in ["nobody/here", "a", "A/B", "a/b/", "recommendations/"]:
        for path in [f"{base}/{encode(node)}", f"{base}/{encode(node)}/recommendations"]:
            body = assert_problem(await client.get(path), 404, "not-found")
            assert body["resource"] == "node" and body["id"] == node, path
            assert repr(node) in body["detail"] and "version 1" in body["detail"]
    assert_problem(await client.get(f"{base}/"), 404, "not-found")  # the empty id names no node
    for path in [f"{base}/%FF", f"{base}/a%C3/recommendations"]:  # not UTF-8 once decoded
        assert assert_problem(await client.get(path), 422, "invalid-parameter")["field"] == "node_id"
    assert_problem(await client.post(f"{base}/a%2Fb"), 405, "method-not-allowed")
    assert_problem(await client.post(f"{base}/a%2Fb/recommendations"), 405, "method-not-allowed")


async def test_the_key_is_checked_before_the_path(sqlite_url: str, tmp_path: Path) -> None:
    key = make_key(sqlite_url, "t1", ["read", "write"])
    async with secured_app(sqlite_url, tmp_path) as client:
        gid = await upload_ring(client, bearer(key))
        base = f"/v1/graphs/{gid}/nodes"
        for path in [f"{base}/a/b", f"{base}/%FF", f"{base}/a%2Fb", f"{base}/a/b/recommendations"]:
            assert_problem(await client.get(path), 401, "unauthorized")
        assert_problem(await client.get(f"{base}/a/b", headers=bearer(key)), 404, "not-found")
        assert_problem(await client.get(f"{base}/%FF", headers=bearer(key)), 422, "invalid-parameter")
        r = await client.get(f"{base}/a%2Fb/recommendations", headers=bearer(key))
        assert r.status_code == 200 and r.json()["node_id"] == "a/b"


def test_every_node_route_shares_the_mechanism(sqlite_url: str, tmp_path: Path) -> None:
    from service.api import OPEN_ROUTERS, ROUTERS
    from service.api.node_ids import NodeIdRoute
    from service.app import create_app

    routes = [r for router in [*ROUTERS, *OPEN_ROUTERS] for r in router.routes]
    with_node = {getattr(r, "path_format", "") for r in routes if "{node_id" in getattr(r, "path", "")}
    shared = {r.path_format for r in routes if isinstance(r, NodeIdRoute)}
    documented = {p for p in create_app(make_settings(sqlite_url, tmp_path)).openapi()["paths"] if "{node_id}" in p}
    assert with_node == shared == documented == {
        "/v1/graphs/{graph_id}/nodes/{node_id}", "/v1/graphs/{graph_id}/nodes/{node_id}/recommendations",
    }


def test_both_routes_over_a_real_socket(tmp_path: Path) -> None:
    """uvicorn's own raw_path and decoding, not the test transport's; query strings included."""
    g = ring()
    data = tmp_path / "data"
    data.mkdir()
    with live_server(data) as base, httpx.Client(base_url=base, timeout=30) as c:
        gid = c.post("/v1/graphs", json={"name": "ring", "directed": False}).json()["id"]
        r = c.post(f"/v1/graphs/{gid}/versions", content=ring_csv(), headers={"Content-Type": "text/csv"})
        assert r.status_code == 201, r.text
        for node in ["a/b", "a/recommendations", "50%", "a%2Fb", "Mr Hi", "zoë/ø", "..", "a?b#c"]:
            r = c.get(f"/v1/graphs/{gid}/nodes/{encode(node)}", params={"version": 1})
            assert r.status_code == 200, (node, r.text)
            check_node(r.json(), g, node)
            r = c.get(f"/v1/graphs/{gid}/nodes/{encode(node)}/recommendations", params={"limit": 5})
            assert r.status_code == 200, (node, r.text)
            check_recommendations(r.json(), g, node)
        body = assert_problem(c.get(f"/v1/graphs/{gid}/nodes/a/b", params={"version": 1}), 404, "not-found")
        assert ENCODE_SLASH in body["detail"]
        body = assert_problem(c.get(f"/v1/graphs/{gid}/nodes/{encode('nobody/here')}/recommendations"), 404, "not-found")
        assert body["id"] == "nobody/here"
