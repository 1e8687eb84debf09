"""Schemas shared by several resources."""

from __future__ import annotations

from typing import Annotated, Any

from pydantic import BaseModel, BeforeValidator, ConfigDict, Field

__all__ = ["JsonInt", "PositiveInt", "Priority", "Seed", "PerAdopter", "FieldError", "Problem", "PROBLEM_RESPONSES", "Page"]


def _whole_number(value: object) -> object:
    """61.0 is the integer 61 in JSON (JSON Schema agrees); 61.5, "61" and true stay refused."""
    if isinstance(value, float) and value.is_integer():
        return int(value)
    return value


# Integers in JSON bodies: under strict validation (the request models' ``strict=True``) a JSON number
# without a fraction, never a string or a boolean. Bounds go before the validator, so the document
# shows them as minimum and maximum.
_Whole = BeforeValidator(_whole_number)
JsonInt = Annotated[int, _Whole]
PositiveInt = Annotated[int, Field(ge=1), _Whole]
Priority = Annotated[int, Field(ge=-100, le=100), _Whole]
Seed = Annotated[int, Field(ge=0, le=2**63 - 1), _Whole]
PerAdopter = Annotated[int, Field(ge=1, le=1000), _Whole]


class FieldError(BaseModel):
    """One failed check of a request or job params (``validation-error``, ``invalid-parameter``)."""

    loc: list[str] = Field(description="Where: `body`, `query` or `params`, then the field names.")
    msg: str
    type: str


class Problem(BaseModel):
    """RFC 9457 problem details: what went wrong and how to fix it.

    The five standard members are always present; the others are extension members
    that appear when they apply. Unlisted extension members may appear too.
    """

    model_config = ConfigDict(extra="allow")

    type: str = Field(examples=["/problems/not-found"], description="The problem type; README lists them all.")
    title: str = Field(description="Short summary of the problem type.")
    status: int = Field(description="The HTTP status code.")
    detail: str = Field(description="What went wrong with this request, and how to fix it.")
    instance: str = Field(description="The request path.")
    errors: list[FieldError] | None = Field(default=None, description="Every failed check (validation).")
    field: str | None = Field(default=None, description="The parameter, header or column at fault.")
    value: Any = Field(default=None, description="The value at fault.")
    line: int | None = Field(default=None, description="Uploads: the line at fault (1-based).")
    column: str | int | None = Field(default=None, description="Uploads: the column at fault.")
    resource: str | None = Field(default=None, description="not-found: the kind of resource.")
    id: str | None = Field(default=None, description="not-found: the id looked for.")
    limit: int | None = Field(default=None, description="payload-too-large: the limit in bytes.")
    retry_after: int | None = Field(default=None, description="rate-limited, too-many-jobs: seconds to wait.")
    job_id: str | None = Field(default=None, description="result-not-ready: the job.")
    job_status: str | None = Field(default=None, description="result-not-ready: the job's status.")
    depth: int | None = Field(default=None, description="json-limit: how deep the body nests.")
    max_depth: int | None = Field(default=None, description="json-limit: the deepest nesting accepted.")


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
