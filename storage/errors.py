"""Storage errors: each subclass's docstring is its default message."""

from __future__ import annotations

__all__ = ["StorageError", "NotFound", "Conflict", "LeaseLost"]


class StorageError(Exception):
    """The storage layer could not complete the operation."""

    def __init__(self, reason: str | None = None, **data: object) -> None:
        self.reason = reason or (self.__class__.__doc__ or "").strip()
        self.data = data
        super().__init__(self.reason)


class NotFound(StorageError):
    """The resource does not exist."""


class Conflict(StorageError):
    """The request conflicts with the current state of the resource."""


class LeaseLost(StorageError):
    """The job's lease expired or was taken over by another worker."""
