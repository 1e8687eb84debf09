"""Webhooks over the ASGI app: subscribe, refuse unsafe URLs, rotate secrets, deliver signed events with retry."""

from __future__ import annotations

import base64
import json
from datetime import datetime, timedelta
from pathlib import Path

import pytest
from standardwebhooks import Webhook as Verifier

from service.jobs.clock import FakeClock
from tests.conftest import make_settings
from tests.jobs.api_helpers import assert_problem, make_graph, run_worker_once, worker_for
from tests.jobs.test_webhooks import Receiver

pytestmark = pytest.mark.anyio


def readme_verify():  # type: ignore[no-untyped-def]
    """The ``verify`` function of the README's webhook snippet, executed as printed."""
    text = (Path(__file__).resolve().parents[2] / "README.md").read_text(encoding="utf-8")
    blocks = [b.split("\n", 1)[1] for b in text.split("```python")[1:]]
    (code,) = [b.split("```", 1)[0] for b in blocks if "standardwebhooks" in b]
    scope: dict[str, object] = {}
    exec(code, scope)  # noqa: S102 - our own documentation
    return scope["verify"]


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
    assert hook["secret"].startswith("whsec_") and len(base64.b64decode(hook["secret"][6:], validate=True)) == 32
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
    for secret in ("short", "s" * 40, "whsec_" + base64.b64encode(b"k" * 8).decode()):
        r = await client.post("/v1/webhooks", json={"url": "http://127.0.0.1:9/hook", "events": ["job.failed"], "secret": secret})
        assert "whsec_" in json.dumps(assert_problem(r, 422, "validation-error")["errors"]) or "24 to 64" in r.text
    chosen = "whsec_" + base64.b64encode(b"k" * 24).decode()
    r = await client.post("/v1/webhooks", json={"url": "http://127.0.0.1:9/hook", "events": ["job.failed"], "secret": chosen})
    assert r.status_code == 201 and r.json()["secret"] == chosen
    settings.webhook_allow_loopback = False
    r = await client.post("/v1/webhooks", json={"url": "http://127.0.0.1:9/hook", "events": ["job.failed"]})
    assert "127.0.0.1 is a loopback address" in assert_problem(r, 422, "unsafe-webhook-url")["detail"]


@pytest.mark.parametrize(
    "url, detail, address",
    [
        ("https://[2002:7f00:1::1]/", "2002:7f00:1::1 is a 6to4 address wrapping 127.0.0.1 (a loopback address)",
         "2002:7f00:1::1"),
        ("https://[64:ff9b::a00:1]/", "64:ff9b::a00:1 is a NAT64 address wrapping 10.0.0.1 (a private address)",
         "64:ff9b::a00:1"),
        ("https://[::ffff:169.254.169.254]/", "wrapping 169.254.169.254 (a link-local address)", "::ffff:a9fe:a9fe"),
        ("https://8.8.8.8:0/", "port 0 cannot be connected to", None),
    ],
)
async def test_embedded_ipv4_and_port_0_are_refused(client, url: str, detail: str, address: str | None) -> None:  # type: ignore[no-untyped-def]
    r = await client.post("/v1/webhooks", json={"url": url, "events": ["job.failed"]})
    body = assert_problem(r, 422, "unsafe-webhook-url")
    assert detail in body["detail"] and body["field"] == "url" and body.get("address") == address


