"""Webhooks: URL safety, Standard Webhooks signatures, pinned delivery with retry to a receiver on 127.0.0.1.

Signatures are checked with the specification's reference library
(``standardwebhooks``), the one a receiver would use.
"""

from __future__ import annotations

import base64
import ipaddress
import json
import ssl
import subprocess
import threading
import time
from datetime import UTC, datetime, timedelta
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from pathlib import Path
from typing import Any

import httpx
import pytest
from sqlalchemy.orm import Session, sessionmaker
from standardwebhooks import Webhook as Verifier
from standardwebhooks import WebhookVerificationError

from service.jobs import webhooks as wh
from service.jobs.clock import FakeClock
from service.jobs.errors import UnsafeWebhookUrl
from storage.models import Webhook as WebhookRow
from storage.repo import jobs as jr
from storage.repo import webhooks as wr


def fake_dns(table: dict[str, list[str]], calls: list[str] | None = None):  # type: ignore[no-untyped-def]
    """A resolver from a table; address literals resolve to themselves, as getaddrinfo does."""

    def resolve(host: str, port: int) -> list[str]:
        if calls is not None:
            calls.append(host)
        try:
            return [str(ipaddress.ip_address(host))]
        except ValueError:
            pass
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
        "sixtofour.example.com": ["2002:7f00:1::1"],
        "localhost": ["127.0.0.1", "::1"],
        "cgnat.example.com": ["100.64.1.1"],
    }
)


@pytest.mark.parametrize(
    "url, addresses",
    [
        ("https://hooks.example.com/x", ("93.184.216.34",)),
        ("https://hooks.example.com:8443/x?y=1", ("93.184.216.34",)),
        ("https://v6.example.com/", ("2606:2800:220:1:248:1893:25c8:1946",)),
        # 6to4 and NAT64 forms of the public 8.8.8.8 are judged by the address they wrap.
        ("https://[2002:808:808::1]/", ("2002:808:808::1",)),
        ("https://[64:ff9b::808:808]/", ("64:ff9b::808:808",)),
    ],
)
def test_public_https_urls_are_accepted_with_their_addresses(url: str, addresses: tuple[str, ...]) -> None:
    checked = wh.check_url(url, resolve=DNS)
    assert checked.addresses == addresses and checked.scheme == "https"


@pytest.mark.parametrize(
    "url, why",
    [
        ("http://hooks.example.com/x", "must use https"),
        ("ftp://hooks.example.com/x", "absolute https"),
        ("https://internal.example.com/", "resolves to 10.1.2.3, which is a private address"),
        ("https://mixed.example.com/", "resolves to 192.168.0.9, which is a private address"),
        ("https://metadata.example.com/", "169.254.169.254, which is a link-local address"),
        ("https://mapped.example.com/", r"::ffff:7f00:1, which is an IPv4-mapped address wrapping 127.0.0.1 \(a loopback"),
        ("https://sixtofour.example.com/", r"2002:7f00:1::1, which is a 6to4 address wrapping 127.0.0.1 \(a loopback"),
        ("https://cgnat.example.com/", "100.64.1.1, which is a shared"),
        ("https://localhost/", "127.0.0.1, which is a loopback address"),
        # Address literals: every IPv6 form that embeds an IPv4 address is unwrapped first.
        ("https://[2002:7f00:1::1]/", r"2002:7f00:1::1 is a 6to4 address wrapping 127.0.0.1 \(a loopback address\)"),
        ("https://[::ffff:10.0.0.1]/", r"IPv4-mapped address wrapping 10.0.0.1 \(a private address\)"),
        ("https://[::7f00:1]/", r"IPv4-compatible address wrapping 127.0.0.1 \(a loopback address\)"),
        ("https://[64:ff9b::a9fe:a9fe]/", r"NAT64 address wrapping 169.254.169.254 \(a link-local"),
        ("https://[64:ff9b:1::808:808]/", "local-use NAT64 address"),
        # Teredo 2001:0:<server>:<flags>:<port>:<client>, client bits inverted (RFC 4380):
        # server 8.8.8.8, client ~0xf5ffffff = 10.0.0.0.
        ("https://[2001:0:808:808:0:0:f5ff:ffff]/", r"Teredo address wrapping 10.0.0.0 \(a private address\)"),
        ("https://[2001:0:808:808:0:0:f7f7:fbfb]/", r"Teredo address \(2001::/32\), which is not globally"),
        ("https://[::1]/", "::1 is a loopback address"),
        ("https://0.0.0.0/", "0.0.0.0 is the unspecified address"),
        ("https://224.0.0.1/", "224.0.0.1 is a multicast address"),
        ("https://240.0.0.1/", "240.0.0.1 is a reserved address"),
        ("https://192.0.2.1/", "192.0.2.1 is a special-purpose address that is not globally reachable"),
        ("https://[fd00::1]/", "fd00::1 is a private address"),
        ("https://8.8.8.8:0/", "port 0"),
        ("https://hooks.example.com:0/", "port 0"),
        ("https://hooks.example.com:70000/", "cannot be parsed"),
        ("https://nowhere.example.com/", "does not resolve"),
        ("https://user:pw@hooks.example.com/", "credentials"),
        ("not a url", "https"),
    ],
)
def test_unsafe_urls_are_refused_naming_the_address_and_why(url: str, why: str) -> None:
    with pytest.raises(UnsafeWebhookUrl, match=why) as info:
        wh.check_url(url, resolve=DNS)
    if "address" in why:
        assert info.value.data["address"] in info.value.reason


