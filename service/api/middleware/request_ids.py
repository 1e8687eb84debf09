"""Request ids: every request gets one, every answer and every log line carries it.

Taken from ``X-Request-ID`` when it is a short token (letters, digits,
``._:-``; at most 128), else a new UUID; echoed in the answer's
``X-Request-ID``, kept in ``request.state.request_id`` and attached to every
log record written while the request is served
(:class:`service.telemetry.logs.RequestIdFilter` reads :data:`service.telemetry.logs.request_id_var`).
Outermost, so that the other middleware's log lines and answers carry it too.
"""

from __future__ import annotations

import re
import uuid

from starlette.types import ASGIApp, Message, Receive, Scope, Send

from service.telemetry.logs import request_id_var

from ._asgi import header

__all__ = ["REQUEST_ID_HEADER", "RequestIds"]

REQUEST_ID_HEADER = "x-request-id"
_REQUEST_ID_OK = re.compile(r"^[A-Za-z0-9._:\-]{1,128}$")


class RequestIds:
    """Pure ASGI middleware: see the module docstring."""

    def __init__(self, app: ASGIApp) -> None:
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        incoming = header(scope, REQUEST_ID_HEADER.encode())
        rid = incoming if incoming and _REQUEST_ID_OK.match(incoming) else uuid.uuid4().hex
        scope.setdefault("state", {})["request_id"] = rid
        name, value = REQUEST_ID_HEADER.encode(), rid.encode()

        async def send_with_id(message: Message) -> None:
            if message["type"] == "http.response.start":
                message = dict(message)
                message["headers"] = [*[(k, v) for k, v in message.get("headers", []) if k.lower() != name], (name, value)]
            await send(message)

        token = request_id_var.set(rid)
        try:
            await self.app(scope, receive, send_with_id)
        finally:
            request_id_var.reset(token)
