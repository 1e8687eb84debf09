"""Uploads: formats, modes, duplicates and every kind of bad input an upload can hold."""

from __future__ import annotations

import json

import pytest

from tests.api.test_graphs import PROBLEM, make_graph, upload

pytestmark = pytest.mark.anyio


async def versions(client, gid: str) -> list[dict]:  # type: ignore[no-untyped-def]
    return (await client.get(f"/v1/graphs/{gid}/versions")).json()["items"]


async def test_csv_upload_makes_version_with_summary(client) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client)
    r = await upload(client, gid, "source,target,weight\na,b,2\nb,c,1\nc,a,3\nc,d,1\n")
    assert r.status_code == 201, r.text
    v = r.json()
    assert r.headers["location"] == f"/v1/graphs/{gid}/versions/1"
    assert (v["number"], v["nodes"], v["edges"]) == (1, 4, 4)
    s = v["summary"]
    # Source: closed form. Triangle a-b-c plus pendant d: degrees 2,2,3,1.
    assert s["degree_max"] == 3 and s["degree_min"] == 1 and s["weak_components"] == 1
    assert s["weighted"] is True
    latest = (await client.get(f"/v1/graphs/{gid}/versions/latest")).json()
    assert latest["number"] == 1
    g = (await client.get(f"/v1/graphs/{gid}")).json()
    assert g["latest_version"] == 1


async def test_column_mapping_ndjson_json_and_graphml(client) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client, directed=True)
    r = await upload(client, gid, "from,to,n\nx,y,1\ny,z,4\n", source="from", target="to", weight="n")
    assert r.status_code == 201, r.text
    assert r.json()["summary"]["weighted"] is True
    nd = "\n".join(json.dumps({"source": s, "target": t}) for s, t in [("a", "b"), ("b", "c")])
    r = await upload(client, gid, nd, "application/x-ndjson")
    assert r.status_code == 201 and r.json()["edges"] == 2
    body = json.dumps({"edges": [{"source": "p", "target": "q", "probability": 0.5}]})
    r = await upload(client, gid, body, "application/json")
    assert r.status_code == 201 and r.json()["edges"] == 1
    gml = """<?xml version="1.0" encoding="UTF-8"?>
<graphml xmlns="http://graphml.graphdrawing.org/xmlns">
  <key id="w" for="edge" attr.name="weight" attr.type="double"/>
  <key id="s" for="node" attr.name="segment" attr.type="string"/>
  <graph edgedefault="directed">
    <node id="n1"><data key="s">north</data></node><node id="n2"/><node id="n3"/>
    <edge source="n1" target="n2"><data key="w">2.5</data></edge>
  </graph>
</graphml>"""
    r = await upload(client, gid, gml, "application/graphml+xml")
    assert r.status_code == 201, r.text
    assert (r.json()["nodes"], r.json()["edges"]) == (3, 1)


async def test_duplicate_rules(client) -> None:  # type: ignore[no-untyped-def]
    body = "source,target,weight\na,b,2\nb,a,5\na,b,1\n"
    gid = await make_graph(client)  # undirected: a-b and b-a are the same edge
    for rule, expected in (("sum", 8.0), ("max", 5.0), ("last", 1.0)):
        r = await upload(client, gid, body, duplicates=rule)
        assert r.status_code == 201 and r.json()["edges"] == 1
        assert r.json()["origin"]["duplicates_merged"] == 2
    # The stored weight is checked through the node endpoint once it exists; here the count.
    assert len(await versions(client, gid)) == 3


async def test_append_remove_and_node_modes(client) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client)
    assert (await upload(client, gid, "source,target\na,b\nb,c\n")).status_code == 201
    r = await upload(client, gid, "source,target\nc,d\n", mode="append")
    assert (r.json()["nodes"], r.json()["edges"]) == (4, 3)
    r = await upload(client, gid, "source,target\nb,a\n", mode="remove")
    assert (r.json()["nodes"], r.json()["edges"]) == (4, 2)
    r = await upload(client, gid, "id,segment,consent,cost,value\na,north,true,2.5,1\ne,south,no,,\n", part="nodes", mode="append")
    assert r.status_code == 201, r.text
    assert r.json()["nodes"] == 5  # e is a new, isolated person
    r = await upload(client, gid, "id\nc\n", part="nodes", mode="remove")
    assert r.status_code == 201, r.text
    assert (r.json()["nodes"], r.json()["edges"]) == (4, 0)
    assert [v["number"] for v in await versions(client, gid)] == [1, 2, 3, 4, 5]


