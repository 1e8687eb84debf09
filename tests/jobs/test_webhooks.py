"""Webhooks: URL safety, HMAC-SHA256 signatures, delivery with retry to a receiver on 127.0.0.1."""

from __future__ import annotations

import hashlib
import hmac
import json
import threading
import time
from collections.abc import Iterator
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer

import httpx
import pytest
from sqlalchemy.orm import Session, sessionmaker

from service.jobs import webhooks as wh
from service.jobs.clock import FakeClock
from service.jobs.errors import UnsafeWebhookUrl
from storage.repo import jobs as jr
from storage.repo import webhooks as wr


def fake_dns(table: dict[str, list[str]]):  # type: ignore[no-untyped-def]
    def resolve(host: str, port: int) -> list[str]:
        if host not in table:
            raise OSError("no such host")
        return table[host]

    return resolve


DNS = fake_dns(
    {
        "hooks.example.com": ["93.184.216.34"],
        "internal.example.com": ["10.1.2.3"],
        "mixed.example.com": ["93.184.216.34", "192.168.0.9"],
        "metadata.example.com": ["169.254.169.254"],
        "v6.example.com": ["2606:2800:220:1:248:1893:25c8:1946"],
        "mapped.example.com": ["::ffff:127.0.0.1"],
        "localhost": ["127.0.0.1", "::1"],
        "127.0.0.1": ["127.0.0.1"],
        "cgnat.example.com": ["100.64.1.1"],
    }
)


@pytest.mark.parametrize(
    "url",
    ["https://hooks.example.com/x", "https://hooks.example.com:8443/x?y=1", "https://v6.example.com/"],
)
def test_public_https_urls_are_accepted(url: str) -> None:
    wh.check_url(url, resolve=DNS)


@pytest.mark.parametrize(
    "url, why",
    [
        ("http://hooks.example.com/x", "https"),
        ("ftp://hooks.example.com/x", "https"),
        ("https://internal.example.com/", "not a public address"),
        ("https://mixed.example.com/", "not a public address"),
        ("https://metadata.example.com/", "not a public address"),
        ("https://mapped.example.com/", "not a public address"),
        ("https://cgnat.example.com/", "not a public address"),
        ("https://localhost/", "not a public address"),
        ("https://nowhere.example.com/", "does not resolve"),
        ("https://user:pw@hooks.example.com/", "credentials"),
        ("not a url", "https"),
    ],
)
def test_unsafe_urls_are_refused(url: str, why: str) -> None:
    with pytest.raises(UnsafeWebhookUrl, match=why):
        wh.check_url(url, resolve=DNS)


def test_loopback_only_when_allowed() -> None:
    with pytest.raises(UnsafeWebhookUrl):
        wh.check_url("http://127.0.0.1:9/hook", resolve=DNS)
    wh.check_url("http://127.0.0.1:9/hook", allow_loopback=True, resolve=DNS)
    wh.check_url("http://localhost:9/hook", allow_loopback=True, resolve=DNS)
    with pytest.raises(UnsafeWebhookUrl):  # loopback permission is not private permission
        wh.check_url("http://internal.example.com/", allow_loopback=True, resolve=DNS)


def test_signature_follows_the_documented_scheme() -> None:
    body = b'{"event":"job.succeeded"}'
    header = wh.signature_header("whsec_test", body, 1_700_000_000)
    # Source: the scheme in service/jobs/webhooks.py, recomputed here with hmac.
    expected = hmac.new(b"whsec_test", b"1700000000." + body, hashlib.sha256).hexdigest()
    assert header == f"t=1700000000,v1={expected}"
    assert wh.verify_signature("whsec_test", header, body, now=1_700_000_100)
    assert not wh.verify_signature("whsec_test", header, body, now=1_700_001_000)  # too old
    assert not wh.verify_signature("other", header, body, now=1_700_000_000)
    assert not wh.verify_signature("whsec_test", header, body + b" ", now=1_700_000_000)
    assert not wh.verify_signature("whsec_test", "garbage", body, now=1_700_000_000)


class Receiver:
    """A tiny HTTP server on 127.0.0.1 answering a scripted list of status codes."""

    def __init__(self, codes: list[int]) -> None:
        self.codes = list(codes)
        self.requests: list[tuple[dict[str, str], bytes, float]] = []
        outer = self

        class Handler(BaseHTTPRequestHandler):
            def do_POST(self) -> None:  # noqa: N802
                body = self.rfile.read(int(self.headers["Content-Length"]))
                outer.requests.append(({k.lower(): v for k, v in self.headers.items()}, body, time.time()))
                code = outer.codes.pop(0) if outer.codes else 200
                self.send_response(code)
                self.send_header("Content-Length", "2")
                self.end_headers()
                self.wfile.write(b"ok")

            def log_message(self, *args: object) -> None:
                pass

        self.server = ThreadingHTTPServer(("127.0.0.1", 0), Handler)
        self.url = f"http://127.0.0.1:{self.server.server_address[1]}/hook"
        self.thread = threading.Thread(target=self.server.serve_forever, args=(0.05,), daemon=True)

    def __enter__(self) -> Receiver:
        self.thread.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self.server.shutdown()
        self.server.server_close()


