"""Errors raised by the HTTP layer itself (not by storage, intake or analytics)."""

from __future__ import annotations

__all__ = [
    "ApiError",
    "BadRequest",
    "PayloadTooLarge",
    "UnsupportedMediaType",
    "Unauthorized",
    "Forbidden",
    "RateLimited",
    "InvalidParams",
    "TooManyJobs",
    "JsonLimit",
]


class ApiError(Exception):
    """The request could not be served."""

    def __init__(self, reason: str | None = None, **data: object) -> None:
        self.reason = reason or (self.__class__.__doc__ or "").strip()
        self.data = data
        super().__init__(self.reason)


class BadRequest(ApiError):
    """The request is malformed."""


class InvalidParams(ApiError):
    """The request's parameters are not valid."""


class PayloadTooLarge(ApiError):
    """The request body is larger than this route accepts."""


class UnsupportedMediaType(ApiError):
    """The Content-Type of the body is not one this route reads."""


class Unauthorized(ApiError):
    """A valid bearer API key is required."""


class Forbidden(ApiError):
    """The API key does not have the scope this route needs."""


class RateLimited(ApiError):
    """Too many requests for this API key; retry later."""


class TooManyJobs(ApiError):
    """The tenant has too many queued jobs; wait for some to finish."""


class JsonLimit(ApiError):
    """The JSON body nests too deeply or holds too long a number or string."""
