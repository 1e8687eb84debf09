"""Unexpected errors: an exception that escapes the app is logged and answered as a problem.

Logged on ``bellwether.api`` with the route template (and, being inside
:mod:`.request_ids`, the request id), and answered with the same
``internal-error`` problem as ``problems.py``'s handler, whose detail says
nothing of the exception. Once the answer has started it can no longer be
replaced: the exception goes on to the server.
"""

from __future__ import annotations

import logging

from starlette.types import ASGIApp, Receive, Scope, Send

from ..problems import INTERNAL, problem_body
from ._asgi import StatusRecorder, route_template, send_json

__all__ = ["InternalErrors"]

log = logging.getLogger("bellwether.api")


class InternalErrors:
    """Pure ASGI middleware: see the module docstring."""

    def __init__(self, app: ASGIApp) -> None:
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        recorder = StatusRecorder(send)
        try:
            await self.app(scope, receive, recorder)
        except Exception as exc:
            if recorder.started:
                raise
            log.exception("unhandled error", extra={"route": route_template(scope)}, exc_info=exc)
            path = scope.get("path", "")
            await send_json(send, 500, problem_body(INTERNAL, "the service failed to answer; see its logs", path))
