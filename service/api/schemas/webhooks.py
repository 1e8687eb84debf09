"""Webhook subscriptions and their deliveries."""

from __future__ import annotations

import re

from datetime import datetime
from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field, field_validator

from service.jobs.webhook_urls import refused_form
from service.jobs.webhooks import check_secret

from .common import Page

__all__ = [
    "WebhookEvent",
    "WebhookCreate",
    "WebhookRead",
    "WebhookCreated",
    "WebhookList",
    "SecretRotate",
    "SecretRotated",
    "DeliveryRead",
    "DeliveryPage",
]

MAX_OVERLAP_SECONDS = 7 * 24 * 3600

_PORT = r"([1-9][0-9]{0,3}|[1-5][0-9]{4}|6[0-4][0-9]{3}|65[0-4][0-9]{2}|655[0-2][0-9]|6553[0-5])"
#: An absolute URL: scheme, host name, a port (1 to 65535), a path; the addresses are checked when
#: the host resolves. The document declares exactly this; a URL outside it is refused, and one that
#: names an IPv6 address or port 0 is refused with the reason (see ``_url_form``).
URL_PATTERN = r"^https?://[A-Za-z0-9.-]+(:" + _PORT + r")?(/[!-~]*)?$"

WebhookEvent = Literal["job.succeeded", "job.failed", "job.cancelled"]


class WebhookCreate(BaseModel):
    model_config = ConfigDict(extra="forbid", strict=True)  # JSON types as declared: 0 is no boolean

    url: str = Field(
        min_length=1, max_length=2000, json_schema_extra={"pattern": URL_PATTERN},
        examples=["https://crm.example.com/hooks/bellwether"],
        description="An https URL whose host resolves to public addresses only (http is accepted only "
        "for loopback hosts, on servers that allow them).",
    )
    events: list[WebhookEvent] = Field(min_length=1, examples=[["job.succeeded", "job.failed"]])
    secret: str | None = Field(
        default=None,
        max_length=300,
        # whsec_ and standard base64 of 24 to 63 bytes (a 64-byte secret is taken too).
        pattern=r"^whsec_(?:[A-Za-z0-9+/]{4}){8,20}(?:[A-Za-z0-9+/]{4}|[A-Za-z0-9+/]{2}==|[A-Za-z0-9+/]{3}=)?$",
        description="Signing secret, whsec_ followed by the standard base64 of 24 to 64 random bytes; "
        "generated when omitted.",
    )
    description: str | None = Field(default=None, max_length=500)

    @field_validator("url")
    @classmethod
    def _url_form(cls, value: str) -> str:
        if re.fullmatch(URL_PATTERN, value):
            return value
        refused = refused_form(value)  # an IPv6 address or port 0: say which and why
        if refused is not None:
            raise refused
        raise ValueError("give an absolute http(s) URL: a host name, an optional port from 1 to 65535 and a path")

    @field_validator("secret")
    @classmethod
    def _secret_form(cls, value: str | None) -> str | None:
        return None if value is None else check_secret(value)


class WebhookRead(BaseModel):
    model_config = ConfigDict(from_attributes=True)

    id: str
    url: str
    events: list[str]
    description: str | None
    active: bool
    created_at: datetime
    previous_secret_expires_at: datetime | None = Field(
        default=None, description="Until then deliveries are also signed with the secret before the last rotation."
    )


class WebhookCreated(WebhookRead):
    secret: str = Field(description="The signing secret (whsec_<base64>). Shown only in this answer: keep it.")


class SecretRotate(BaseModel):
    model_config = ConfigDict(extra="forbid")

    overlap_seconds: int | None = Field(
        default=None,
        ge=0,
        le=MAX_OVERLAP_SECONDS,
        description="How long the current secret stays valid beside the new one (default: the server's "
        "setting, 24 hours); 0 retires it at once.",
    )


class SecretRotated(BaseModel):
    id: str
    secret: str = Field(description="The new signing secret (whsec_<base64>). Shown only in this answer: keep it.")
    previous_secret_expires_at: datetime | None = Field(
        description="Until then deliveries carry a second signature made with the previous secret."
    )


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
