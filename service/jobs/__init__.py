"""Background jobs: the kind registry, the worker, retries, schedules and webhooks.

May import ``service.analytics``, ``service.usecases.loading`` and ``storage``; never
the HTTP layer. Nothing here reads settings: callers pass plain values
(:class:`service.jobs.worker.WorkerConfig`).
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from .clock import Clock, FakeClock, SystemClock
    from .kinds import JobKind, TaskContext, TaskOutput
    from .registry import REGISTRY, get_kind, parse_params, register
    from .retry import RetryDecision, RetryPolicy
    from .worker import RunOutcome, Worker, WorkerConfig

# The names below are loaded on first use (PEP 562), not when a submodule such as
# ``service.jobs.errors`` is imported: the registry imports every task module, and a task
# imports its use case, so an eager import here would be a circle for any use case that
# imports from this package.
_HOME = {
    "Clock": "clock", "FakeClock": "clock", "SystemClock": "clock",
    "JobKind": "kinds", "TaskContext": "kinds", "TaskOutput": "kinds",
    "REGISTRY": "registry", "get_kind": "registry", "parse_params": "registry", "register": "registry",
    "RetryDecision": "retry", "RetryPolicy": "retry",
    "RunOutcome": "worker", "Worker": "worker", "WorkerConfig": "worker",
}


def __getattr__(name: str) -> Any:
    home = _HOME.get(name)
    if home is None:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    return getattr(importlib.import_module(f"{__name__}.{home}"), name)


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
