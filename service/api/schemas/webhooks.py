"""Webhook subscriptions and their deliveries."""

from __future__ import annotations

from datetime import datetime
from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field

from .common import Page

__all__ = ["WebhookEvent", "WebhookCreate", "WebhookRead", "WebhookCreated", "WebhookList", "DeliveryRead", "DeliveryPage"]

_PORT = r"([1-9][0-9]{0,3}|[1-5][0-9]{4}|6[0-4][0-9]{3}|65[0-4][0-9]{2}|655[0-2][0-9]|6553[0-5])"
#: An absolute URL: scheme, host, a port (1 to 65535), a path; the rest is checked when the host resolves.
URL_PATTERN = r"^https?://[A-Za-z0-9.-]+(:" + _PORT + r")?(/[!-~]*)?$"

WebhookEvent = Literal["job.succeeded", "job.failed", "job.cancelled"]


class WebhookCreate(BaseModel):
    model_config = ConfigDict(extra="forbid", strict=True)  # JSON types as declared: 0 is no boolean

    url: str = Field(
        min_length=1, max_length=2000, pattern=URL_PATTERN, examples=["https://crm.example.com/hooks/bellwether"],
        description="An https URL whose host resolves to public addresses only (http is accepted only "
        "for loopback hosts, on servers that allow them).",
    )
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