def test_loopback_only_when_allowed() -> None:
    with pytest.raises(UnsafeWebhookUrl):
        wh.check_url("http://127.0.0.1:9/hook", resolve=DNS)
    wh.check_url("http://127.0.0.1:9/hook", allow_loopback=True, resolve=DNS)
    wh.check_url("http://localhost:9/hook", allow_loopback=True, resolve=DNS)
    wh.check_url("http://mapped.example.com:9/hook", allow_loopback=True, resolve=DNS)
    with pytest.raises(UnsafeWebhookUrl):  # loopback permission is not private permission
        wh.check_url("http://internal.example.com/", allow_loopback=True, resolve=DNS)
    with pytest.raises(UnsafeWebhookUrl, match="port 0"):
        wh.check_url("http://127.0.0.1:0/hook", allow_loopback=True, resolve=DNS)


# -- signatures -------------------------------------------------------------------------

#: The signing example of the Standard Webhooks specification (from memory; the reference
#: library recomputes it below, so a wrong recollection fails the test).
SPEC_SECRET = "whsec_MfKQ9r8GKYqrTwjUPD8ILPZIo2LaLaSw"
SPEC_ID, SPEC_TS, SPEC_BODY = "msg_p5jXN8AQM9LWM0D4loKWxJek", 1614265330, b'{"test": 2432232314}'
SPEC_SIGNATURE = "v1,g0hM9SsE+OTPJTGt/tmIKtSyZlE3uFJELVlNIOLJ1OE="


def test_signature_matches_the_reference_library() -> None:
    # Source: standardwebhooks (the specification's reference library), computed here.
    ref = Verifier(SPEC_SECRET).sign(SPEC_ID, datetime.fromtimestamp(SPEC_TS, UTC), SPEC_BODY)
    assert ref == SPEC_SIGNATURE
    assert wh.sign(SPEC_SECRET, SPEC_ID, SPEC_TS, SPEC_BODY) == ref
    secret = wh.new_secret()
    assert secret.startswith("whsec_") and len(wh.secret_key(secret)) == 32
    ts = int(time.time())
    body = b'{"event":"job.succeeded"}'
    headers = {"webhook-id": "whd_1", "webhook-timestamp": str(ts),
               "webhook-signature": wh.signature_header([secret], "whd_1", ts, body)}
    assert Verifier(secret).verify(body, headers) == {"event": "job.succeeded"}
    for bad in ({**headers, "webhook-id": "whd_2"}, {**headers, "webhook-timestamp": str(ts + 1)}):
        with pytest.raises(WebhookVerificationError):
            Verifier(secret).verify(body, bad)
    with pytest.raises(WebhookVerificationError):
        Verifier(wh.new_secret()).verify(body, headers)
    with pytest.raises(WebhookVerificationError):
        Verifier(secret).verify(body + b" ", headers)


def test_both_secrets_sign_during_the_overlap_only() -> None:
    clock = FakeClock()
    old, new = wh.new_secret(), wh.new_secret()
    hook = WebhookRow(secret=new, previous_secret=old, previous_secret_expires_at=clock.now() + timedelta(hours=24))
    assert wh.signing_secrets(hook, clock.now()) == [new, old]
    header = wh.signature_header(wh.signing_secrets(hook, clock.now()), "whd_1", 1_700_000_000, b"{}")
    assert header.count("v1,") == 2 and header.split(" ")[1] == wh.sign(old, "whd_1", 1_700_000_000, b"{}")
    clock.advance(24 * 3600)
    assert wh.signing_secrets(hook, clock.now()) == [new]


