"""Webhook subscriptions and their delivery log (also the delivery queue)."""

from __future__ import annotations

from datetime import datetime
from typing import Any

from sqlalchemy import JSON, Boolean, ForeignKey, Index, Integer, String, Text
from sqlalchemy.orm import Mapped, mapped_column

from .base import Base, UtcDateTime, utcnow

__all__ = ["Webhook", "WebhookDelivery", "DELIVERY_STATUSES"]

DELIVERY_STATUSES = ("pending", "delivered", "failed")


class Webhook(Base):
    __tablename__ = "webhook"

    id: Mapped[str] = mapped_column(String(40), primary_key=True)
    tenant_id: Mapped[str] = mapped_column(String(64), index=True)
    url: Mapped[str] = mapped_column(String(2000))
    events: Mapped[list[str]] = mapped_column(JSON)
    # Kept in the clear: the service must sign with it. Shown once, at creation or rotation.
    # ``whsec_<base64>`` (Standard Webhooks); the base64 part is the HMAC key.
    secret: Mapped[str] = mapped_column(String(300))
    # The secret before the last rotation: deliveries are signed with it too until it expires.
    previous_secret: Mapped[str | None] = mapped_column(String(300), default=None)
    previous_secret_expires_at: Mapped[datetime | None] = mapped_column(UtcDateTime, default=None)
    description: Mapped[str | None] = mapped_column(String(500), default=None)
    active: Mapped[bool] = mapped_column(Boolean, default=True)
    created_at: Mapped[datetime] = mapped_column(UtcDateTime, default=utcnow)


class WebhookDelivery(Base):
    """One event for one subscription; ``next_attempt_at`` doubles as the claim lease."""

    __tablename__ = "webhook_delivery"
    __table_args__ = (Index("ix_webhook_delivery_due", "status", "next_attempt_at"),)

    id: Mapped[str] = mapped_column(String(40), primary_key=True)
    webhook_id: Mapped[str] = mapped_column(
        ForeignKey("webhook.id", ondelete="CASCADE"), index=True
    )
    tenant_id: Mapped[str] = mapped_column(String(64))
    event: Mapped[str] = mapped_column(String(40))
    job_id: Mapped[str | None] = mapped_column(String(40), default=None)
    payload: Mapped[dict[str, Any]] = mapped_column(JSON)
    status: Mapped[str] = mapped_column(String(16), default="pending")
    attempts: Mapped[int] = mapped_column(Integer, default=0)
    next_attempt_at: Mapped[datetime] = mapped_column(UtcDateTime, default=utcnow)
    last_status: Mapped[int | None] = mapped_column(Integer, default=None)
    last_error: Mapped[str | None] = mapped_column(Text, default=None)
    created_at: Mapped[datetime] = mapped_column(UtcDateTime, default=utcnow)
    delivered_at: Mapped[datetime | None] = mapped_column(UtcDateTime, default=None)
