"""What the operations middleware share: header lookup, route templates, answer status, problem answers."""

from __future__ import annotations

import json
from typing import Any

from starlette.routing import BaseRoute, Match
from starlette.types import Message, Scope, Send

from ..problems import problem_body, problem_for

__all__ = ["StatusRecorder", "header", "route_template", "routes_of", "send_json", "send_problem"]


def header(scope: Scope, name: bytes) -> str | None:
    """The first value of request header ``name`` (lower case bytes), or None."""
    for k, v in scope.get("headers", ()):
        if k == name:
            return str(v.decode("latin-1"))
    return None


def routes_of(scope: Scope) -> list[BaseRoute]:
    """The app's routes, read when asked (routes added after start-up count); Starlette sets ``scope["app"]``.

    Recent FastAPI releases keep an included router as one entry that wraps it
    (``original_router``); its routes are listed in its place, so a request refused
    before routing (429, 413) still finds the route it was for.
    """
    out: list[BaseRoute] = []

    def add(routes: list[BaseRoute]) -> None:
        for r in routes:
            inner = getattr(r, "original_router", None)
            if inner is not None and getattr(inner, "routes", None) is not None:
                add(list(inner.routes))
            else:
                out.append(r)

    add(list(getattr(scope.get("app"), "routes", None) or []))
    return out


def route_template(scope: Scope) -> str:
    """The template of the route that served (or would serve) the request: ``/v1/graphs/{graph_id}``."""
    route = scope.get("route")
    path = getattr(route, "path_format", None) or getattr(route, "path", None)
    if path:
        return str(path)
    for r in routes_of(scope):
        match, _ = r.matches(scope)
        if match == Match.FULL:
            return str(getattr(r, "path_format", None) or getattr(r, "path", "unmatched"))
    return "unmatched"


async def send_problem(scope: Scope, send: Send, error: Exception, headers: dict[str, str] | None = None) -> None:
    """Answer with the problem document ``problems.py`` maps ``error`` to."""
    ptype = problem_for(error)
    assert ptype is not None
    data = {k: v for k, v in getattr(error, "data", {}).items() if v is not None}
    body = problem_body(ptype, str(getattr(error, "reason", error)), scope.get("path", ""), **data)
    await send_json(send, ptype.status, body, headers)


async def send_json(send: Send, status: int, body: dict[str, Any], headers: dict[str, str] | None = None) -> None:
    """Send a whole ``application/problem+json`` answer."""
    raw = json.dumps(body).encode()
    head = [(b"content-type", b"application/problem+json"), (b"content-length", str(len(raw)).encode())]
    head += [(k.lower().encode(), v.encode()) for k, v in (headers or {}).items()]
    if status == 413:
        head.append((b"connection", b"close"))  # the rest of the body is not read
    await send({"type": "http.response.start", "status": status, "headers": head})
    await send({"type": "http.response.body", "body": raw, "more_body": False})


class StatusRecorder:
    """Wraps ``send``; ``status`` is the answer's status once it started, 500 until then."""

    def __init__(self, send: Send) -> None:
        self._send = send
        self.status = 500
        self.started = False

    async def __call__(self, message: Message) -> None:
        if message["type"] == "http.response.start":
            self.started = True
            self.status = int(message["status"])
        await self._send(message)
