"""Webhook subscriptions and their deliveries."""

from __future__ import annotations

from datetime import datetime
from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field

from .common import Page

__all__ = ["WebhookEvent", "WebhookCreate", "WebhookRead", "WebhookCreated", "WebhookList", "DeliveryRead", "DeliveryPage"]

WebhookEvent = Literal["job.succeeded", "job.failed", "job.cancelled"]


class WebhookCreate(BaseModel):
    model_config = ConfigDict(extra="forbid", strict=True)  # JSON types as declared: 0 is no boolean

    url: str = Field(min_length=1, max_length=2000, examples=["https://crm.example.com/hooks/bellwether"])
    events: list[WebhookEvent] = Field(min_length=1, examples=[["job.succeeded", "job.failed"]])
    secret: str | None = Field(
        default=None, min_length=16, max_length=200, description="Signing secret; generated when omitted."
    )
    description: str | None = Field(default=None, max_length=500)


class WebhookRead(BaseModel):
    model_config = ConfigDict(from_attributes=True)

    id: str
    url: str
    events: list[str]
    description: str | None
    active: bool
    created_at: datetime


class WebhookCreated(WebhookRead):
    secret: str = Field(description="The HMAC-SHA256 signing key. Shown only in this answer: keep it.")


class WebhookList(BaseModel):
    items: list[WebhookRead]


class DeliveryRead(BaseModel):
    model_config = ConfigDict(from_attributes=True)

    id: str
    event: str
    job_id: str | None
    status: Literal["pending", "delivered", "failed"]
    attempts: int
    next_attempt_at: datetime | None
    last_status: int | None = Field(description="HTTP status of the last attempt (null: no answer).")
    last_error: str | None
    created_at: datetime
    delivered_at: datetime | None
    payload: dict[str, Any]


class DeliveryPage(Page):
    items: list[DeliveryRead]
