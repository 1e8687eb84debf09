"""Request metrics: requests in flight, and per request its count and duration by route template and status.

The metric objects are :mod:`service.telemetry.metrics`'; ``/metrics`` serves them.
"""

from __future__ import annotations

import time

from starlette.types import ASGIApp, Receive, Scope, Send

from service.telemetry.metrics import service_metrics

from ._asgi import StatusRecorder, route_template

__all__ = ["RequestMetrics"]


class RequestMetrics:
    """Pure ASGI middleware: see the module docstring."""

    def __init__(self, app: ASGIApp) -> None:
        self.app = app
        self.metrics = service_metrics()

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        start = time.perf_counter()
        recorder = StatusRecorder(send)
        self.metrics.http_in_flight.inc()
        try:
            await self.app(scope, receive, recorder)
        finally:
            self.metrics.http_in_flight.dec()
            elapsed = time.perf_counter() - start
            self.metrics.observe_request(scope["method"], route_template(scope), recorder.status, elapsed)