@pytest.fixture
def receiver() -> Iterator[Receiver]:
    with Receiver([500, 200]) as r:
        yield r


def test_delivery_retries_after_500_and_signs_each_attempt(
    maker: sessionmaker[Session], receiver: Receiver
) -> None:
    clock = FakeClock()
    secret = "whsec_" + "k" * 30
    with jr.write_session(maker) as db:
        hook = wr.add_webhook(db, tenant_id="t", url=receiver.url, events=["job.succeeded"], secret=secret, now=clock.now())
        wr.add_event(db, tenant_id="t", event="job.succeeded", job_id="j_1", payload={"job": {"id": "j_1"}}, now=clock.now())
        db.commit()
    policy = wh.DeliveryPolicy(timeout_seconds=5, max_attempts=3, backoff_base_seconds=10, allow_loopback=True)
    with httpx.Client() as client:
        assert wh.deliver_due(maker, client, policy, clock.now) == 1
        with maker() as db:
            (d,), _ = wr.list_deliveries(db, hook, limit=5)
            assert (d.status, d.attempts, d.last_status) == ("pending", 1, 500)
            # Source: DeliveryPolicy backoff: base 10 s after the first failed attempt.
            assert d.next_attempt_at == clock.now() + __import__("datetime").timedelta(seconds=10)
        clock.advance(9)
        assert wh.deliver_due(maker, client, policy, clock.now) == 0
        clock.advance(1)
        assert wh.deliver_due(maker, client, policy, clock.now) == 1
    with maker() as db:
        (d,), _ = wr.list_deliveries(db, hook, limit=5)
        assert (d.status, d.attempts, d.last_status, d.last_error) == ("delivered", 2, 200, None)
    assert len(receiver.requests) == 2
    for headers, body, received in receiver.requests:
        t, v1 = (p.split("=", 1)[1] for p in headers["bellwether-signature"].split(","))
        # Source: HMAC-SHA256(secret, f"{t}.{body}") as documented, computed here.
        assert v1 == hmac.new(secret.encode(), f"{t}.".encode() + body, hashlib.sha256).hexdigest()
        assert abs(int(t) - received) < 5  # signed with wall time, not the fake clock
        payload = json.loads(body)
        assert payload["event"] == "job.succeeded" and payload["data"]["job"]["id"] == "j_1"
        assert headers["bellwether-event"] == "job.succeeded" and headers["bellwether-delivery"] == payload["id"]


def test_delivery_gives_up_after_max_attempts(maker: sessionmaker[Session]) -> None:
    clock = FakeClock()
    with Receiver([500, 503, 500]) as r:
        with jr.write_session(maker) as db:
            hook = wr.add_webhook(db, tenant_id="t", url=r.url, events=["job.failed"], secret="s" * 20, now=clock.now())
            wr.add_event(db, tenant_id="t", event="job.failed", job_id="j_1", payload={}, now=clock.now())
            db.commit()
        policy = wh.DeliveryPolicy(max_attempts=2, backoff_base_seconds=1, allow_loopback=True)
        with httpx.Client() as client:
            wh.deliver_due(maker, client, policy, clock.now)
            clock.advance(1)
            wh.deliver_due(maker, client, policy, clock.now)
            clock.advance(100)
            assert wh.deliver_due(maker, client, policy, clock.now) == 0
    with maker() as db:
        (d,), _ = wr.list_deliveries(db, hook, limit=5)
        assert (d.status, d.attempts, d.last_status) == ("failed", 2, 503)


def test_delivery_to_a_refused_address_is_logged_not_sent(maker: sessionmaker[Session]) -> None:
    clock = FakeClock()
    with jr.write_session(maker) as db:
        hook = wr.add_webhook(db, tenant_id="t", url="http://127.0.0.1:9/x", events=["job.failed"], secret="s" * 20, now=clock.now())
        wr.add_event(db, tenant_id="t", event="job.failed", job_id="j_1", payload={}, now=clock.now())
        db.commit()
    with httpx.Client() as client:
        wh.deliver_due(maker, client, wh.DeliveryPolicy(max_attempts=1), clock.now)
    with maker() as db:
        (d,), _ = wr.list_deliveries(db, hook, limit=5)
        assert d.status == "failed" and d.last_status is None and (d.last_error or "").startswith("refused")
