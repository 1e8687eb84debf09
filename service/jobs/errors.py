"""Errors of the job layer, and the one function that turns any error into a problem document.

Each subclass's docstring is its default message. Every error class of the
service (analytics, intake, storage, jobs, api) carries its problem type as
data: ``slug`` (the end of the ``/problems/...`` type) and ``title``.
:func:`problem_document` builds an RFC 9457-style document from an exception:
``type``, ``title``, ``detail`` and the error's data as extension members. The
API adds ``status`` and ``instance`` (``api/problems.py``, the one place that
knows HTTP); the worker stores the document as a failed job's ``error``.
``WorkerLost`` and ``JobTimeout`` are never raised to a caller: they name the
problem of a job that ended without an exception of its own.
"""

from __future__ import annotations

from typing import Any, ClassVar

from pydantic import ValidationError

from service.usecases.errors import ResultNotReady  # raised by use cases and the queue alike

__all__ = [
    "JobsError",
    "UnknownKind",
    "InvalidJobParams",
    "UnsafeWebhookUrl",
    "InvalidSchedule",
    "ResultNotReady",
    "TooManyJobs",
    "Released",
    "WorkerLost",
    "JobTimeout",
    "TYPE_BASE",
    "problem_type",
    "problem_document",
]

TYPE_BASE = "/problems/"
# Members of the document itself; an error's data never overwrites them (RFC 9457 section 3.2).
STANDARD_MEMBERS = frozenset({"type", "title", "status", "detail", "instance"})
# Attributes an error may carry outside ``data`` that belong in its document.
_ATTRIBUTES = ("line", "column", "value", "field")


class JobsError(Exception):
    """The job could not be created or run."""

    slug: ClassVar[str | None] = None
    title: ClassVar[str | None] = None

    def __init__(self, reason: str | None = None, **data: object) -> None:
        self.reason = reason or (self.__class__.__doc__ or "").strip()
        self.data = data
        super().__init__(self.reason)


class UnknownKind(JobsError):
    """No job kind has this name."""

    slug = "unknown-kind"
    title = "Unknown job kind"


class InvalidJobParams(JobsError):
    """The job's params do not match its kind's schema."""

    slug = "invalid-parameter"
    title = "Invalid parameter"


class UnsafeWebhookUrl(JobsError):
    """Webhook URLs must be https and resolve to public addresses."""

    slug = "unsafe-webhook-url"
    title = "Webhook URL refused"


class InvalidSchedule(JobsError):
    """The cron expression or time zone is not valid."""

    slug = "invalid-schedule"
    title = "Invalid schedule"


class TooManyJobs(JobsError):
    """The tenant has too many queued jobs; wait for some to finish."""

    slug = "too-many-jobs"
    title = "Queued job limit reached"


class Released(JobsError):
    """The worker is shutting down and gave the job back to the queue."""


class WorkerLost(JobsError):
    """The worker running the job stopped answering on every attempt."""

    slug = "worker-lost"
    title = "Worker lost"


class JobTimeout(JobsError):
    """The job ran longer than its kind's time limit and was stopped."""

    slug = "job-timeout"
    title = "Job timed out"


def problem_type(exc: BaseException) -> tuple[str, str] | None:
    """The (slug, title) an exception carries; None for one that carries none (an internal error)."""
    if isinstance(exc, ValidationError):  # pydantic's, from params that no longer validate
        return "invalid-parameter", "Invalid parameter"
    slug, title = getattr(type(exc), "slug", None), getattr(type(exc), "title", None)
    if isinstance(slug, str) and isinstance(title, str):
        return slug, title
    return None


def problem_document(exc: BaseException, *, attempts: int | None = None) -> dict[str, Any]:
    """``type``, ``title``, ``detail`` and extension members for ``exc`` (no HTTP status).

    An exception that carries no problem type becomes ``internal-error`` naming
    the exception's class. ``attempts``, when given, is added (a failed job's runs).
    """
    known = problem_type(exc)
    slug, title = known or ("internal-error", "Internal error")
    detail = getattr(exc, "reason", None) or str(exc) or (title if known else type(exc).__name__)
    doc: dict[str, Any] = {"type": TYPE_BASE + slug, "title": title, "detail": str(detail)}
    if known is None:
        doc["exception"] = type(exc).__name__
    for key, value in _extensions(exc, known is not None).items():
        if key not in doc and key not in STANDARD_MEMBERS:
            doc[key] = value
    if isinstance(exc, ValidationError):
        doc["errors"] = [
            {"loc": [str(p) for p in e["loc"]], "msg": e["msg"], "type": e["type"]} for e in exc.errors()
        ]
    if attempts is not None:
        doc["attempts"] = attempts
    return doc


def _extensions(exc: BaseException, known: bool) -> dict[str, Any]:
    """The error's data: ``data``, and for the service's own errors ``as_dict()`` and a few attributes."""
    raw = getattr(exc, "data", None)
    data: dict[str, Any] = dict(raw) if isinstance(raw, dict) else {}
    if known:
        as_dict = getattr(exc, "as_dict", None)
        if callable(as_dict):
            data.update(as_dict())
        for attr in _ATTRIBUTES:
            if getattr(exc, attr, None) is not None and attr not in data:
                data[attr] = getattr(exc, attr)
        data.pop("reason", None)
    return {str(k): _jsonable(v) for k, v in data.items() if v is not None}


def _jsonable(value: object) -> object:
    if value is None or isinstance(value, (str, int, float, bool)):
        return value
    if isinstance(value, (list, tuple, set, frozenset)):
        return [_jsonable(v) for v in value]
    if isinstance(value, dict):
        return {str(k): _jsonable(v) for k, v in value.items()}
    item = getattr(value, "item", None)
    return item() if callable(item) else str(value)
