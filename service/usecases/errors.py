"""Errors a use case raises that are neither the engine's nor storage's.

Each class carries its problem type (``slug``, ``title``) as the other error
families do; the API's status table and the worker's problem documents read them.
"""

from __future__ import annotations

from typing import ClassVar

__all__ = ["UsecaseError", "ResultNotReady"]


class UsecaseError(Exception):
    """The capability could not be served as asked."""

    slug: ClassVar[str | None] = None
    title: ClassVar[str | None] = None

    def __init__(self, reason: str | None = None, **data: object) -> None:
        self.reason = reason or (self.__class__.__doc__ or "").strip()
        self.data = data
        super().__init__(self.reason)


class ResultNotReady(UsecaseError):
    """The result exists once the job has succeeded."""

    slug = "result-not-ready"
    title = "Result not available"
