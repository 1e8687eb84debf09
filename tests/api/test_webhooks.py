"""Webhooks over the ASGI app: subscribe, refuse unsafe URLs, deliver signed events with retry."""

from __future__ import annotations

import hashlib
import hmac
import json
from pathlib import Path

import pytest

from service.jobs.clock import FakeClock
from tests.conftest import make_settings
from tests.jobs.api_helpers import assert_problem, make_graph, run_worker_once, worker_for
from tests.jobs.test_webhooks import Receiver

pytestmark = pytest.mark.anyio


@pytest.fixture
def db_url(sqlite_url: str) -> str:
    return sqlite_url


@pytest.fixture
def settings(db_url: str, tmp_path: Path):  # type: ignore[no-untyped-def]
    return make_settings(db_url, tmp_path, webhook_allow_loopback=True)


async def test_subscribe_list_read_delete(client) -> None:  # type: ignore[no-untyped-def]
    r = await client.post("/v1/webhooks", json={"url": "http://127.0.0.1:9/hook", "events": ["job.succeeded", "job.failed"]})
    assert r.status_code == 201, r.text
    hook = r.json()
    assert r.headers["location"] == f"/v1/webhooks/{hook['id']}"
    assert hook["secret"].startswith("whsec_") and len(hook["secret"]) > 30
    assert hook["events"] == ["job.failed", "job.succeeded"]
    listed = (await client.get("/v1/webhooks")).json()["items"]
    assert [h["id"] for h in listed] == [hook["id"]] and "secret" not in listed[0]
    assert "secret" not in (await client.get(f"/v1/webhooks/{hook['id']}")).json()
    assert (await client.get(f"/v1/webhooks/{hook['id']}/deliveries")).json()["items"] == []
    assert (await client.delete(f"/v1/webhooks/{hook['id']}")).status_code == 204
    assert_problem(await client.get(f"/v1/webhooks/{hook['id']}"), 404, "not-found")


async def test_unsafe_and_invalid_subscriptions_are_refused(client, settings) -> None:  # type: ignore[no-untyped-def]
    r = await client.post("/v1/webhooks", json={"url": "http://10.0.0.8/hook", "events": ["job.failed"]})
    assert assert_problem(r, 422, "unsafe-webhook-url")["field"] == "url"
    r = await client.post("/v1/webhooks", json={"url": "https://169.254.169.254/latest", "events": ["job.failed"]})
    assert_problem(r, 422, "unsafe-webhook-url")
    r = await client.post("/v1/webhooks", json={"url": "http://127.0.0.1:9/hook", "events": ["job.exploded"]})
    assert_problem(r, 422, "validation-error")
    r = await client.post("/v1/webhooks", json={"url": "http://127.0.0.1:9/hook", "events": []})
    assert_problem(r, 422, "validation-error")
    r = await client.post("/v1/webhooks", json={"url": "http://127.0.0.1:9/hook", "events": ["job.failed"], "secret": "short"})
    assert_problem(r, 422, "validation-error")
    settings.webhook_allow_loopback = False
    r = await client.post("/v1/webhooks", json={"url": "http://127.0.0.1:9/hook", "events": ["job.failed"]})
    assert_problem(r, 422, "unsafe-webhook-url")


async def test_idempotent_subscription(client) -> None:  # type: ignore[no-untyped-def]
    body = {"url": "http://127.0.0.1:9/hook", "events": ["job.failed"]}
    h = {"Idempotency-Key": "hook-1"}
    a = await client.post("/v1/webhooks", json=body, headers=h)
    b = await client.post("/v1/webhooks", json=body, headers=h)
    assert (a.status_code, b.status_code) == (201, 200) and a.json() == b.json()
    r = await client.post("/v1/webhooks", json={**body, "events": ["job.succeeded"]}, headers=h)
    assert_problem(r, 409, "conflict")


async def test_job_success_is_delivered_signed_after_a_500(client) -> None:  # type: ignore[no-untyped-def]
    clock = FakeClock()
    client.app.state.clock = clock
    with Receiver([500, 200]) as receiver:
        hook = (await client.post("/v1/webhooks", json={"url": receiver.url, "events": ["job.succeeded"]})).json()
        gid = await make_graph(client)
        jid = (await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "profile"})).json()["id"]
        worker = worker_for(client, clock=clock)
        assert (await run_worker_once(worker)).status == "succeeded"  # type: ignore[union-attr]
        await run_worker_once(worker)  # nothing left: None
        import asyncio

        assert await asyncio.to_thread(worker.deliver_webhooks) == 1
        (d,) = (await client.get(f"/v1/webhooks/{hook['id']}/deliveries")).json()["items"]
        assert (d["status"], d["attempts"], d["last_status"], d["job_id"]) == ("pending", 1, 500, jid), d["last_error"]
        clock.advance(10)  # Source: default webhook_backoff_base_seconds = 10.
        assert await asyncio.to_thread(worker.deliver_webhooks) == 1
        (d,) = (await client.get(f"/v1/webhooks/{hook['id']}/deliveries")).json()["items"]
        assert (d["status"], d["attempts"], d["last_status"], d["next_attempt_at"]) == ("delivered", 2, 200, None)
        assert len(receiver.requests) == 2
        headers, body, _ = receiver.requests[-1]
    parts = dict(p.split("=", 1) for p in headers["bellwether-signature"].split(","))
    # Source: HMAC-SHA256(secret, f"{t}.{body}") per the documented scheme, computed here.
    mac = hmac.new(hook["secret"].encode(), f"{parts['t']}.".encode() + body, hashlib.sha256).hexdigest()
    assert hmac.compare_digest(mac, parts["v1"])
    event = json.loads(body)
    assert event["event"] == "job.succeeded" and event["id"] == d["id"]
    assert event["data"]["job"]["id"] == jid and event["data"]["job"]["result_url"] == f"/v1/jobs/{jid}/result"
