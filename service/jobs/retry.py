"""Retrying is a value: a policy looks at a failure and returns a RetryDecision or None.

Permanent failures (the request itself is wrong, or the data is) fail the
job at once: every :class:`service.analytics.errors.AnalyticsError` and use-case
error, a missing graph or version, params that no longer validate. Anything else
(database hiccups, I/O, memory, an unexpected exception) is taken to be
transient and retried with exponential backoff until ``max_attempts``.

The document stored in ``job.error`` comes from
:func:`service.jobs.errors.problem_document`, the function the API uses too.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime, timedelta

from pydantic import ValidationError

from service.analytics import errors as aerr
from service.usecases import errors as uerr
from storage import errors as serr

from . import errors as jerr

__all__ = ["RetryDecision", "RetryPolicy", "is_permanent"]

PERMANENT: tuple[type[BaseException], ...] = (
    aerr.AnalyticsError,
    serr.NotFound,
    jerr.JobsError,
    uerr.UsecaseError,
    ValidationError,
)


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
