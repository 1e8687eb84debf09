"""Body limits on ``/v1``: the size of every body, and the shape of a JSON one.

Uploads (:data:`UPLOAD_ROUTES`) pass untouched: the spool limits them to
``max_upload_bytes`` while streaming them to disk. Every other body is read
here, counted as it arrives (a missing or false ``Content-Length`` does not
get past it), up to ``max_body_bytes``, and answered 413
``payload-too-large`` past it (with ``Connection: close``: the rest is not
read). A whole JSON body is then measured (:mod:`service.api.json_limits`):
too deep a nesting, too long a number or string is the 422 ``json-limit``
problem. A body within the limits reaches the route intact.
"""

from __future__ import annotations

import re

from starlette.types import ASGIApp, Message, Receive, Scope, Send

from ..errors import JsonLimit, PayloadTooLarge
from ..json_limits import is_json_body, measure
from ._asgi import header, send_problem

__all__ = ["UPLOAD_ROUTES", "BodyLimits", "is_upload"]

#: (method, path pattern) of the routes whose body is an upload (limit: ``max_upload_bytes``, in the spool).
UPLOAD_ROUTES: tuple[tuple[str, re.Pattern[str]], ...] = (
    ("POST", re.compile(r"^/v1/graphs/[^/]+/versions/?$")),
)


def is_upload(method: str, path: str) -> bool:
    """Whether the request's body is an upload (the spool limits it, not this middleware)."""
    return any(method == m and rx.match(path) for m, rx in UPLOAD_ROUTES)


class BodyLimits:
    """Pure ASGI middleware: see the module docstring."""

    def __init__(self, app: ASGIApp, *, max_body_bytes: int) -> None:
        self.app = app
        self.limit = int(max_body_bytes)

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if (
            scope["type"] != "http"
            or not scope.get("path", "").startswith("/v1")
            or is_upload(scope["method"], scope["path"])
        ):
            await self.app(scope, receive, send)
            return
        limit = self.limit
        declared = header(scope, b"content-length")
        chunked = header(scope, b"transfer-encoding") is not None
        if declared is not None and declared.strip().isdigit():
            if int(declared) > limit:
                error = PayloadTooLarge(f"body of {int(declared)} bytes exceeds the limit of {limit} bytes", limit=limit)
                await send_problem(scope, send, error)
                return
            if int(declared) == 0 and not chunked:
                await self.app(scope, receive, send)
                return
        elif not chunked:
            await self.app(scope, receive, send)
            return
        # Read the (small) body here, counting what really arrives.
        chunks: list[bytes] = []
        size = 0
        while True:
            message = await receive()
            if message["type"] != "http.request":  # client gone: let the app see it
                pending: list[Message] = [message]
                break
            body = message.get("body", b"")
            size += len(body)
            if size > limit:
                await send_problem(scope, send, PayloadTooLarge(f"body exceeds the limit of {limit} bytes", limit=limit))
                return
            chunks.append(body)
            if not message.get("more_body", False):
                whole = b"".join(chunks)
                if whole and is_json_body(header(scope, b"content-type")):
                    found = measure(whole).problem()
                    if found is not None:
                        await send_problem(scope, send, JsonLimit(found[0], **found[1]))
                        return
                pending = [{"type": "http.request", "body": whole, "more_body": False}]
                break

        async def replay() -> Message:
            if pending:
                return pending.pop(0)
            return await receive()

        await self.app(scope, replay, send)
