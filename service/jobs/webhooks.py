"""Webhook events: URL safety, signing, the job summary they carry, and delivery.

Each delivery is a ``POST`` of a JSON body::

    {"id": "whd_...", "event": "job.succeeded", "created_at": "...",
     "data": {"job": {"id": "j_...", "status": "succeeded", "kind": "profile", ...}}}

with the headers ``Content-Type: application/json``,
``Bellwether-Event: job.succeeded``, ``Bellwether-Delivery: whd_...`` and::

    Bellwether-Signature: t=<unix seconds>,v1=<hex HMAC-SHA256>

where the HMAC key is the webhook's secret (shown once, when the webhook is
created) and the message is ``f"{t}.{body}"``, the raw request body bytes
as received. To verify, in Python::

    import hashlib, hmac, time

    def verify(secret: str, header: str, body: bytes, tolerance: int = 300) -> bool:
        parts = dict(p.split("=", 1) for p in header.split(","))
        t = int(parts["t"])
        mac = hmac.new(secret.encode(), f"{t}.".encode() + body, hashlib.sha256)
        return abs(time.time() - t) <= tolerance and hmac.compare_digest(
            mac.hexdigest(), parts["v1"])

Rejecting old timestamps stops replays; compare the digest in constant
time. Each attempt is signed afresh (a new ``t``). A receiver should answer
2xx quickly; anything else (or no answer within the timeout) is retried with
exponential backoff, and every attempt is logged in the delivery row
(``GET /v1/webhooks/{id}/deliveries``). Deliveries are sent at least once:
deduplicate on ``Bellwether-Delivery``.

URLs must be ``https`` and resolve only to public addresses; private,
link-local, loopback, multicast and reserved addresses are refused (unless
loopback is allowed by setting, for local use and tests). The address is
checked again just before each attempt, and redirects are not followed.
"""

from __future__ import annotations

import hashlib
import hmac
import ipaddress
import json
import logging
import socket
import time
from collections.abc import Callable
from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import Any
from urllib.parse import urlsplit

import httpx
from sqlalchemy.orm import Session, sessionmaker

from storage.models import Job
from storage.repo import jobs as job_repo
from storage.repo import webhooks as webhook_repo

from .errors import UnsafeWebhookUrl

__all__ = [
    "EVENTS",
    "SIGNATURE_HEADER",
    "check_url",
    "sign",
    "signature_header",
    "verify_signature",
    "job_summary",
    "event_for_status",
    "queue_job_event",
    "DeliveryPolicy",
    "deliver_due",
    "encode_body",
]

log = logging.getLogger("bellwether.webhooks")

EVENTS = ("job.succeeded", "job.failed", "job.cancelled")
SIGNATURE_HEADER = "Bellwether-Signature"

Resolver = Callable[[str, int], list[str]]


def _resolve(host: str, port: int) -> list[str]:
    infos = socket.getaddrinfo(host, port, type=socket.SOCK_STREAM)
    return sorted({str(info[4][0]) for info in infos})


def check_url(url: str, *, allow_loopback: bool = False, resolve: Resolver | None = None) -> None:
    """Refuse a URL that is not https or that resolves to a non-public address.

    With ``allow_loopback``, ``http`` and ``https`` URLs whose host resolves
    only to loopback addresses (127.0.0.0/8, ::1) are accepted too.
    """
    try:
        parts = urlsplit(url)
        port = parts.port
    except ValueError as exc:
        raise UnsafeWebhookUrl("the URL cannot be parsed", field="url") from exc
    host = parts.hostname
    if parts.scheme not in ("https", "http") or not host:
        raise UnsafeWebhookUrl("webhook URLs must be absolute https URLs", field="url")
    if parts.username or parts.password:
        raise UnsafeWebhookUrl("webhook URLs must not carry credentials", field="url")
    try:
        addresses = (resolve or _resolve)(host, port or (443 if parts.scheme == "https" else 80))
    except OSError as exc:
        raise UnsafeWebhookUrl(f"the host {host!r} does not resolve", field="url") from exc
    if not addresses:
        raise UnsafeWebhookUrl(f"the host {host!r} does not resolve", field="url")
    ips = [ipaddress.ip_address(a.split("%", 1)[0]) for a in addresses]
    if allow_loopback and all(ip.is_loopback for ip in ips):
        return
    if parts.scheme != "https":
        raise UnsafeWebhookUrl("webhook URLs must use https", field="url")
    for ip in ips:
        mapped = getattr(ip, "ipv4_mapped", None)
        target = mapped or ip
        if not target.is_global or target.is_multicast or target.is_reserved:
            raise UnsafeWebhookUrl(
                f"the host {host!r} resolves to {ip}, which is not a public address",
                field="url",
                address=str(ip),
            )


def sign(secret: str, timestamp: int, body: bytes) -> str:
    """Hex HMAC-SHA256 of ``f"{timestamp}.{body}"`` under ``secret``."""
    return hmac.new(secret.encode(), f"{timestamp}.".encode() + body, hashlib.sha256).hexdigest()


