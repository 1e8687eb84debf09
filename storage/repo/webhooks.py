"""Webhook subscriptions and deliveries: plain functions over a Session.

Deliveries are both the log and the queue. A worker claims a due delivery
with :func:`claim_delivery`, which pushes ``next_attempt_at`` forward by a
lease and counts the attempt in the same statement (``FOR UPDATE SKIP
LOCKED`` on PostgreSQL), so two workers never send one attempt twice and a
worker that dies mid-send leaves the delivery to be retried after the lease.
"""

from __future__ import annotations

from datetime import datetime, timedelta
from typing import Any

from sqlalchemy import delete, select, tuple_, update
from sqlalchemy.orm import Session

from ..errors import NotFound
from ..models import Webhook, WebhookDelivery, new_id
from .graphs import decode_cursor, encode_cursor

__all__ = [
    "add_webhook",
    "get_webhook",
    "list_webhooks",
    "delete_webhook",
    "rotate_secret",
    "add_event",
    "list_deliveries",
    "any_due",
    "claim_delivery",
    "record_attempt",
    "purge_deliveries",
]


def add_webhook(
    db: Session,
    *,
    tenant_id: str,
    url: str,
    events: list[str],
    secret: str,
    now: datetime,
    description: str | None = None,
) -> Webhook:
    hook = Webhook(
        id=new_id("wh"),
        tenant_id=tenant_id,
        url=url,
        events=sorted(set(events)),
        secret=secret,
        description=description,
        active=True,
        created_at=now,
    )
    db.add(hook)
    db.flush()
    return hook


def get_webhook(db: Session, tenant_id: str, webhook_id: str) -> Webhook:
    hook = db.get(Webhook, webhook_id)
    if hook is None or hook.tenant_id != tenant_id:
        raise NotFound("webhook not found", resource="webhook", id=webhook_id)
    return hook


def list_webhooks(db: Session, tenant_id: str) -> list[Webhook]:
    q = select(Webhook).where(Webhook.tenant_id == tenant_id).order_by(Webhook.created_at, Webhook.id)
    return list(db.execute(q).scalars())


def delete_webhook(db: Session, hook: Webhook) -> None:
    db.execute(delete(WebhookDelivery).where(WebhookDelivery.webhook_id == hook.id))
    db.delete(hook)
    db.flush()


def rotate_secret(db: Session, hook: Webhook, *, secret: str, now: datetime, overlap: timedelta) -> Webhook:
    """Make ``secret`` current; the current one stays valid (signed with too) for ``overlap``.

    A secret already in its overlap is dropped: at most two are ever valid.
    """
    hook.previous_secret = hook.secret if overlap > timedelta(0) else None
    hook.previous_secret_expires_at = now + overlap if overlap > timedelta(0) else None
    hook.secret = secret
    db.flush()
    return hook


def add_event(
    db: Session, *, tenant_id: str, event: str, job_id: str | None, payload: dict[str, Any], now: datetime
) -> list[WebhookDelivery]:
    """Queue one delivery per active subscription of the tenant to ``event``.

    Call it in the transaction that changes the job, so an event is queued
    exactly when the change is committed.
    """
    hooks = [h for h in list_webhooks(db, tenant_id) if h.active and event in h.events]
    out = []
    for hook in hooks:
        delivery_id = new_id("whd")
        body = {"id": delivery_id, "event": event, "created_at": now.isoformat(), "data": payload}
        d = WebhookDelivery(
            id=delivery_id,
            webhook_id=hook.id,
            tenant_id=tenant_id,
            event=event,
            job_id=job_id,
            payload=body,
            status="pending",
            attempts=0,
            next_attempt_at=now,
            created_at=now,
        )
        db.add(d)
        out.append(d)
    db.flush()
    return out


def list_deliveries(
    db: Session, hook: Webhook, *, limit: int, cursor: str | None = None
) -> tuple[list[WebhookDelivery], str | None]:
    """Newest first, cursor-paginated (ValueError on a forged cursor)."""
    q = select(WebhookDelivery).where(WebhookDelivery.webhook_id == hook.id)
    if cursor:
        when, ident = decode_cursor(cursor)
        q = q.where(tuple_(WebhookDelivery.created_at, WebhookDelivery.id) < tuple_(when, ident))
    q = q.order_by(WebhookDelivery.created_at.desc(), WebhookDelivery.id.desc()).limit(limit + 1)
    rows = list(db.execute(q, execution_options={"populate_existing": True}).scalars())
    nxt = encode_cursor(rows[limit - 1].created_at, rows[limit - 1].id) if len(rows) > limit else None
    return rows[:limit], nxt


def any_due(db: Session, now: datetime) -> bool:
    """A cheap read before :func:`claim_delivery` (which writes)."""
    q = select(WebhookDelivery.id).where(
        WebhookDelivery.status == "pending", WebhookDelivery.next_attempt_at <= now
    )
    return db.execute(q.limit(1)).first() is not None


def claim_delivery(
    db: Session, now: datetime, lease_seconds: float
) -> tuple[WebhookDelivery, Webhook] | None:
    """Take the oldest due pending delivery (counting the attempt); None when none is due."""
    pick = (
        select(WebhookDelivery.id)
        .where(WebhookDelivery.status == "pending", WebhookDelivery.next_attempt_at <= now)
        .order_by(WebhookDelivery.next_attempt_at, WebhookDelivery.id)
        .limit(1)
        .with_for_update(skip_locked=True)
        .scalar_subquery()
    )
    stmt = (
        update(WebhookDelivery)
        .where(WebhookDelivery.id == pick, WebhookDelivery.status == "pending")
        .values(
            attempts=WebhookDelivery.attempts + 1,
            next_attempt_at=now + timedelta(seconds=lease_seconds),
        )
        .returning(WebhookDelivery.id)
        .execution_options(synchronize_session=False)
    )
    delivery_id = db.execute(stmt).scalar_one_or_none()
    if delivery_id is None:
        return None
    delivery = db.get(WebhookDelivery, delivery_id, populate_existing=True)
    assert delivery is not None
    hook = db.get(Webhook, delivery.webhook_id)
    assert hook is not None
    return delivery, hook


def record_attempt(
    db: Session,
    delivery: WebhookDelivery,
    *,
    now: datetime,
    http_status: int | None,
    error: str | None,
    retry_at: datetime | None,
) -> str:
    """Store an attempt's outcome; return the new status (delivered, pending, failed)."""
    ok = http_status is not None and 200 <= http_status < 300
    status = "delivered" if ok else ("pending" if retry_at is not None else "failed")
    values: dict[str, Any] = {"status": status, "last_status": http_status, "last_error": error}
    if ok:
        values["delivered_at"] = now
    elif retry_at is not None:
        values["next_attempt_at"] = retry_at
    db.execute(
        update(WebhookDelivery)
        .where(WebhookDelivery.id == delivery.id, WebhookDelivery.attempts == delivery.attempts)
        .values(**values)
        .execution_options(synchronize_session=False)
    )
    return status


def purge_deliveries(db: Session, older_than: datetime) -> int:
    res = db.execute(
        delete(WebhookDelivery)
        .where(WebhookDelivery.status != "pending", WebhookDelivery.created_at < older_than)
        .execution_options(synchronize_session=False)
    )
    return int(res.rowcount)  # type: ignore[attr-defined]
