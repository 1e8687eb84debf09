"""Webhook events: signing by the Standard Webhooks specification, the job summary they carry, delivery.

Each delivery is a ``POST`` of a JSON body::

    {"id": "whd_...", "event": "job.succeeded", "created_at": "...",
     "data": {"job": {"id": "j_...", "status": "succeeded", "kind": "profile", ...}}}

signed as the Standard Webhooks specification (standardwebhooks.com) says,
with the headers::

    webhook-id: whd_...              the delivery id, the same on every retry
    webhook-timestamp: 1733350000    unix seconds of this attempt
    webhook-signature: v1,<base64>   HMAC-SHA256 over "<id>.<timestamp>.<raw body>"

The HMAC key is the base64-decoded part of the webhook's secret
``whsec_<base64>`` (shown once, at creation or rotation). After
``POST /v1/webhooks/{id}/rotate-secret`` the previous secret stays valid for
an overlap period and every delivery carries two signatures, separated by a
space (new secret first); a receiver accepts a delivery when any of them
matches. Any Standard Webhooks library verifies deliveries, for instance in
Python::

    from standardwebhooks import Webhook
    payload = Webhook(secret).verify(raw_body, request_headers)

Receivers should reject old timestamps (the libraries allow five minutes)
and deduplicate on ``webhook-id``: deliveries are sent at least once. A
receiver should answer 2xx quickly; anything else (or no answer within the
timeout) is retried with exponential backoff, and every attempt is logged
in the delivery row (``GET /v1/webhooks/{id}/deliveries``).

URLs are checked before each attempt (:mod:`service.jobs.webhook_urls`),
and the attempt connects to an address that check resolved and accepted:
the host is not looked up again, so a changed DNS answer cannot redirect it
(the ``Host`` header and the TLS server name stay the URL's host).
Redirects are not followed.
"""

from __future__ import annotations

import base64
import binascii
import hashlib
import hmac
import json
import logging
import secrets
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import Any

import httpx
from sqlalchemy.orm import Session, sessionmaker

from storage.models import Job, Webhook
from storage.repo import jobs as job_repo
from storage.repo import webhooks as webhook_repo

from . import webhook_urls
from .errors import UnsafeWebhookUrl
from .webhook_urls import CheckedUrl, Resolver

__all__ = [
    "EVENTS",
    "SECRET_PREFIX",
    "check_url",
    "new_secret",
    "secret_key",
    "check_secret",
    "sign",
    "signature_header",
    "signing_secrets",
    "job_summary",
    "event_for_status",
    "queue_job_event",
    "DeliveryPolicy",
    "deliver_due",
    "encode_body",
]

log = logging.getLogger("bellwether.webhooks")

EVENTS = ("job.succeeded", "job.failed", "job.cancelled")
SECRET_PREFIX = "whsec_"
#: Key sizes the specification allows for a secret (24 to 64 random bytes).
SECRET_BYTES = (24, 64)

# Looked up at call time, so a test can answer lookups itself (monkeypatch).
_resolve: Resolver = webhook_urls._resolve


def check_url(url: str, *, allow_loopback: bool = False, resolve: Resolver | None = None) -> CheckedUrl:
    """:func:`service.jobs.webhook_urls.check_url` with this module's resolver by default."""
    return webhook_urls.check_url(url, allow_loopback=allow_loopback, resolve=resolve or _resolve)


def new_secret() -> str:
    """A fresh ``whsec_<base64>`` secret over 32 random bytes."""
    return SECRET_PREFIX + base64.b64encode(secrets.token_bytes(32)).decode()


def secret_key(secret: str) -> bytes:
    """The HMAC key of a ``whsec_<base64>`` secret; ValueError saying what is wrong otherwise."""
    if not secret.startswith(SECRET_PREFIX):
        raise ValueError(f"a webhook secret is {SECRET_PREFIX!r} followed by standard base64")
    try:
        return base64.b64decode(secret[len(SECRET_PREFIX):], validate=True)
    except (binascii.Error, ValueError) as exc:
        raise ValueError(f"the part after {SECRET_PREFIX!r} must be standard base64 (with padding)") from exc


def check_secret(secret: str) -> str:
    """A secret chosen by the caller: ``whsec_<base64>`` of 24 to 64 bytes (ValueError otherwise).

    Only new secrets are held to the length; a secret carried over from the
    earlier scheme (any length) still signs.
    """
    key = secret_key(secret)
    low, high = SECRET_BYTES
    if not low <= len(key) <= high:
        raise ValueError(f"the secret must decode to {low} to {high} random bytes; it decodes to {len(key)}")
    return secret


def sign(secret: str, msg_id: str, timestamp: int, body: bytes) -> str:
    """``v1,<base64 HMAC-SHA256>`` of ``"<msg_id>.<timestamp>.<body>"`` under the secret's key."""
    mac = hmac.new(secret_key(secret), f"{msg_id}.{timestamp}.".encode() + body, hashlib.sha256)
    return "v1," + base64.b64encode(mac.digest()).decode()


def signature_header(secrets_: Sequence[str], msg_id: str, timestamp: int, body: bytes) -> str:
    """The ``webhook-signature`` value: one signature per secret, space-separated."""
    return " ".join(sign(s, msg_id, timestamp, body) for s in secrets_)


def signing_secrets(hook: Webhook, now: datetime) -> list[str]:
    """The current secret, then the previous one while its overlap lasts."""
    out = [hook.secret]
    expires = hook.previous_secret_expires_at
    if hook.previous_secret and expires is not None and expires > now:
        out.append(hook.previous_secret)
    return out


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
        status_code, error = _send(client, hook.url, signing_secrets(hook, now()), delivery.id,
                                   delivery.payload, policy, resolve)
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
    secrets_: list[str],
    delivery_id: str,
    payload: dict[str, Any],
    policy: DeliveryPolicy,
    resolve: Resolver | None,
) -> tuple[int | None, str | None]:
    """One attempt: check the URL, then POST to an address the check accepted (in order)."""
    try:
        checked = check_url(url, allow_loopback=policy.allow_loopback, resolve=resolve)
    except UnsafeWebhookUrl as exc:
        return None, f"refused: {exc.reason}"
    body = encode_body(payload)
    # Wall time, not the injectable clock: receivers compare it with theirs.
    timestamp = int(time.time())
    try:
        signature = signature_header(secrets_, delivery_id, timestamp, body)
    except ValueError as exc:  # a secret stored by hand in another form; the API never stores one
        return None, f"not sent: the webhook's secret cannot sign ({exc}); rotate it"
    target = httpx.URL(url)
    headers = {
        "Content-Type": "application/json",
        "User-Agent": "Bellwether-Webhooks/2",
        "Host": target.netloc.decode("ascii"),
        "webhook-id": delivery_id,
        "webhook-timestamp": str(timestamp),
        "webhook-signature": signature,
    }
    # TLS checks the certificate against the URL's host, not the address connected to.
    extensions = {"sni_hostname": target.raw_host.decode("ascii")} if checked.scheme == "https" else {}
    error = "no address to connect to"
    for address in checked.addresses:
        try:
            r = client.post(
                target.copy_with(host=address),
                content=body,
                headers=headers,
                timeout=policy.timeout_seconds,
                extensions=extensions,
            )
        except httpx.ConnectError as exc:  # this address does not answer: try the next one checked
            error = f"{type(exc).__name__} ({address}): {exc}"[:500]
            continue
        except httpx.HTTPError as exc:
            return None, f"{type(exc).__name__}: {exc}"[:500]
        return r.status_code, None if r.is_success else f"HTTP {r.status_code}: {r.text[:200]}"
    return None, error
