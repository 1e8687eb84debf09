"""The access log: one JSON line per request, on the ``bellwether.access`` logger.

The line names the route template, not the raw path, so node ids (the
caller's, maybe personal data) stay out of the logs; of the path parameters
only those naming our own resources (:data:`LOGGED_PARAMS`) are written. The
tenant and key id come from the principal the auth dependency left in
``request.state``. Answers of 500 and more are logged at ERROR.
"""

from __future__ import annotations

import logging
import time
from typing import Any

from starlette.types import ASGIApp, Receive, Scope, Send

from ._asgi import StatusRecorder, route_template

__all__ = ["LOGGED_PARAMS", "AccessLog"]

access_log = logging.getLogger("bellwether.access")

#: Path parameters that name our own resources and may be logged (node ids are the caller's, maybe personal).
LOGGED_PARAMS = ("graph_id", "job_id", "schedule_id", "webhook_id", "number")


class AccessLog:
    """Pure ASGI middleware: see the module docstring."""

    def __init__(self, app: ASGIApp) -> None:
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        start = time.perf_counter()
        recorder = StatusRecorder(send)
        try:
            await self.app(scope, receive, recorder)
        finally:
            write_line(scope, recorder.status, time.perf_counter() - start)


def write_line(scope: Scope, status: int, elapsed: float) -> None:
    """Log one request."""
    principal = scope.get("state", {}).get("principal")
    params = scope.get("path_params") or {}
    extra: dict[str, Any] = {
        "method": scope["method"],
        "route": route_template(scope),
        "status": status,
        "duration_ms": round(elapsed * 1000, 2),
        "client": (scope.get("client") or (None,))[0],
    }
    if principal is not None:
        extra["tenant"] = getattr(principal, "tenant_id", None)
        extra["key_id"] = getattr(principal, "key_id", None)
    for name in LOGGED_PARAMS:
        if name in params:
            extra[name] = params[name]
    level = logging.ERROR if status >= 500 else logging.INFO
    access_log.log(level, "request", extra=extra)
