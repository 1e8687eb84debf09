"""Retrying is a value: a policy looks at a failure and returns a RetryDecision or None.

Permanent failures (the request itself is wrong, or the data is) fail the
job at once: every :class:`service.analytics.errors.AnalyticsError`, a
missing graph or version, params that no longer validate. Anything else
(database hiccups, I/O, memory, an unexpected exception) is taken to be
transient and retried with exponential backoff until ``max_attempts``.

:func:`problem_document` turns an exception into the RFC 9457-style
document stored in ``job.error`` (``type``, ``title``, ``detail`` and the
error's data); the HTTP status is left to the API layer.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import Any

from pydantic import ValidationError

from service.analytics import errors as aerr
from storage import errors as serr

from . import errors as jerr

__all__ = ["RetryDecision", "RetryPolicy", "is_permanent", "problem_document"]

PERMANENT: tuple[type[BaseException], ...] = (
    aerr.AnalyticsError,
    serr.NotFound,
    jerr.JobsError,
    ValidationError,
)

# Slugs match the API's problem table for the same errors.
_SLUGS: list[tuple[type[BaseException], str, str]] = [
    (aerr.UnknownNode, "unknown-node", "Unknown node id"),
    (aerr.InfeasibleRequest, "infeasible-request", "Rules cannot be satisfied"),
    (aerr.EmptyGraph, "empty-graph", "Graph is empty"),
    (aerr.InvalidParameter, "invalid-parameter", "Invalid parameter"),
    (aerr.Cancelled, "cancelled", "Computation cancelled"),
    (aerr.TooExpensive, "too-expensive", "Job too expensive"),
    (aerr.ComputationFailed, "computation-failed", "Computation failed"),
    (aerr.AnalyticsError, "computation-failed", "Computation failed"),
    (serr.NotFound, "not-found", "Resource not found"),
    (jerr.InvalidJobParams, "invalid-parameter", "Invalid parameter"),
    (jerr.UnknownKind, "unknown-kind", "Unknown job kind"),
    (ValidationError, "invalid-parameter", "Invalid parameter"),
]


@dataclass(frozen=True)
class RetryDecision:
    retry_at: datetime
    delay_seconds: float


@dataclass(frozen=True)
class RetryPolicy:
    """Exponential backoff: ``base * factor ** (attempts - 1)``, capped at ``max_seconds``."""

    base_seconds: float = 5.0
    factor: float = 2.0
    max_seconds: float = 600.0

    def delay(self, attempts: int) -> float:
        return float(min(self.base_seconds * self.factor ** max(attempts - 1, 0), self.max_seconds))

    def decide(
        self, exc: BaseException, *, attempts: int, max_attempts: int, now: datetime
    ) -> RetryDecision | None:
        """When to try again after the ``attempts``-th run failed with ``exc``; None to fail now."""
        if is_permanent(exc) or attempts >= max_attempts:
            return None
        delay = self.delay(attempts)
        return RetryDecision(retry_at=now + timedelta(seconds=delay), delay_seconds=delay)


def is_permanent(exc: BaseException) -> bool:
    return isinstance(exc, PERMANENT)


def _jsonable(value: object) -> object:
    if value is None or isinstance(value, (str, int, float, bool)):
        return value
    if isinstance(value, (list, tuple, set, frozenset)):
        return [_jsonable(v) for v in value]
    if isinstance(value, dict):
        return {str(k): _jsonable(v) for k, v in value.items()}
    item = getattr(value, "item", None)
    return item() if callable(item) else str(value)


def problem_document(exc: BaseException, *, attempts: int | None = None) -> dict[str, Any]:
    slug, title = "internal-error", "Internal error"
    for cls, s, t in _SLUGS:
        if isinstance(exc, cls):
            slug, title = s, t
            break
    detail = getattr(exc, "reason", None) or str(exc) or type(exc).__name__
    doc: dict[str, Any] = {"type": f"/problems/{slug}", "title": title, "detail": str(detail)}
    if slug == "internal-error":
        doc["exception"] = type(exc).__name__
    data = getattr(exc, "data", None)
    if isinstance(data, dict):
        for k, v in data.items():
            if k not in doc and v is not None:
                doc[k] = _jsonable(v)
    if isinstance(exc, ValidationError):
        doc["errors"] = [
            {"loc": [str(p) for p in e["loc"]], "msg": e["msg"], "type": e["type"]} for e in exc.errors()
        ]
    if attempts is not None:
        doc["attempts"] = attempts
    return doc