async def test_rotate_secret_shows_the_new_one_once_and_keeps_the_old_for_the_overlap(client) -> None:  # type: ignore[no-untyped-def]
    clock = FakeClock()
    client.app.state.clock = clock
    hook = (await client.post("/v1/webhooks", json={"url": "http://127.0.0.1:9/hook", "events": ["job.failed"]})).json()
    r = await client.post(f"/v1/webhooks/{hook['id']}/rotate-secret")
    assert r.status_code == 200, r.text
    rotated = r.json()
    assert rotated["id"] == hook["id"] and rotated["secret"].startswith("whsec_") and rotated["secret"] != hook["secret"]
    # Source: default webhook_secret_overlap_seconds = 86400 (24 h), from the injected clock.
    expires = clock.now() + timedelta(hours=24)
    assert datetime.fromisoformat(rotated["previous_secret_expires_at"]) == expires
    read = (await client.get(f"/v1/webhooks/{hook['id']}")).json()
    assert datetime.fromisoformat(read["previous_secret_expires_at"]) == expires
    assert "secret" not in read and rotated["secret"] not in json.dumps(read)
    r = await client.post(f"/v1/webhooks/{hook['id']}/rotate-secret", json={"overlap_seconds": 0})
    assert r.status_code == 200 and r.json()["previous_secret_expires_at"] is None
    assert_problem(await client.post(f"/v1/webhooks/{hook['id']}/rotate-secret", json={"overlap_seconds": -1}), 422, "validation-error")
    assert_problem(await client.post(f"/v1/webhooks/{hook['id']}/rotate-secret", json={"overlap_seconds": 8 * 86400}), 422, "validation-error")
    assert_problem(await client.post(f"/v1/webhooks/{hook['id']}/rotate-secret", json={"overlap": 1}), 422, "validation-error")
    assert_problem(await client.post("/v1/webhooks/wh_nope/rotate-secret"), 404, "not-found")


async def test_a_retried_rotation_with_the_same_key_does_not_rotate_twice(client) -> None:  # type: ignore[no-untyped-def]
    hook = (await client.post("/v1/webhooks", json={"url": "http://127.0.0.1:9/hook", "events": ["job.failed"]})).json()
    h = {"Idempotency-Key": "rotate-1"}
    a = await client.post(f"/v1/webhooks/{hook['id']}/rotate-secret", headers=h)
    b = await client.post(f"/v1/webhooks/{hook['id']}/rotate-secret", headers=h)
    assert (a.status_code, b.status_code) == (200, 200) and a.json() == b.json()
    other = await client.post(f"/v1/webhooks/{hook['id']}/rotate-secret", headers=h, json={"overlap_seconds": 60})
    assert_problem(other, 409, "conflict")
    c = await client.post(f"/v1/webhooks/{hook['id']}/rotate-secret", headers={"Idempotency-Key": "rotate-2"})
    assert c.json()["secret"] not in (a.json()["secret"], hook["secret"])


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
        receiver.secret = hook["secret"]  # the receiver now verifies each delivery as it arrives
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
        assert len(receiver.requests) == 2 and receiver.rejected == []
        headers, body, _ = receiver.requests[-1]
    # Source: standardwebhooks, the specification's reference library, verifying as a receiver would.
    event = Verifier(hook["secret"]).verify(body, headers)
    assert readme_verify()(hook["secret"], headers, body) == event  # the README's snippet, run as printed
    assert headers["webhook-id"] == d["id"] == receiver.requests[0][0]["webhook-id"]
    assert event["event"] == "job.succeeded" and event["id"] == d["id"]
    assert event["data"]["job"]["id"] == jid and event["data"]["job"]["result_url"] == f"/v1/jobs/{jid}/result"


async def test_url_outside_the_declared_form_is_refused_with_why(client) -> None:  # type: ignore[no-untyped-def]
    # The document declares the URL form (host name, port 1 to 65535), and the service refuses
    # exactly what falls outside it: an IPv6 literal even when public (2001:4860:4860::8888 is a
    # public resolver's address, from memory; any global address serves), and a URL that is no URL.
    doc = (await client.get("/openapi.json")).json()
    assert doc["components"]["schemas"]["WebhookCreate"]["properties"]["url"]["pattern"].startswith("^https?://")
    r = await client.post("/v1/webhooks", json={"url": "https://[2001:4860:4860::8888]/h", "events": ["job.failed"]})
    body = assert_problem(r, 422, "unsafe-webhook-url")
    assert "name the receiver's host by its domain name" in body["detail"] and body["address"] == "2001:4860:4860::8888"
    r = await client.post("/v1/webhooks", json={"url": "https://exa mple.com/h", "events": ["job.failed"]})
    assert "absolute http(s) URL" in assert_problem(r, 422, "validation-error")["detail"]