def signature_header(secret: str, body: bytes, timestamp: int) -> str:
    return f"t={timestamp},v1={sign(secret, timestamp, body)}"


def verify_signature(secret: str, header: str, body: bytes, *, now: int, tolerance: int = 300) -> bool:
    """The check a receiver makes (also used by the tests)."""
    try:
        parts = dict(p.split("=", 1) for p in header.split(","))
        t = int(parts["t"])
        given = parts["v1"]
    except (KeyError, ValueError):
        return False
    return abs(now - t) <= tolerance and hmac.compare_digest(sign(secret, t, body), given)


def encode_body(payload: dict[str, Any]) -> bytes:
    return json.dumps(payload, separators=(",", ":"), sort_keys=True).encode()


def job_summary(job: Job) -> dict[str, Any]:
    """What an event tells about a job: enough to decide whether to fetch the result."""
    return {
        "job": {
            "id": job.id,
            "kind": job.kind,
            "status": job.status,
            "graph_id": job.graph_id,
            "version": job.version,
            "schedule_id": job.schedule_id,
            "attempts": job.attempts,
            "created_at": job.created_at.isoformat() if job.created_at else None,
            "finished_at": job.finished_at.isoformat() if job.finished_at else None,
            "error": job.error,
            "url": f"/v1/jobs/{job.id}",
            "result_url": f"/v1/jobs/{job.id}/result" if job.status == "succeeded" else None,
        }
    }


def event_for_status(status: str) -> str | None:
    return {"succeeded": "job.succeeded", "failed": "job.failed", "cancelled": "job.cancelled"}.get(status)


def queue_job_event(db: Session, job: Job, now: datetime) -> None:
    """Queue deliveries for the job's current (finished) status, in the caller's transaction."""
    event = event_for_status(job.status)
    if event is not None:
        webhook_repo.add_event(
            db, tenant_id=job.tenant_id, event=event, job_id=job.id, payload=job_summary(job), now=now
        )


@dataclass(frozen=True)
class DeliveryPolicy:
    timeout_seconds: float = 10.0
    max_attempts: int = 6
    backoff_base_seconds: float = 10.0
    backoff_max_seconds: float = 3600.0
    allow_loopback: bool = False

    def retry_at(self, attempts: int, now: datetime) -> datetime | None:
        if attempts >= self.max_attempts:
            return None
        delay = min(self.backoff_base_seconds * 2 ** (attempts - 1), self.backoff_max_seconds)
        return now + timedelta(seconds=delay)


def deliver_due(
    maker: sessionmaker[Session],
    client: httpx.Client,
    policy: DeliveryPolicy,
    now: Callable[[], datetime],
    *,
    limit: int = 50,
    resolve: Resolver | None = None,
) -> int:
    """Send up to ``limit`` due deliveries, one attempt each; return how many were attempted."""
    sent = 0
    with maker() as db:
        if not webhook_repo.any_due(db, now()):
            return 0
    while sent < limit:
        with job_repo.write_session(maker) as db:
            claimed = webhook_repo.claim_delivery(db, now(), policy.timeout_seconds + 30.0)
            db.commit()
        if claimed is None:
            break
        delivery, hook = claimed
        status_code, error = _send(client, hook.url, hook.secret, delivery.id, delivery.event,
                                   delivery.payload, policy, now, resolve)
        when = now()
        retry_at = None if status_code is not None and 200 <= status_code < 300 else policy.retry_at(
            delivery.attempts, when
        )
        with job_repo.write_session(maker) as db:
            outcome = webhook_repo.record_attempt(
                db, delivery, now=when, http_status=status_code, error=error, retry_at=retry_at
            )
            db.commit()
        log.info(
            "webhook delivery",
            extra={"delivery_id": delivery.id, "webhook_id": hook.id, "event": delivery.event,
                   "attempt": delivery.attempts, "http_status": status_code, "outcome": outcome},
        )
        sent += 1
    return sent


def _send(
    client: httpx.Client,
    url: str,
    secret: str,
    delivery_id: str,
    event: str,
    payload: dict[str, Any],
    policy: DeliveryPolicy,
    now: Callable[[], datetime],
    resolve: Resolver | None,
) -> tuple[int | None, str | None]:
    try:
        check_url(url, allow_loopback=policy.allow_loopback, resolve=resolve)
    except UnsafeWebhookUrl as exc:
        return None, f"refused: {exc.reason}"
    body = encode_body(payload)
    headers = {
        "Content-Type": "application/json",
        "User-Agent": "Bellwether-Webhooks/1",
        "Bellwether-Event": event,
        "Bellwether-Delivery": delivery_id,
        # Wall time, not the injectable clock: receivers compare it with theirs.
        SIGNATURE_HEADER: signature_header(secret, body, int(time.time())),
    }
    try:
        r = client.post(url, content=body, headers=headers, timeout=policy.timeout_seconds)
    except httpx.HTTPError as exc:
        return None, f"{type(exc).__name__}: {exc}"[:500]
    return r.status_code, None if r.is_success else f"HTTP {r.status_code}: {r.text[:200]}"
