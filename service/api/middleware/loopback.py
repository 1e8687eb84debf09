"""With authentication off, only loopback clients reach ``/v1``.

``bellwether serve`` refuses to bind anywhere but loopback when
``auth_disabled`` is set; this covers other launchers. Anyone else gets a
403 ``forbidden`` problem. Operations endpoints (``/healthz``, ``/metrics``)
are not guarded here.
"""

from __future__ import annotations

import ipaddress

from starlette.types import ASGIApp, Receive, Scope, Send

from ..errors import Forbidden
from ._asgi import send_problem

__all__ = ["LoopbackOnly", "is_loopback"]


def is_loopback(host: str | None) -> bool:
    """Whether a client address is 127.0.0.0/8 or ::1 (also IPv4-mapped)."""
    if not host:
        return False
    try:
        ip = ipaddress.ip_address(host.split("%", 1)[0])
    except ValueError:
        return False
    mapped = getattr(ip, "ipv4_mapped", None)
    return bool(ip.is_loopback or (mapped is not None and mapped.is_loopback))


class LoopbackOnly:
    """Pure ASGI middleware: see the module docstring. ``auth_disabled`` False lets everyone through."""

    def __init__(self, app: ASGIApp, *, auth_disabled: bool) -> None:
        self.app = app
        self.auth_disabled = auth_disabled

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if (
            self.auth_disabled
            and scope["type"] == "http"
            and scope.get("path", "").startswith("/v1")
            and not is_loopback((scope.get("client") or (None, None))[0])
        ):
            reason = "authentication is disabled on this server, which then serves loopback clients only"
            await send_problem(scope, send, Forbidden(reason))
            return
        await self.app(scope, receive, send)