@pytest.mark.parametrize(
    "secret, why",
    [
        ("s" * 40, "whsec_"),
        ("whsec_not base64!", "base64"),
        ("whsec_" + base64.b64encode(b"x" * 16).decode(), "24 to 64"),
        ("whsec_" + base64.b64encode(b"x" * 65).decode(), "24 to 64"),
    ],
)
def test_chosen_secrets_must_have_the_standard_form(secret: str, why: str) -> None:
    with pytest.raises(ValueError, match=why):
        wh.check_secret(secret)


def test_a_secret_carried_over_from_the_old_scheme_still_signs() -> None:
    # The migration turns an old secret s into whsec_ + base64(s): the HMAC key stays s.
    old = "hunter2-but-longer"
    carried = "whsec_" + base64.b64encode(old.encode()).decode()
    assert wh.secret_key(carried) == old.encode()
    wh.sign(carried, "whd_1", 1, b"{}")  # any length signs; only chosen secrets are held to 24..64 bytes


# -- delivery ---------------------------------------------------------------------------


class Receiver:
    """A tiny HTTP(S) server on 127.0.0.1 answering a scripted list of status codes."""

    def __init__(
        self, codes: list[int], *, tls: ssl.SSLContext | None = None, host: str = "127.0.0.1", secret: str | None = None
    ) -> None:
        self.codes = list(codes)
        self.requests: list[tuple[dict[str, str], bytes, float]] = []
        #: With a secret, the receiver verifies each delivery with the reference library as it
        #: arrives and answers 400 to one that does not verify.
        self.secret = secret
        self.rejected: list[str] = []
        outer = self

        class Handler(BaseHTTPRequestHandler):
            def do_POST(self) -> None:  # noqa: N802
                body = self.rfile.read(int(self.headers["Content-Length"]))
                headers = {k.lower(): v for k, v in self.headers.items()}
                outer.requests.append((headers, body, time.time()))
                code = outer.codes.pop(0) if outer.codes else 200
                if outer.secret is not None:
                    try:
                        Verifier(outer.secret).verify(body, headers)
                    except WebhookVerificationError as exc:
                        outer.rejected.append(str(exc))
                        code = 400
                self.send_response(code)
                self.send_header("Content-Length", "2")
                self.end_headers()
                self.wfile.write(b"ok")

            def log_message(self, *args: object) -> None:
                pass

        self.server = ThreadingHTTPServer(("127.0.0.1", 0), Handler)
        if tls is not None:
            self.server.socket = tls.wrap_socket(self.server.socket, server_side=True)
        self.port = self.server.server_address[1]
        self.url = f"{'https' if tls else 'http'}://{host}:{self.port}/hook"
        self.thread = threading.Thread(target=self.server.serve_forever, args=(0.05,), daemon=True)

    def __enter__(self) -> Receiver:
        self.thread.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self.server.shutdown()
        self.server.server_close()


def verified(secret: str, headers: dict[str, str], body: bytes) -> Any:
    """What a receiver does: the reference library checks the signature and the timestamp."""
    return Verifier(secret).verify(body, headers)


def subscribe(maker: sessionmaker[Session], url: str, secret: str, clock: FakeClock, event: str = "job.succeeded"):  # type: ignore[no-untyped-def]
    with jr.write_session(maker) as db:
        hook = wr.add_webhook(db, tenant_id="t", url=url, events=[event], secret=secret, now=clock.now())
        wr.add_event(db, tenant_id="t", event=event, job_id="j_1", payload={"job": {"id": "j_1"}}, now=clock.now())
        db.commit()
    return hook


