"""Jobs over the ASGI app (SQLite): create, validate, long-poll, cancel, results, idempotency, lists."""

from __future__ import annotations

import asyncio
import time
from pathlib import Path

import networkx as nx
import pytest

import tests.jobs.kinds  # noqa: F401  (registers the test kinds in this process)
from storage.repo import jobs as jr
from tests.conftest import make_settings
from tests.jobs.api_helpers import PROBLEM, assert_problem, make_graph, run_worker_once, worker_for

pytestmark = pytest.mark.anyio


@pytest.fixture
def db_url(sqlite_url: str) -> str:
    return sqlite_url


@pytest.fixture
def settings(db_url: str, tmp_path: Path):  # type: ignore[no-untyped-def]
    return make_settings(db_url, tmp_path, wait_max_seconds=5.0, job_max_queued_per_tenant=50)


async def test_profile_job_end_to_end(client) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client, "source,target\na,b\nb,c\nc,a\nc,d\nd,e\n")
    r = await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "profile", "params": {"random_seed": 7}})
    assert r.status_code == 202, r.text
    job = r.json()
    assert r.headers["location"] == f"/v1/jobs/{job['id']}" == job["url"]
    assert (job["status"], job["version"], job["progress"], job["kind"]) == ("queued", 1, 0.0, "profile")
    assert job["params"] == {"random_seed": 7, "bfs_samples": None, "bootstrap": 0}
    outcome = await run_worker_once(worker_for(client))
    assert outcome is not None and outcome.status == "succeeded", outcome
    r = await client.get(f"/v1/jobs/{job['id']}")
    assert r.json()["status"] == "succeeded" and r.json()["progress"] == 1.0
    r = await client.get(job["url"] + "/result")
    assert r.status_code == 200 and r.headers["etag"].startswith('"')
    result = r.json()
    assert (result["job_id"], result["graph_id"], result["version"], result["kind"]) == (job["id"], gid, 1, "profile")
    assert result["random_seed"] == 7 and result["params"]["random_seed"] == 7
    g = nx.Graph([("a", "b"), ("b", "c"), ("c", "a"), ("c", "d"), ("d", "e")])
    # Source: NetworkX nx.average_clustering and nx.degree_assortativity_coefficient, computed here.
    # The answer carries four significant digits.
    assert result["clustering"]["average"] == pytest.approx(nx.average_clustering(g), rel=1e-3)
    assert result["assortativity"] == pytest.approx(nx.degree_assortativity_coefficient(g), rel=1e-3)
    r2 = await client.get(job["url"] + "/result", headers={"If-None-Match": r.headers["etag"]})
    assert r2.status_code == 304 and r2.headers["etag"] == r.headers["etag"] and r2.content == b""


async def test_job_creation_validation_problems(client) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client)
    empty = await make_graph(client, csv=None)
    r = await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "astrology", "params": {}})
    assert "profile" in assert_problem(r, 422, "unknown-kind")["detail"]
    r = await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "profile", "params": {"bootstrap": -1, "x": 1}})
    body = assert_problem(r, 422, "invalid-parameter")
    assert sorted(tuple(e["loc"]) for e in body["errors"]) == [("params", "bootstrap"), ("params", "x")]
    r = await client.post("/v1/graphs/g_nope/jobs", json={"kind": "profile"})
    assert_problem(r, 404, "not-found")
    r = await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "profile", "version": 9})
    assert "newest is 1" in assert_problem(r, 422, "invalid-parameter")["detail"]
    r = await client.post(f"/v1/graphs/{empty}/jobs", json={"kind": "profile"})
    assert "no versions" in assert_problem(r, 422, "invalid-parameter")["detail"]
    r = await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "profile", "colour": "red"})
    assert_problem(r, 422, "validation-error")
    r = (await client.get("/v1/jobs")).json()
    assert r["items"] == []  # nothing was queued by any of these


async def test_idempotent_repost(client) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client)
    body = {"kind": "profile", "params": {"random_seed": 1}}
    h = {"Idempotency-Key": "nightly-2030-01-01"}
    first = await client.post(f"/v1/graphs/{gid}/jobs", json=body, headers=h)
    again = await client.post(f"/v1/graphs/{gid}/jobs", json=body, headers=h)
    assert first.status_code == 202 and again.status_code == 200
    assert first.json()["id"] == again.json()["id"] and again.headers["location"] == first.headers["location"]
    r = await client.post(f"/v1/graphs/{gid}/jobs", json={**body, "params": {"random_seed": 2}}, headers=h)
    assert assert_problem(r, 409, "conflict")["job_id"] == first.json()["id"]
    assert len((await client.get("/v1/jobs")).json()["items"]) == 1


async def test_long_poll_returns_when_done_and_does_not_block(client) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client)
    jid = (await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "profile"})).json()["id"]
    t = time.monotonic()
    r = await client.get(f"/v1/jobs/{jid}", params={"wait": 0.3})
    assert r.json()["status"] == "queued" and 0.25 < time.monotonic() - t < 3

    async def health_latency() -> float:
        await asyncio.sleep(0.1)
        t0 = time.monotonic()
        assert (await client.get("/healthz")).status_code == 200
        return time.monotonic() - t0

    async def finish_later() -> None:
        await asyncio.sleep(0.3)
        await run_worker_once(worker_for(client))

    t = time.monotonic()
    polled, latency, _ = await asyncio.gather(
        client.get(f"/v1/jobs/{jid}", params={"wait": 30}), health_latency(), finish_later()
    )
    assert polled.json()["status"] == "succeeded"
    assert time.monotonic() - t < 4  # returned on completion, not at the cap (5 s)
    assert latency < 1.0  # the event loop stayed free while the poll waited
    r = await client.get(f"/v1/jobs/{jid}", params={"wait": -1})
    assert_problem(r, 422, "validation-error")


