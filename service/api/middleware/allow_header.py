"""``Allow`` on a 405 lists every method the path takes.

Starlette names only the methods of the first route that matched the path;
where several routes share a path (one per method) the answer's ``Allow``
is replaced by the union of all of them.
"""

from __future__ import annotations

from starlette.types import ASGIApp, Message, Receive, Scope, Send

from ._asgi import routes_of

__all__ = ["AllowHeader", "allowed_methods"]


class AllowHeader:
    """Pure ASGI middleware: see the module docstring."""

    def __init__(self, app: ASGIApp) -> None:
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return

        async def send_with_allow(message: Message) -> None:
            if message["type"] == "http.response.start" and int(message["status"]) == 405:
                message = dict(message)
                allow = allowed_methods(scope, scope.get("path", "")).encode()
                message["headers"] = [*[(k, v) for k, v in message.get("headers", []) if k.lower() != b"allow"], (b"allow", allow)]
            await send(message)

        await self.app(scope, receive, send_with_allow)


def allowed_methods(scope: Scope, path: str) -> str:
    """The methods of every route whose pattern matches ``path``, sorted and comma separated."""
    methods: set[str] = set()
    for r in routes_of(scope):
        regex = getattr(r, "path_regex", None)
        if regex is not None and regex.match(path):
            methods.update(getattr(r, "methods", None) or ())
    return ", ".join(sorted(methods))