def test_delivery_retries_after_500_with_one_id_and_fresh_signatures(maker: sessionmaker[Session]) -> None:
    """The receiver is named ``receiver.test`` (a name no real resolver answers, RFC 6761):
    the injected resolver maps it to 127.0.0.1, so the delivery can only arrive if it
    connects to the address the check resolved."""
    clock = FakeClock()
    secret = wh.new_secret()
    calls: list[str] = []
    with Receiver([500, 200], host="receiver.test", secret=secret) as receiver:
        resolve = fake_dns({"receiver.test": ["127.0.0.1"]}, calls)
        hook = subscribe(maker, receiver.url, secret, clock)
        policy = wh.DeliveryPolicy(timeout_seconds=5, max_attempts=3, backoff_base_seconds=10, allow_loopback=True)
        with httpx.Client() as client:
            assert wh.deliver_due(maker, client, policy, clock.now, resolve=resolve) == 1
            with maker() as db:
                (d,), _ = wr.list_deliveries(db, hook, limit=5)
                assert (d.status, d.attempts, d.last_status) == ("pending", 1, 500)
                # Source: DeliveryPolicy backoff: base 10 s after the first failed attempt.
                assert d.next_attempt_at == clock.now() + timedelta(seconds=10)
            clock.advance(9)
            assert wh.deliver_due(maker, client, policy, clock.now, resolve=resolve) == 0
            clock.advance(1)
            time.sleep(1.1)  # a second wall-clock second: the retry carries a new timestamp
            assert wh.deliver_due(maker, client, policy, clock.now, resolve=resolve) == 1
    with maker() as db:
        (d,), _ = wr.list_deliveries(db, hook, limit=5)
        assert (d.status, d.attempts, d.last_status, d.last_error) == ("delivered", 2, 200, None)
    assert receiver.rejected == []  # the receiver verified both deliveries as they arrived
    assert calls == ["receiver.test", "receiver.test"]  # resolved once per attempt, by the check
    assert len(receiver.requests) == 2
    ids = {h["webhook-id"] for h, _, _ in receiver.requests}
    assert ids == {d.id}  # the same id on the retry: receivers deduplicate on it
    assert len({h["webhook-timestamp"] for h, _, _ in receiver.requests}) == 2
    for headers, body, received in receiver.requests:
        assert headers["host"] == f"receiver.test:{receiver.port}"
        payload = verified(secret, headers, body)
        assert abs(int(headers["webhook-timestamp"]) - received) < 5  # wall time, not the fake clock
        assert payload["event"] == "job.succeeded" and payload["data"]["job"]["id"] == "j_1"
        assert payload["id"] == headers["webhook-id"]
        assert "bellwether-signature" not in headers


def test_delivery_tries_the_next_checked_address_when_one_refuses(maker: sessionmaker[Session]) -> None:
    clock = FakeClock()
    secret = wh.new_secret()
    with Receiver([200], host="receiver.test") as receiver:
        # Nothing listens on 127.0.0.2 at that port: the connection is refused, then 127.0.0.1 answers.
        resolve = fake_dns({"receiver.test": ["127.0.0.2", "127.0.0.1"]})
        hook = subscribe(maker, receiver.url, secret, clock)
        with httpx.Client() as client:
            wh.deliver_due(maker, client, wh.DeliveryPolicy(allow_loopback=True), clock.now, resolve=resolve)
    with maker() as db:
        (d,), _ = wr.list_deliveries(db, hook, limit=5)
        assert (d.status, d.last_status) == ("delivered", 200)
    assert len(receiver.requests) == 1


def test_a_rebound_name_is_refused_before_any_connection(maker: sessionmaker[Session]) -> None:
    """The name passed the check at subscription; at delivery it resolves to a private address."""
    clock = FakeClock()
    with Receiver([200], host="receiver.test") as receiver:
        hook = subscribe(maker, receiver.url, wh.new_secret(), clock)
        resolve = fake_dns({"receiver.test": ["10.0.0.7"]})
        with httpx.Client() as client:
            wh.deliver_due(maker, client, wh.DeliveryPolicy(max_attempts=1, allow_loopback=True), clock.now, resolve=resolve)
    with maker() as db:
        (d,), _ = wr.list_deliveries(db, hook, limit=5)
        assert d.status == "failed" and d.last_status is None
        assert d.last_error == ("refused: the host 'receiver.test' resolves to 10.0.0.7, which is a private "
                                "address; webhooks may only reach public addresses")
    assert receiver.requests == []


def test_after_rotation_deliveries_verify_with_either_secret(maker: sessionmaker[Session]) -> None:
    clock = FakeClock()
    old = wh.new_secret()
    with Receiver([200, 200]) as receiver:
        hook = subscribe(maker, receiver.url, old, clock)
        with jr.write_session(maker) as db:
            new = wh.new_secret()
            wr.rotate_secret(db, wr.get_webhook(db, "t", hook.id), secret=new, now=clock.now(), overlap=timedelta(hours=24))
            db.commit()
        policy = wh.DeliveryPolicy(allow_loopback=True)
        with httpx.Client() as client:
            wh.deliver_due(maker, client, policy, clock.now)
            clock.advance(24 * 3600)  # the overlap is over: only the new secret signs
            with jr.write_session(maker) as db:
                wr.add_event(db, tenant_id="t", event="job.succeeded", job_id="j_2", payload={}, now=clock.now())
                db.commit()
            wh.deliver_due(maker, client, policy, clock.now)
    (h1, b1, _), (h2, b2, _) = receiver.requests
    assert verified(old, h1, b1) and verified(new, h1, b1)
    assert h1["webhook-signature"].count(" ") == 1
    assert verified(new, h2, b2)
    with pytest.raises(WebhookVerificationError):
        verified(old, h2, b2)


