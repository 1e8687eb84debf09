"""Graph resources and uploads over the ASGI app, on SQLite and PostgreSQL."""

from __future__ import annotations

import pytest

pytestmark = pytest.mark.anyio

PROBLEM = "application/problem+json"


async def make_graph(client, directed: bool = False, **extra) -> str:  # type: ignore[no-untyped-def]
    r = await client.post("/v1/graphs", json={"name": "test", "directed": directed, **extra})
    assert r.status_code == 201, r.text
    return r.json()["id"]


async def upload(client, gid: str, body: str | bytes, ctype: str = "text/csv", **params):  # type: ignore[no-untyped-def]
    return await client.post(
        f"/v1/graphs/{gid}/versions", params=params, content=body, headers={"Content-Type": ctype}
    )


async def test_create_list_read_delete_graph(client) -> None:  # type: ignore[no-untyped-def]
    r = await client.post("/v1/graphs", json={"name": "members", "directed": True, "description": "d"})
    assert r.status_code == 201
    g = r.json()
    assert r.headers["location"] == f"/v1/graphs/{g['id']}"
    assert g["latest_version"] is None and g["directed"] is True
    r = await client.get("/v1/graphs")
    assert [x["id"] for x in r.json()["items"]] == [g["id"]]
    assert (await client.get(f"/v1/graphs/{g['id']}")).json()["name"] == "members"
    assert (await client.delete(f"/v1/graphs/{g['id']}")).status_code == 204
    r = await client.get(f"/v1/graphs/{g['id']}")
    assert r.status_code == 404 and r.headers["content-type"] == PROBLEM
    assert r.json()["type"] == "/problems/not-found"


async def test_graph_list_paginates_with_cursor(client) -> None:  # type: ignore[no-untyped-def]
    ids = [await make_graph(client) for _ in range(5)]
    seen: list[str] = []
    cursor = None
    while True:
        params = {"limit": 2} | ({"cursor": cursor} if cursor else {})
        page = (await client.get("/v1/graphs", params=params)).json()
        seen += [x["id"] for x in page["items"]]
        cursor = page["next_cursor"]
        if not cursor:
            break
    assert sorted(seen) == sorted(ids) and len(seen) == 5
    r = await client.get("/v1/graphs", params={"cursor": "garbage!"})
    assert r.status_code == 422 and r.headers["content-type"] == PROBLEM


async def test_create_graph_validation_is_a_problem(client) -> None:  # type: ignore[no-untyped-def]
    r = await client.post("/v1/graphs", json={"name": "", "directed": "maybe"})
    assert r.status_code == 422 and r.headers["content-type"] == PROBLEM
    body = r.json()
    assert body["type"] == "/problems/validation-error" and body["errors"]
    r = await client.post("/v1/graphs", content=b"{not json", headers={"Content-Type": "application/json"})
    assert r.status_code == 422 and r.headers["content-type"] == PROBLEM


async def test_idempotent_graph_creation(client) -> None:  # type: ignore[no-untyped-def]
    h = {"Idempotency-Key": "abc-1"}
    body = {"name": "x", "directed": False}
    a = await client.post("/v1/graphs", json=body, headers=h)
    b = await client.post("/v1/graphs", json=body, headers=h)
    assert a.status_code == b.status_code == 201 and a.json()["id"] == b.json()["id"]
    c = await client.post("/v1/graphs", json={**body, "name": "y"}, headers=h)
    assert c.status_code == 409 and c.headers["content-type"] == PROBLEM
    assert len((await client.get("/v1/graphs")).json()["items"]) == 1


async def test_unknown_route_is_a_problem(client) -> None:  # type: ignore[no-untyped-def]
    r = await client.get("/v1/nothing-here")
    assert r.status_code == 404 and r.headers["content-type"] == PROBLEM
    r = await client.put("/v1/graphs")
    assert r.status_code == 405 and r.headers["content-type"] == PROBLEM


async def test_health_and_readiness(client) -> None:  # type: ignore[no-untyped-def]
    assert (await client.get("/healthz")).json() == {"status": "ok"}
    r = await client.get("/readyz")
    assert r.status_code == 200 and r.json()["migrations"]["current"] == r.json()["migrations"]["head"]
    doc = (await client.get("/openapi.json")).json()
    assert doc["openapi"].startswith("3.1")
