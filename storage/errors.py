"""Storage errors: each subclass's docstring is its default message.

Each subclass carries its problem type as data (``slug`` and ``title``); the
service builds the problem document from them. Storage never writes a problem
document itself. ``StorageError`` has no problem type (it answers as an internal
error).
"""

from __future__ import annotations

from typing import ClassVar

__all__ = ["StorageError", "NotFound", "Conflict", "LeaseLost"]


class StorageError(Exception):
    """The storage layer could not complete the operation."""

    slug: ClassVar[str | None] = None
    title: ClassVar[str | None] = None

    def __init__(self, reason: str | None = None, **data: object) -> None:
        self.reason = reason or (self.__class__.__doc__ or "").strip()
        self.data = data
        super().__init__(self.reason)


class NotFound(StorageError):
    """The resource does not exist."""

    slug = "not-found"
    title = "Resource not found"


class Conflict(StorageError):
    """The request conflicts with the current state of the resource."""

    slug = "conflict"
    title = "Conflict with the current state"


class LeaseLost(StorageError):
    """The job's lease expired or was taken over by another worker."""

    slug = "lease-lost"
    title = "Job lease lost"
