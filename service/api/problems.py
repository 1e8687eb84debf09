"""Every error class mapped to an RFC 9457 problem document, and the handlers.

This is the only module that knows HTTP status codes for errors. Request
validation and routing errors go through the same handler, so no other error
shape leaves the service.
"""

from __future__ import annotations

import logging
from typing import Any, NamedTuple

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse
from starlette.exceptions import HTTPException as StarletteHTTPException

from service.analytics import errors as aerr
from service.intake import errors as ierr
from service.jobs import errors as jerr
from storage import errors as serr

from . import errors as apierr

__all__ = ["PROBLEM_TYPES", "ProblemType", "problem_response", "install_problem_handlers", "problem_for"]

log = logging.getLogger("bellwether.api")
MEDIA_TYPE = "application/problem+json"
TYPE_BASE = "/problems/"


class ProblemType(NamedTuple):
    status: int
    slug: str
    title: str


# Order matters: subclasses before their bases.
PROBLEM_TYPES: list[tuple[type[Exception], ProblemType]] = [
    (serr.NotFound, ProblemType(404, "not-found", "Resource not found")),
    (serr.Conflict, ProblemType(409, "conflict", "Conflict with the current state")),
    (serr.LeaseLost, ProblemType(409, "lease-lost", "Job lease lost")),
    (ierr.UnsafeXml, ProblemType(422, "unsafe-xml", "XML with DTD or entities refused")),
    (ierr.EmptyUpload, ProblemType(422, "empty-upload", "Upload holds no records")),
    (ierr.InvalidEncoding, ProblemType(422, "invalid-encoding", "Text encoding not declared")),
    (ierr.UploadError, ProblemType(422, "invalid-upload", "Upload could not be read")),
    (ierr.InvalidOption, ProblemType(422, "invalid-parameter", "Invalid parameter")),
    (ierr.IntakeError, ProblemType(422, "invalid-upload", "Upload could not be read")),
    (aerr.UnknownNode, ProblemType(422, "unknown-node", "Unknown node id")),
    (aerr.InfeasibleRequest, ProblemType(422, "infeasible-request", "Rules cannot be satisfied")),
    (aerr.EmptyGraph, ProblemType(422, "empty-graph", "Graph is empty")),
    (aerr.InvalidParameter, ProblemType(422, "invalid-parameter", "Invalid parameter")),
    (aerr.Cancelled, ProblemType(409, "cancelled", "Computation cancelled")),
    (aerr.TooExpensive, ProblemType(422, "too-expensive", "Job too expensive")),
    (aerr.ComputationFailed, ProblemType(500, "computation-failed", "Computation failed")),
    (jerr.UnknownKind, ProblemType(422, "unknown-kind", "Unknown job kind")),
    (jerr.InvalidJobParams, ProblemType(422, "invalid-parameter", "Invalid parameter")),
    (jerr.UnsafeWebhookUrl, ProblemType(422, "unsafe-webhook-url", "Webhook URL refused")),
    (jerr.InvalidSchedule, ProblemType(422, "invalid-schedule", "Invalid schedule")),
    (jerr.ResultNotReady, ProblemType(404, "result-not-ready", "Result not available")),
    (apierr.BadRequest, ProblemType(400, "bad-request", "Bad request")),
    (apierr.InvalidParams, ProblemType(422, "invalid-parameter", "Invalid parameter")),
    (apierr.JsonLimit, ProblemType(422, "json-limit", "JSON body too deep or too large a value")),
    (apierr.PayloadTooLarge, ProblemType(413, "payload-too-large", "Request body too large")),
    (apierr.UnsupportedMediaType, ProblemType(415, "unsupported-media-type", "Unsupported media type")),
    (apierr.Unauthorized, ProblemType(401, "unauthorized", "Authentication required")),
    (apierr.Forbidden, ProblemType(403, "forbidden", "Scope missing")),
    (apierr.RateLimited, ProblemType(429, "rate-limited", "Rate limit exceeded")),
    (apierr.TooManyJobs, ProblemType(429, "too-many-jobs", "Queued job limit reached")),
]

VALIDATION = ProblemType(422, "validation-error", "Request validation failed")
INTERNAL = ProblemType(500, "internal-error", "Internal server error")
HTTP_SLUGS = {
    400: ("bad-request", "Bad request"),
    404: ("not-found", "Resource not found"),
    405: ("method-not-allowed", "Method not allowed"),
    406: ("not-acceptable", "Not acceptable"),
    413: ("payload-too-large", "Request body too large"),
    415: ("unsupported-media-type", "Unsupported media type"),
}


