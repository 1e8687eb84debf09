"""Errors of the job layer: each subclass's docstring is its default message."""

from __future__ import annotations

__all__ = [
    "JobsError",
    "UnknownKind",
    "InvalidJobParams",
    "UnsafeWebhookUrl",
    "InvalidSchedule",
    "ResultNotReady",
    "Released",
]


class JobsError(Exception):
    """The job could not be created or run."""

    def __init__(self, reason: str | None = None, **data: object) -> None:
        self.reason = reason or (self.__class__.__doc__ or "").strip()
        self.data = data
        super().__init__(self.reason)


class UnknownKind(JobsError):
    """No job kind has this name."""


class InvalidJobParams(JobsError):
    """The job's params do not match its kind's schema."""


class UnsafeWebhookUrl(JobsError):
    """Webhook URLs must be https and resolve to public addresses."""


class InvalidSchedule(JobsError):
    """The cron expression or time zone is not valid."""


class ResultNotReady(JobsError):
    """The result exists once the job has succeeded."""


class Released(JobsError):
    """The worker is shutting down and gave the job back to the queue."""
