"""ORM models: every table of the service, on one declarative base."""

from __future__ import annotations

from .apikey import ApiKey
from .base import Base, UtcDateTime, new_id, utcnow
from .campaign import Campaign
from .graph import Graph, GraphVersion, VersionArray
from .idempotency import IdempotencyRecord
from .job import FINISHED_STATUSES, JOB_STATUSES, Job, JobResult, ResultArray
from .schedule import Schedule
from .webhook import DELIVERY_STATUSES, Webhook, WebhookDelivery

__all__ = [
    "Base",
    "UtcDateTime",
    "new_id",
    "utcnow",
    "Graph",
    "GraphVersion",
    "VersionArray",
    "Job",
    "JobResult",
    "ResultArray",
    "JOB_STATUSES",
    "FINISHED_STATUSES",
    "Schedule",
    "Webhook",
    "WebhookDelivery",
    "DELIVERY_STATUSES",
    "IdempotencyRecord",
    "ApiKey",
    "Campaign",
]
