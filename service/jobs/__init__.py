"""Background jobs: the kind registry, the worker, retries, schedules and webhooks.

May import ``service.analytics``, ``service.usecases.loading`` and ``storage``; never
the HTTP layer. Nothing here reads settings: callers pass plain values
(:class:`service.jobs.worker.WorkerConfig`).
"""

from __future__ import annotations

from .clock import Clock, FakeClock, SystemClock
from .kinds import JobKind, TaskContext, TaskOutput
from .registry import REGISTRY, get_kind, parse_params, register
from .retry import RetryDecision, RetryPolicy
from .worker import RunOutcome, Worker, WorkerConfig

__all__ = [
    "Clock",
    "FakeClock",
    "SystemClock",
    "JobKind",
    "TaskContext",
    "TaskOutput",
    "REGISTRY",
    "get_kind",
    "parse_params",
    "register",
    "RetryDecision",
    "RetryPolicy",
    "RunOutcome",
    "Worker",
    "WorkerConfig",
]
