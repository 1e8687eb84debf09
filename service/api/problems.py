"""Every error class mapped to an RFC 9457 problem document, and the handlers.

This is the only module that knows HTTP status codes for errors. Each error
class carries its problem type as data (``slug`` and ``title``, in its errors
module); :data:`PROBLEM_STATUS` gives the HTTP status, and
``service.jobs.errors.problem_document`` builds the document (the worker uses
the same function for a failed job's ``error``, so both read the same). Request
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
from service.usecases import errors as uerr
from storage import errors as serr

from . import errors as apierr

__all__ = [
    "PROBLEM_STATUS",
    "ProblemType",
    "problem_response",
    "install_problem_handlers",
    "problem_for",
    "status_for",
]

log = logging.getLogger("bellwether.api")
MEDIA_TYPE = "application/problem+json"
TYPE_BASE = jerr.TYPE_BASE


class ProblemType(NamedTuple):
    status: int
    slug: str
    title: str


# The one table from error classes to problem types: the class (and every subclass)
# answers this status; its slug and title are the class's own. A class with a slug of
# its own gets its own row, so the table reads like README's list of types.
PROBLEM_STATUS: dict[type[Exception], int] = {
    serr.NotFound: 404,
    serr.Conflict: 409,
    serr.LeaseLost: 409,
    ierr.IntakeError: 422,
    ierr.UploadError: 422,
    ierr.UnsafeXml: 422,
    ierr.EmptyUpload: 422,
    ierr.InvalidEncoding: 422,
    ierr.InvalidOption: 422,
    aerr.UnknownNode: 422,
    aerr.InfeasibleRequest: 422,
    aerr.EmptyGraph: 422,
    aerr.InvalidParameter: 422,
    aerr.Cancelled: 409,
    aerr.TooExpensive: 422,
    aerr.ComputationFailed: 500,
    aerr.AnalyticsError: 500,
    jerr.UnknownKind: 422,
    jerr.InvalidJobParams: 422,
    jerr.UnsafeWebhookUrl: 422,
    jerr.InvalidSchedule: 422,
    uerr.ResultNotReady: 404,
    jerr.TooManyJobs: 429,
    apierr.BadRequest: 400,
    apierr.InvalidParams: 422,
    apierr.JsonLimit: 422,
    apierr.PayloadTooLarge: 413,
    apierr.UnsupportedMediaType: 415,
    apierr.Unauthorized: 401,
    apierr.Forbidden: 403,
    apierr.RateLimited: 429,
}

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


def status_for(cls: type[BaseException]) -> int | None:
    """The status of the nearest class in ``cls``'s MRO that has a row; None when none has."""
    for klass in cls.__mro__:
        if issubclass(klass, Exception) and klass in PROBLEM_STATUS:
            return PROBLEM_STATUS[klass]
    return None


def problem_for(exc: BaseException) -> ProblemType | None:
    status = status_for(type(exc))
    known = jerr.problem_type(exc)
    if status is None or known is None:
        return None
    return ProblemType(status, *known)


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


def install_problem_handlers(app: FastAPI) -> None:
    """Register one handler per family so every error answers a problem document."""

    async def handle_known(request: Request, exc: Exception) -> JSONResponse:
        ptype = problem_for(exc)
        if ptype is None:  # a subclass that carries no problem type: an internal error
            return await handle_unexpected(request, exc)
        headers = None
        if isinstance(exc, (apierr.RateLimited, jerr.TooManyJobs)):
            headers = {"Retry-After": str(int(getattr(exc, "data", {}).get("retry_after", 1)))}
        if isinstance(exc, apierr.Unauthorized):
            headers = {"WWW-Authenticate": 'Bearer realm="bellwether"'}
        if ptype.status >= 500:
            log.error("computation failed: %s", exc, exc_info=exc)
        doc = jerr.problem_document(exc)
        extra = {k: v for k, v in doc.items() if k not in ("type", "title", "detail")}
        return problem_response(ptype, doc["detail"], request.url.path, headers, **extra)

    for cls in PROBLEM_STATUS:
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