async def test_cancel_queued_running_and_finished(client) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client)
    post = lambda: client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "profile"})  # noqa: E731
    queued = (await post()).json()["id"]
    r = await client.post(f"/v1/jobs/{queued}/cancel")
    assert r.status_code == 200 and r.json()["status"] == "cancelled"
    assert (await client.post(f"/v1/jobs/{queued}/cancel")).status_code == 200
    r = await client.get(f"/v1/jobs/{queued}/result")
    assert "cancelled" in assert_problem(r, 404, "result-not-ready")["detail"]
    running = (await post()).json()["id"]
    maker = client.app.state.sessionmaker
    with jr.write_session(maker) as db:
        from datetime import UTC, datetime

        assert jr.claim_next(db, "elsewhere", 30, datetime.now(UTC)).id == running  # type: ignore[union-attr]
        db.commit()
    r = await client.post(f"/v1/jobs/{running}/cancel")
    assert r.status_code == 202 and r.json()["status"] == "running" and r.json()["cancel_requested"] is True
    r = await client.get(f"/v1/jobs/{running}/result")
    assert "still running" in assert_problem(r, 404, "result-not-ready")["detail"]
    done = (await post()).json()["id"]
    await run_worker_once(worker_for(client))
    r = await client.post(f"/v1/jobs/{done}/cancel")
    assert "succeeded" in assert_problem(r, 409, "conflict")["detail"]
    assert_problem(await client.post("/v1/jobs/j_missing/cancel"), 404, "not-found")


async def test_failed_job_shows_its_problem(client) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client)
    jid = (await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "test_fail", "params": {"error": "invalid"}})).json()["id"]
    await run_worker_once(worker_for(client))
    job = (await client.get(f"/v1/jobs/{jid}")).json()
    assert job["status"] == "failed" and job["error"]["type"] == "/problems/invalid-parameter"
    assert job["error"]["field"] == "alpha" and job["result_url"] is None
    assert "failed" in assert_problem(await client.get(f"/v1/jobs/{jid}/result"), 404, "result-not-ready")["detail"]


async def test_list_filters_pagination_and_tenancy(client) -> None:  # type: ignore[no-untyped-def]
    g1, g2 = await make_graph(client), await make_graph(client)
    ids = [(await client.post(f"/v1/graphs/{g}/jobs", json={"kind": k})).json()["id"]
           for g, k in [(g1, "profile"), (g1, "test_graph"), (g2, "profile"), (g2, "profile")]]
    seen, cursor = [], None
    while True:
        page = (await client.get("/v1/jobs", params={"limit": 3, **({"cursor": cursor} if cursor else {})})).json()
        seen += [j["id"] for j in page["items"]]
        cursor = page["next_cursor"]
        if not cursor:
            break
    assert seen == ids[::-1]
    r = await client.get("/v1/jobs", params={"graph_id": g1, "kind": "profile"})
    assert [j["id"] for j in r.json()["items"]] == [ids[0]]
    assert len((await client.get("/v1/jobs", params={"status": "queued"})).json()["items"]) == 4
    assert (await client.get("/v1/jobs", params={"status": "succeeded"})).json()["items"] == []
    assert_problem(await client.get("/v1/jobs", params={"status": "done"}), 422, "validation-error")
    assert_problem(await client.get("/v1/jobs", params={"cursor": "%%%"}), 422, "invalid-parameter")
    # Another tenant's job is not found, not forbidden.
    from datetime import UTC, datetime

    with jr.write_session(client.app.state.sessionmaker) as db:
        other, _ = jr.add_job(db, tenant_id="other", graph_id=None, version=None, kind="profile", params={}, now=datetime.now(UTC))
        db.commit()
    assert_problem(await client.get(f"/v1/jobs/{other.id}"), 404, "not-found")
    assert other.id not in [j["id"] for j in (await client.get("/v1/jobs")).json()["items"]]


async def test_queue_limit_per_tenant(client, settings) -> None:  # type: ignore[no-untyped-def]
    settings.job_max_queued_per_tenant = 2
    gid = await make_graph(client)
    for _ in range(2):
        assert (await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "profile"})).status_code == 202
    r = await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "profile"})
    assert_problem(r, 429, "too-many-jobs")
    assert r.headers["retry-after"] == "30"


async def test_job_kinds_list_params_schemas(client) -> None:  # type: ignore[no-untyped-def]
    r = await client.get("/v1/job-kinds")
    kinds = {k["name"]: k for k in r.json()["items"]}
    assert "profile" in kinds
    assert set(kinds["profile"]["params_schema"]["properties"]) == {"random_seed", "bfs_samples", "bootstrap"}
    assert kinds["profile"]["params_schema"]["additionalProperties"] is False
    assert r.headers["content-type"] != PROBLEM