def problem_for(exc: Exception) -> ProblemType | None:
    for cls, ptype in PROBLEM_TYPES:
        if isinstance(exc, cls):
            return ptype
    return None


def problem_body(ptype: ProblemType, detail: str, instance: str, **extra: Any) -> dict[str, Any]:
    body: dict[str, Any] = {
        "type": TYPE_BASE + ptype.slug,
        "title": ptype.title,
        "status": ptype.status,
        "detail": detail,
        "instance": instance,
    }
    # Extension members never overwrite the standard ones (RFC 9457 section 3.2).
    body.update({k: v for k, v in extra.items() if v is not None and k not in body})
    return body


def problem_response(
    ptype: ProblemType, detail: str, instance: str, headers: dict[str, str] | None = None, **extra: Any
) -> JSONResponse:
    return JSONResponse(
        problem_body(ptype, detail, instance, **extra),
        status_code=ptype.status,
        media_type=MEDIA_TYPE,
        headers=headers,
    )


def _jsonable(value: object) -> object:
    if isinstance(value, (str, int, float, bool)) or value is None:
        return value
    if isinstance(value, (list, tuple)):
        return [_jsonable(v) for v in value]
    if isinstance(value, dict):
        return {str(k): _jsonable(v) for k, v in value.items()}
    try:
        return value.item()  # type: ignore[attr-defined]
    except AttributeError:
        return str(value)


def error_extensions(exc: Exception) -> dict[str, Any]:
    data = dict(getattr(exc, "data", {}) or {})
    as_dict = getattr(exc, "as_dict", None)
    if callable(as_dict):
        data.update(as_dict())
    for attr in ("line", "column", "value", "field"):
        if getattr(exc, attr, None) is not None and attr not in data:
            data[attr] = getattr(exc, attr)
    data.pop("reason", None)
    return {k: _jsonable(v) for k, v in data.items() if v is not None}


def install_problem_handlers(app: FastAPI) -> None:
    """Register one handler per family so every error answers a problem document."""

    async def handle_known(request: Request, exc: Exception) -> JSONResponse:
        ptype = problem_for(exc)
        assert ptype is not None
        headers = None
        if isinstance(exc, (apierr.RateLimited, apierr.TooManyJobs)):
            headers = {"Retry-After": str(int(getattr(exc, "data", {}).get("retry_after", 1)))}
        if isinstance(exc, apierr.Unauthorized):
            headers = {"WWW-Authenticate": 'Bearer realm="bellwether"'}
        if ptype.status >= 500:
            log.error("computation failed: %s", exc, exc_info=exc)
        detail = getattr(exc, "reason", None) or str(exc) or ptype.title
        return problem_response(ptype, detail, request.url.path, headers, **error_extensions(exc))

    for cls, _ in PROBLEM_TYPES:
        app.add_exception_handler(cls, handle_known)

    async def handle_validation(request: Request, exc: Exception) -> JSONResponse:
        assert isinstance(exc, RequestValidationError)
        errors = [
            {
                "loc": [str(p) for p in e.get("loc", ())],
                "msg": str(e.get("msg", "")),
                "type": str(e.get("type", "")),
            }
            for e in exc.errors()
        ]
        first = errors[0] if errors else {"loc": [], "msg": "invalid request"}
        where = ".".join(first["loc"])
        detail = f"{where}: {first['msg']}" if where else str(first["msg"])
        return problem_response(VALIDATION, detail, request.url.path, errors=errors)

    async def handle_http(request: Request, exc: Exception) -> JSONResponse:
        assert isinstance(exc, StarletteHTTPException)
        slug, title = HTTP_SLUGS.get(exc.status_code, ("http-error", "HTTP error"))
        ptype = ProblemType(exc.status_code, slug, title)
        detail = exc.detail if isinstance(exc.detail, str) else title
        return problem_response(ptype, detail, request.url.path, dict(exc.headers or {}) or None)

    async def handle_unexpected(request: Request, exc: Exception) -> JSONResponse:
        log.exception("unhandled error on %s", request.url.path, exc_info=exc)
        return problem_response(INTERNAL, "the service failed to answer; see its logs", request.url.path)

    app.add_exception_handler(RequestValidationError, handle_validation)
    app.add_exception_handler(StarletteHTTPException, handle_http)
    app.add_exception_handler(Exception, handle_unexpected)