async def assert_problem(r, status: int, slug: str, **fields) -> dict:  # type: ignore[no-untyped-def]
    assert r.status_code == status, r.text
    assert r.headers["content-type"] == PROBLEM
    body = r.json()
    assert body["type"] == f"/problems/{slug}"
    assert body["status"] == status and body["detail"] and body["instance"]
    for k, v in fields.items():
        assert body.get(k) == v, (k, body)
    return body


BAD_CSV = [
    ("broken quoting", 'source,target\na,b\n"c,d\n', {"line": 3}),
    ("missing column", "src,dst\na,b\n", {}),
    ("unknown column", "source,target,colour\na,b,red\n", {"column": "colour"}),
    ("weight not a number", "source,target,weight\na,b,1\nb,c,lots\n", {"line": 3, "column": "weight"}),
    ("weight NaN", "source,target,weight\na,b,NaN\n", {"line": 2, "column": "weight"}),
    ("negative weight", "source,target,weight\na,b,-2\n", {"line": 2, "column": "weight"}),
    ("probability above 1", "source,target,probability\na,b,1.5\n", {"line": 2, "column": "probability"}),
    ("self-loop", "source,target\na,b\nc,c\n", {"line": 3}),
    ("wrong field count", "source,target\na,b,c\n", {"line": 2}),
    ("empty id", "source,target\na,\n", {"line": 2}),
]


@pytest.mark.parametrize("case,body,fields", BAD_CSV, ids=[c[0] for c in BAD_CSV])
async def test_bad_csv_is_a_problem_and_leaves_no_trace(client, case, body, fields) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client)
    await assert_problem(await upload(client, gid, body), 422, "invalid-upload", **fields)
    assert await versions(client, gid) == []
    assert (await client.get(f"/v1/graphs/{gid}")).json()["latest_version"] is None


async def test_empty_upload_and_header_only(client) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client)
    await assert_problem(await upload(client, gid, ""), 422, "empty-upload")
    await assert_problem(await upload(client, gid, "source,target\n"), 422, "empty-upload")
    assert await versions(client, gid) == []


async def test_self_loops_allowed_when_declared(client) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client, allow_self_loops=True)
    r = await upload(client, gid, "source,target\na,a\na,b\n")
    assert r.status_code == 201 and r.json()["summary"]["self_loops"] == 1


async def test_graphml_with_dtd_or_entities_refused(client) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client)
    laughs = """<?xml version="1.0"?>
<!DOCTYPE lolz [<!ENTITY lol "lol"><!ENTITY lol2 "&lol;&lol;&lol;&lol;&lol;&lol;&lol;&lol;">]>
<graphml xmlns="http://graphml.graphdrawing.org/xmlns"><graph edgedefault="undirected">
<node id="&lol2;"/></graph></graphml>"""
    await assert_problem(await upload(client, gid, laughs, "application/graphml+xml"), 422, "unsafe-xml")
    assert await versions(client, gid) == []


async def test_unsupported_media_type_and_oversized_body(client) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client)
    await assert_problem(await upload(client, gid, "x", "image/png"), 415, "unsupported-media-type")
    client.app.state.settings.max_upload_bytes = 64  # type: ignore[attr-defined]
    body = "source,target\n" + "".join(f"n{i},n{i + 1}\n" for i in range(50))
    await assert_problem(await upload(client, gid, body), 413, "payload-too-large")
    assert await versions(client, gid) == []


async def test_unknown_graph_upload_is_404(client) -> None:  # type: ignore[no-untyped-def]
    await assert_problem(await upload(client, "g_nope", "source,target\na,b\n"), 404, "not-found")


async def test_unicode_ids_round_trip(client) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client)
    r = await upload(client, gid, "source,target\nZoë Ångström,李雷\n李雷,\"O'Brien, Ann\"\n".encode())
    assert r.status_code == 201 and r.json()["nodes"] == 3


async def test_remove_before_any_version_is_a_problem(client) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client)
    await assert_problem(await upload(client, gid, "source,target\na,b\n", mode="remove"), 422, "invalid-upload")


async def test_idempotent_upload(client) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client)
    h = {"Idempotency-Key": "up-1", "Content-Type": "text/csv"}
    a = await client.post(f"/v1/graphs/{gid}/versions", content="source,target\na,b\n", headers=h)
    b = await client.post(f"/v1/graphs/{gid}/versions", content="source,target\na,b\n", headers=h)
    assert a.status_code == b.status_code == 201 and a.json() == b.json()
    c = await client.post(f"/v1/graphs/{gid}/versions", content="source,target\na,c\n", headers=h)
    await assert_problem(c, 409, "conflict")
    assert len(await versions(client, gid)) == 1
