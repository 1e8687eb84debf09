"""Conditional requests: ETags compared as If-None-Match asks (RFC 9110 13.1.2)."""

from __future__ import annotations

__all__ = ["etag_matches"]


def etag_matches(if_none_match: str | None, etag: str) -> bool:
    """Weak comparison (RFC 9110 13.1.2), as If-None-Match uses."""
    if not if_none_match:
        return False
    if if_none_match.strip() == "*":
        return True
    bare = etag.removeprefix("W/")
    return any(tag.strip().removeprefix("W/") == bare for tag in if_none_match.split(","))
