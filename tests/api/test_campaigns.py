"""Past campaigns over HTTP: create, upload a log once, read, list, delete; bad logs are 422s."""

from __future__ import annotations

from typing import Any

import httpx
import pytest

from tests.jobs.api_helpers import assert_problem, make_graph

pytestmark = pytest.mark.anyio

START = "2026-03-01T09:00:00Z"
GRAPH = "source,target\na,b\nb,c\nc,d\nd,e\ne,a\n"


@pytest.fixture
def db_url(sqlite_url: str) -> str:
    return sqlite_url


async def _campaign(client: httpx.AsyncClient, gid: str, **extra: Any) -> str:
    r = await client.post(f"/v1/graphs/{gid}/campaigns", json={"name": "spring", "started_at": START, **extra})
    assert r.status_code == 201, r.text
    assert r.headers["Location"] == f"/v1/graphs/{gid}/campaigns/{r.json()['id']}"
    return str(r.json()["id"])


async def _put(client: httpx.AsyncClient, gid: str, cid: str, body: str, ctype: str = "text/csv",
               **params: Any) -> httpx.Response:
    return await client.put(f"/v1/graphs/{gid}/campaigns/{cid}/log", content=body,
                            headers={"Content-Type": ctype}, params=params)


async def test_upload_reports_unknown_people_duplicates_and_seed_adoptions(client: httpx.AsyncClient) -> None:
    gid = await make_graph(client, GRAPH)
    cid = await _campaign(client, gid, channel="email")
    log = ("person,role,time,referred_by\n"
           "a,seed,2026-03-01T09:00:00Z,\n"
           "b,adopter,2026-03-01T15:00:00Z,a\n"
           "b,adopter,2026-03-02T15:00:00Z,a\n"   # duplicate adoption
           "a,adopter,2026-03-01T10:00:00Z,\n"    # adoption by a seed
           "zz,adopter,2026-03-01T20:00:00Z,b\n"  # not in the graph
           "c,adopter,2026-02-28T09:00:00Z,\n")   # before the start, but after no seed: refused below
    r = await _put(client, gid, cid, log)
    body = assert_problem(r, 422, "invalid-parameter")
    assert "out of order" in body["detail"] and body["line"] == 7
    cid = await _campaign(client, gid)
    r = await _put(client, gid, cid, log.replace("2026-02-28T09:00:00Z", "2026-03-01T12:00:00Z"))
    assert r.status_code == 200, r.text
    out = r.json()
    assert out["version"] == 1 and out["uploaded_at"]
    assert out["log"]["people"] == 4 and out["log"]["seeds"] == 1 and out["log"]["adopters"] == 3
    assert out["log"]["unknown"] == {"count": 1, "ids": ["zz"]}
    codes = {w["code"]: w for w in out["warnings"]}
    assert codes["duplicate_adoptions"]["ids"] == ["b"]
    assert codes["adoptions_by_seeds"]["ids"] == ["a"]
    assert codes["unknown_people"]["count"] == 1 and codes["unknown_people"]["message"].startswith("1 person ")
    # Immutable: the same file again answers the same; another file is a conflict.
    again = await _put(client, gid, cid, log.replace("2026-02-28T09:00:00Z", "2026-03-01T12:00:00Z"))
    assert again.status_code == 200 and again.json() == out
    assert_problem(await _put(client, gid, cid, "person,role,round\na,seed,0\nb,adopter,1\n"), 409, "conflict")
    listed = (await client.get(f"/v1/graphs/{gid}/campaigns")).json()["items"]
    assert cid in {c["id"] for c in listed} and len(listed) == 2
    assert (await client.get(f"/v1/graphs/{gid}/campaigns/{cid}")).json() == out
    assert (await client.delete(f"/v1/graphs/{gid}/campaigns/{cid}")).status_code == 204
    assert_problem(await client.get(f"/v1/graphs/{gid}/campaigns/{cid}"), 404, "not-found")


@pytest.mark.parametrize("ctype, body", [
    ("application/x-ndjson", '{"person": "a", "role": "seed", "round": 0}\n{"person": "b", "role": "adopter", "round": 1}\n'),
    ("application/json", '{"log": [{"person": "a", "role": "seed", "round": 0}, {"person": "b", "role": "adopter", "round": 2}]}'),
])
async def test_json_and_ndjson_logs_with_rounds(client: httpx.AsyncClient, ctype: str, body: str) -> None:
    gid = await make_graph(client, GRAPH)
    cid = await _campaign(client, gid)
    r = await _put(client, gid, cid, body, ctype)
    assert r.status_code == 200, r.text
    assert r.json()["log"]["timing"] == "round" and r.json()["log"]["people"] == 2


@pytest.mark.parametrize("log, words", [
    ("person,role,time\nb,adopter,2026-03-01T10:00:00Z\nc,adopter,2026-03-01T11:00:00Z\n", "no seeds"),
    ("person,role,time\na,seed,2026-03-01T10:00:00Z\n", "one adopter"),
    ("person,role,time\nx1,seed,1\nx2,adopter,2\nx3,adopter,3\na,adopter,4\n", "not in version 1"),
    ("person,role,time\na,seed,5\nb,adopter,2\n", "out of order"),
    ("person,role,time,round\na,seed,5,0\n", "not both"),
])
async def test_bad_logs_are_refused_and_nothing_is_stored(client: httpx.AsyncClient, log: str, words: str) -> None:
    gid = await make_graph(client, GRAPH)
    cid = await _campaign(client, gid)
    r = await _put(client, gid, cid, log)
    assert r.status_code == 422 and words in r.json()["detail"], r.text
    assert (await client.get(f"/v1/graphs/{gid}/campaigns/{cid}")).json()["uploaded_at"] is None


async def test_campaigns_are_tenant_and_graph_scoped(client: httpx.AsyncClient) -> None:
    gid = await make_graph(client, GRAPH)
    other = await make_graph(client, GRAPH)
    cid = await _campaign(client, gid)
    assert_problem(await client.get(f"/v1/graphs/{other}/campaigns/{cid}"), 404, "not-found")
    assert_problem(await _put(client, other, cid, "person,role,round\na,seed,0\n"), 404, "not-found")
    assert_problem(await _put(client, gid, cid, "<x/>", "application/xml"), 415, "unsupported-media-type")


async def test_idempotent_create(client: httpx.AsyncClient) -> None:
    gid = await make_graph(client, GRAPH)
    body = {"name": "autumn", "started_at": START}
    first = await client.post(f"/v1/graphs/{gid}/campaigns", json=body, headers={"Idempotency-Key": "k1"})
    again = await client.post(f"/v1/graphs/{gid}/campaigns", json=body, headers={"Idempotency-Key": "k1"})
    assert first.json() == again.json()
    assert len((await client.get(f"/v1/graphs/{gid}/campaigns")).json()["items"]) == 1