def test_delivery_gives_up_after_max_attempts(maker: sessionmaker[Session]) -> None:
    clock = FakeClock()
    with Receiver([500, 503, 500]) as r:
        hook = subscribe(maker, r.url, wh.new_secret(), clock, event="job.failed")
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
    hook = subscribe(maker, "http://127.0.0.1:9/x", wh.new_secret(), clock, event="job.failed")
    with httpx.Client() as client:
        wh.deliver_due(maker, client, wh.DeliveryPolicy(max_attempts=1), clock.now)
    with maker() as db:
        (d,), _ = wr.list_deliveries(db, hook, limit=5)
        assert d.status == "failed" and d.last_status is None and (d.last_error or "").startswith("refused")


# -- HTTPS: the pinned connection still checks the certificate against the URL's host ------


@pytest.fixture(scope="module")
def tls_pair(tmp_path_factory: pytest.TempPathFactory) -> tuple[ssl.SSLContext, ssl.SSLContext]:
    """A self-signed certificate for ``receiver.test`` made with the openssl command."""
    folder: Path = tmp_path_factory.mktemp("tls")
    cert, key = folder / "cert.pem", folder / "key.pem"
    try:
        subprocess.run(
            ["openssl", "req", "-x509", "-newkey", "rsa:2048", "-nodes", "-days", "1", "-subj", "/CN=receiver.test",
             "-addext", "subjectAltName=DNS:receiver.test", "-keyout", str(key), "-out", str(cert)],
            check=True, capture_output=True, timeout=60,
        )
    except (OSError, subprocess.CalledProcessError) as exc:
        pytest.skip(f"openssl could not make a test certificate: {exc}")
    server = ssl.SSLContext(ssl.PROTOCOL_TLS_SERVER)
    server.load_cert_chain(cert, key)
    client = ssl.create_default_context(cafile=str(cert))
    return server, client


@pytest.mark.parametrize("name, ok", [("receiver.test", True), ("other.test", False)])
def test_https_delivery_to_the_pinned_address_verifies_the_certificate(
    maker: sessionmaker[Session], tls_pair: tuple[ssl.SSLContext, ssl.SSLContext], name: str, ok: bool
) -> None:
    """Connected to 127.0.0.1, TLS still names and checks the URL's host (SNI and certificate)."""
    server_ctx, client_ctx = tls_pair
    clock = FakeClock()
    secret = wh.new_secret()
    with Receiver([200], tls=server_ctx, host=name) as receiver:
        hook = subscribe(maker, receiver.url, secret, clock)
        resolve = fake_dns({name: ["127.0.0.1"]})
        with httpx.Client(verify=client_ctx) as client:
            wh.deliver_due(maker, client, wh.DeliveryPolicy(max_attempts=1, allow_loopback=True), clock.now,
                           resolve=resolve)
    with maker() as db:
        (d,), _ = wr.list_deliveries(db, hook, limit=5)
    if ok:
        assert (d.status, d.last_status) == ("delivered", 200), d.last_error
        (headers, body, _), = receiver.requests
        assert json.loads(body)["id"] == verified(secret, headers, body)["id"]
    else:  # the certificate is for receiver.test, not other.test
        assert d.status == "failed" and "certificate" in (d.last_error or "").lower(), d.last_error
        assert receiver.requests == []


def test_a_secret_that_cannot_sign_is_logged_not_sent(maker: sessionmaker[Session]) -> None:
    """Only a secret written past the API can be in another form; the delivery says so."""
    clock = FakeClock()
    with Receiver([200]) as r:
        hook = subscribe(maker, r.url, "x" * 20, clock)
        with httpx.Client() as client:
            wh.deliver_due(maker, client, wh.DeliveryPolicy(max_attempts=1, allow_loopback=True), clock.now)
    with maker() as db:
        (d,), _ = wr.list_deliveries(db, hook, limit=5)
    assert d.status == "failed" and (d.last_error or "").startswith("not sent: the webhook's secret cannot sign")
    assert r.requests == []


def test_a_receiver_holding_another_secret_refuses_the_delivery(maker: sessionmaker[Session]) -> None:
    clock = FakeClock()
    with Receiver([200], secret=wh.new_secret()) as r:
        hook = subscribe(maker, r.url, wh.new_secret(), clock)
        with httpx.Client() as client:
            wh.deliver_due(maker, client, wh.DeliveryPolicy(max_attempts=1, allow_loopback=True), clock.now)
    with maker() as db:
        (d,), _ = wr.list_deliveries(db, hook, limit=5)
    assert (d.status, d.last_status) == ("failed", 400) and r.rejected == ["No matching signature found"]
