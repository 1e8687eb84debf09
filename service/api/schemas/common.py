"""Schemas shared by several resources."""

from __future__ import annotations

from typing import Any

from pydantic import BaseModel, ConfigDict, Field

__all__ = ["Problem", "PROBLEM_RESPONSES", "Page"]


class Problem(BaseModel):
    """RFC 9457 problem details."""

    model_config = ConfigDict(extra="allow")

    type: str = Field(examples=["/problems/not-found"])
    title: str
    status: int
    detail: str
    instance: str


def _problem(description: str) -> dict[str, Any]:
    return {"description": description, "model": Problem, "content": {"application/problem+json": {}}}


PROBLEM_RESPONSES: dict[int | str, dict[str, Any]] = {
    400: _problem("Malformed request"),
    401: _problem("Missing or invalid API key"),
    403: _problem("The key lacks the scope"),
    404: _problem("Not found"),
    409: _problem("Conflict"),
    413: _problem("Body too large"),
    415: _problem("Unsupported media type"),
    422: _problem("Invalid input"),
    429: _problem("Rate limited"),
}


class Page(BaseModel):
    next_cursor: str | None = Field(default=None, description="Pass as `cursor` for the next page.")
