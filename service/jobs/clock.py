"""Clocks: the system clock, and a fake one tests move by hand."""

from __future__ import annotations

import threading
from datetime import UTC, datetime, timedelta
from typing import Protocol

__all__ = ["Clock", "SystemClock", "FakeClock"]


class Clock(Protocol):
    def now(self) -> datetime:
        """The current time, timezone-aware UTC."""
        ...


class SystemClock:
    def now(self) -> datetime:
        return datetime.now(UTC)


class FakeClock:
    """A clock that only moves when told to (thread-safe)."""

    def __init__(self, start: datetime | None = None) -> None:
        self._now = start or datetime(2030, 1, 1, tzinfo=UTC)
        self._lock = threading.Lock()

    def now(self) -> datetime:
        with self._lock:
            return self._now

    def advance(self, seconds: float) -> datetime:
        with self._lock:
            self._now += timedelta(seconds=seconds)
            return self._now

    def set(self, when: datetime) -> None:
        with self._lock:
            self._now = when
