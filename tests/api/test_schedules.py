"""Schedules over the ASGI app: create, validate, fire with a fake clock, latest result with ETag."""

from __future__ import annotations

import asyncio
from datetime import UTC, datetime
from pathlib import Path

import pytest

import tests.jobs.kinds  # noqa: F401  (registers the test kinds in this process)
from service.jobs.clock import FakeClock
from tests.conftest import make_settings
from tests.jobs.api_helpers import assert_problem, make_graph, run_worker_once, upload_csv, worker_for

pytestmark = pytest.mark.anyio


@pytest.fixture
def db_url(sqlite_url: str) -> str:
    return sqlite_url


@pytest.fixture
def settings(db_url: str, tmp_path: Path):  # type: ignore[no-untyped-def]
    return make_settings(db_url, tmp_path)


async def test_create_read_list_delete(client) -> None:  # type: ignore[no-untyped-def]
    client.app.state.clock = FakeClock(datetime(2030, 1, 10, 12, 0, tzinfo=UTC))
    gid = await make_graph(client)
    r = await client.post(
        "/v1/schedules",
        json={"graph_id": gid, "cron": "0 2 * * *", "timezone": "Europe/Paris", "job": {"kind": "profile"}},
    )
    assert r.status_code == 201, r.text
    s = r.json()
    assert r.headers["location"] == f"/v1/schedules/{s['id']}"
    # Source: IANA tz database: Paris is UTC+1 in January, so 02:00 local is 01:00 UTC.
    assert s["next_run_at"] == "2030-01-11T01:00:00Z"
    assert s["job"] == {"kind": "profile", "params": {"random_seed": 0, "bfs_samples": None, "bootstrap": 0}, "version": None}
    assert (await client.get(f"/v1/schedules/{s['id']}")).json() == s
    assert [x["id"] for x in (await client.get("/v1/schedules")).json()["items"]] == [s["id"]]
    assert (await client.get("/v1/schedules", params={"graph_id": "g_other"})).json()["items"] == []
    r = await client.get(f"/v1/schedules/{s['id']}/latest")
    assert "no succeeded run" in assert_problem(r, 404, "result-not-ready")["detail"]
    assert (await client.delete(f"/v1/schedules/{s['id']}")).status_code == 204
    assert_problem(await client.get(f"/v1/schedules/{s['id']}"), 404, "not-found")


async def test_invalid_schedules_are_problems(client) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client)
    base = {"graph_id": gid, "cron": "0 2 * * *", "timezone": "UTC", "job": {"kind": "profile"}}
    cases = [
        ({"cron": "0 2 * *"}, 422, "invalid-schedule"),
        ({"cron": "99 2 * * *"}, 422, "invalid-schedule"),
        ({"timezone": "Atlantis/Capital"}, 422, "invalid-schedule"),
        ({"job": {"kind": "astrology"}}, 422, "unknown-kind"),
        ({"job": {"kind": "profile", "params": {"bootstrap": "many"}}}, 422, "invalid-parameter"),
        ({"job": {"kind": "profile", "version": 4}}, 422, "invalid-parameter"),
        ({"graph_id": "g_missing"}, 404, "not-found"),
        ({"extra": 1}, 422, "validation-error"),
    ]
    for change, code, slug in cases:
        assert_problem(await client.post("/v1/schedules", json={**base, **change}), code, slug)
    assert (await client.get("/v1/schedules")).json()["items"] == []


async def test_schedule_fires_and_latest_etag_changes_only_with_the_result(client) -> None:  # type: ignore[no-untyped-def]
    clock = FakeClock(datetime(2030, 1, 10, 12, 0, tzinfo=UTC))
    client.app.state.clock = clock
    gid = await make_graph(client)
    r = await client.post(
        "/v1/schedules", json={"graph_id": gid, "cron": "0 * * * *", "timezone": "UTC", "job": {"kind": "test_graph"}},
        headers={"Idempotency-Key": "sched-1"},
    )
    assert r.status_code == 201, r.text
    s = r.json()
    worker = worker_for(client, clock=clock)

    async def tick_and_run(at: datetime) -> None:
        clock.set(at)
        await asyncio.to_thread(worker.housekeep, purge=False)
        assert (await run_worker_once(worker)).status == "succeeded"  # type: ignore[union-attr]

    await tick_and_run(datetime(2030, 1, 10, 13, 0, 1, tzinfo=UTC))
    r = await client.get(f"/v1/schedules/{s['id']}/latest")
    assert r.status_code == 200 and r.headers["etag"].startswith('W/"')
    first = r.json()
    assert first["n"] == 4 and first["version"] == 1
    etag = r.headers["etag"]
    assert (await client.get(f"/v1/schedules/{s['id']}")).json()["next_run_at"] == "2030-01-10T14:00:00Z"
    # The next run on the same version gives the same result: still 304.
    await tick_and_run(datetime(2030, 1, 10, 14, 0, 1, tzinfo=UTC))
    r = await client.get(f"/v1/schedules/{s['id']}/latest", headers={"If-None-Match": etag})
    assert r.status_code == 304 and r.headers["etag"] == etag
    # A new version changes the result, so the ETag changes.
    await upload_csv(client, gid, "source,target\na,b\nb,c\nc,a\nc,d\nd,e\n")
    await tick_and_run(datetime(2030, 1, 10, 15, 0, 1, tzinfo=UTC))
    r = await client.get(f"/v1/schedules/{s['id']}/latest", headers={"If-None-Match": etag})
    assert r.status_code == 200 and r.headers["etag"] != etag
    assert r.json()["n"] == 5 and r.json()["version"] == 2 and r.json()["job_id"] != first["job_id"]
    jobs = (await client.get("/v1/jobs", params={"schedule_id": s["id"]})).json()["items"]
    assert len(jobs) == 3 and {j["status"] for j in jobs} == {"succeeded"}
    again = await client.post(
        "/v1/schedules", json={"graph_id": gid, "cron": "0 * * * *", "timezone": "UTC", "job": {"kind": "test_graph"}},
        headers={"Idempotency-Key": "sched-1"},
    )
    assert again.status_code == 200 and again.json()["id"] == s["id"]
