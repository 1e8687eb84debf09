"""Errors raised by the HTTP layer itself (not by storage, intake or analytics).

Each class carries its problem type as data (``slug``, ``title``); the HTTP status
of each is in ``problems.py``'s table. ``ApiError`` itself has none.
"""

from __future__ import annotations

from typing import ClassVar

__all__ = [
    "ApiError",
    "BadRequest",
    "PayloadTooLarge",
    "UnsupportedMediaType",
    "Unauthorized",
    "Forbidden",
    "RateLimited",
    "InvalidParams",
    "JsonLimit",
]


class ApiError(Exception):
    """The request could not be served."""

    slug: ClassVar[str | None] = None
    title: ClassVar[str | None] = None

    def __init__(self, reason: str | None = None, **data: object) -> None:
        self.reason = reason or (self.__class__.__doc__ or "").strip()
        self.data = data
        super().__init__(self.reason)


class BadRequest(ApiError):
    """The request is malformed."""

    slug = "bad-request"
    title = "Bad request"


class InvalidParams(ApiError):
    """The request's parameters are not valid."""

    slug = "invalid-parameter"
    title = "Invalid parameter"


class PayloadTooLarge(ApiError):
    """The request body is larger than this route accepts."""

    slug = "payload-too-large"
    title = "Request body too large"


class UnsupportedMediaType(ApiError):
    """The Content-Type of the body is not one this route reads."""

    slug = "unsupported-media-type"
    title = "Unsupported media type"


class Unauthorized(ApiError):
    """A valid bearer API key is required."""

    slug = "unauthorized"
    title = "Authentication required"


class Forbidden(ApiError):
    """The API key does not have the scope this route needs."""

    slug = "forbidden"
    title = "Scope missing"


class RateLimited(ApiError):
    """Too many requests for this API key; retry later."""

    slug = "rate-limited"
    title = "Rate limit exceeded"


class JsonLimit(ApiError):
    """The JSON body nests too deeply or holds too long a number or string."""

    slug = "json-limit"
    title = "JSON body too deep or too large a value"
