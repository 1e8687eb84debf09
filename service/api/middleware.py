"""Operations middleware: request ids, JSON logs, metrics, body limits, rate limits.

One pure ASGI middleware, outermost after Starlette's error middleware, does
for every request, in order:

1. **Request id**: taken from ``X-Request-ID`` when it is a short token
   (letters, digits, ``._:-``; at most 128), else a new UUID; echoed in the
   answer's ``X-Request-ID`` and attached to every log record written while
   the request is served (:class:`RequestIdFilter`).
2. **Loopback guard**: with ``auth_disabled`` only loopback clients reach
   ``/v1`` (``serve`` refuses to bind elsewhere; this covers other launchers).
3. **Rate limit** on ``/v1``: a token bucket per presented bearer key (per
   client address when there is none), ``rate_limit_per_second`` refilled
   up to ``rate_limit_burst``; an empty bucket answers ``429`` with
   ``Retry-After``. Buckets live in the process: with M API processes a key
   gets up to M times the rate (README, Operations).
4. **Body limit**: uploads (:data:`UPLOAD_ROUTES`) are limited by the spool
   (``max_upload_bytes``); every other body is read here up to
   ``max_body_bytes``, counted on the stream (a missing or false
   ``Content-Length`` does not get past it), and answered ``413`` past it.
   A JSON body is then measured (:mod:`service.api.json_limits`): too deep
   a nesting, too long a number or string is the ``json-limit`` problem.
5. **Metrics and the access log**: one JSON line per request (route
   template, not the raw path, so node ids, which may be personal data,
   stay out of the logs) and the request counters and histograms of
   :mod:`service.metrics`.

An exception that escapes the app is logged with the request id and
answered with the same ``internal-error`` problem as ``problems.py``'s.
"""

from __future__ import annotations

import hashlib
import ipaddress
import json
import logging
import math
import re
import threading
import time
import uuid
from collections import OrderedDict
from collections.abc import Callable
from typing import Any

from starlette.routing import BaseRoute, Match
from starlette.types import ASGIApp, Message, Receive, Scope, Send

from service.logs import JsonFormatter, RequestIdFilter, configure_logging, request_id_var
from service.metrics import service_metrics

from .errors import Forbidden, JsonLimit, PayloadTooLarge, RateLimited
from .json_limits import is_json_body, measure
from .problems import INTERNAL, problem_body, problem_for

__all__ = [
    "UPLOAD_ROUTES",
    "JsonFormatter",
    "OperationsMiddleware",
    "RequestIdFilter",
    "TokenBuckets",
    "configure_logging",
    "is_loopback",
    "request_id_var",
]

log = logging.getLogger("bellwether.api")
access_log = logging.getLogger("bellwether.access")

REQUEST_ID_HEADER = "x-request-id"
_REQUEST_ID_OK = re.compile(r"^[A-Za-z0-9._:\-]{1,128}$")
#: (method, path pattern) of the routes whose body is an upload (limit: ``max_upload_bytes``, in the spool).
UPLOAD_ROUTES: tuple[tuple[str, re.Pattern[str]], ...] = (
    ("POST", re.compile(r"^/v1/graphs/[^/]+/versions/?$")),
)
#: Path parameters that name our own resources and may be logged (node ids are the caller's, maybe personal).
LOGGED_PARAMS = ("graph_id", "job_id", "schedule_id", "webhook_id", "number")



# -- rate limit -----------------------------------------------------------------------


class TokenBuckets:
    """Token buckets by key: ``rate`` tokens a second, at most ``burst`` held.

    At most ``max_keys`` buckets are kept; the least recently used go first
    (a forgotten bucket comes back full, which only ever favours the caller).
    """

    def __init__(
        self, rate: float, burst: int, *, max_keys: int = 10_000, clock: Callable[[], float] = time.monotonic
    ) -> None:
        self.rate = float(rate)
        self.burst = float(max(burst, 1))
        self.max_keys = max_keys
        self.clock = clock
        self._buckets: OrderedDict[str, tuple[float, float]] = OrderedDict()
        self._lock = threading.Lock()

    def take(self, key: str) -> float:
        """Spend one token; return 0.0 when allowed, else the seconds until one is available."""
        now = self.clock()
        with self._lock:
            tokens, last = self._buckets.pop(key, (self.burst, now))
            tokens = min(self.burst, tokens + (now - last) * self.rate)
            if tokens >= 1.0:
                wait, tokens = 0.0, tokens - 1.0
            else:
                wait = (1.0 - tokens) / self.rate
            self._buckets[key] = (tokens, now)
            while len(self._buckets) > self.max_keys:
                self._buckets.popitem(last=False)
        return wait


# -- helpers -------------------------------------------------------------------------


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


def _header(scope: Scope, name: bytes) -> str | None:
    for k, v in scope.get("headers", ()):
        if k == name:
            return str(v.decode("latin-1"))
    return None


def _route_template(routes: list[BaseRoute], scope: Scope) -> str:
    route = scope.get("route")
    path = getattr(route, "path_format", None) or getattr(route, "path", None)
    if path:
        return str(path)
    for r in routes:
        match, _ = r.matches(scope)
        if match == Match.FULL:
            return str(getattr(r, "path_format", None) or getattr(r, "path", "unmatched"))
    return "unmatched"


def _allowed_methods(routes: list[BaseRoute], path: str) -> str:
    methods: set[str] = set()
    for r in routes:
        regex = getattr(r, "path_regex", None)
        if regex is not None and regex.match(path):
            methods.update(getattr(r, "methods", None) or ())
    return ", ".join(sorted(methods))


def _is_upload(method: str, path: str) -> bool:
    return any(method == m and rx.match(path) for m, rx in UPLOAD_ROUTES)


class _Rejected(Exception):
    def __init__(self, error: Exception, headers: dict[str, str] | None = None) -> None:
        self.error = error
        self.headers = headers or {}


# -- the middleware --------------------------------------------------------------------


class OperationsMiddleware:
    """See the module docstring. ``settings`` is the app's; ``routes`` gives route templates for early answers."""

    def __init__(self, app: ASGIApp, *, settings: Any, routes: Callable[[], list[BaseRoute]]) -> None:
        self.app = app
        self.settings = settings
        self.routes = routes
        self.metrics = service_metrics()
        rate = float(settings.rate_limit_per_second)
        self.buckets = TokenBuckets(rate, settings.rate_limit_burst) if rate > 0 else None

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        start = time.perf_counter()
        incoming = _header(scope, b"x-request-id")
        rid = incoming if incoming and _REQUEST_ID_OK.match(incoming) else uuid.uuid4().hex
        token = request_id_var.set(rid)
        state = scope.setdefault("state", {})
        state["request_id"] = rid
        method, path = scope["method"], scope.get("path", "")
        status_box = [500]
        started = [False]
        rid_header = (REQUEST_ID_HEADER.encode(), rid.encode())

        async def send_wrapper(message: Message) -> None:
            if message["type"] == "http.response.start":
                started[0] = True
                status_box[0] = int(message["status"])
                message = dict(message)
                replaced = {rid_header[0]}
                added = [rid_header]
                if status_box[0] == 405:
                    # Starlette names only the first route that matched the path; list them all.
                    replaced.add(b"allow")
                    added.append((b"allow", _allowed_methods(self.routes(), path).encode()))
                message["headers"] = [
                    *[(k, v) for k, v in message.get("headers", []) if k.lower() not in replaced],
                    *added,
                ]
            await send(message)

        self.metrics.http_in_flight.inc()
        try:
            try:
                if path.startswith("/v1"):
                    self._guard(scope)
                    receive = await self._limit_body(scope, receive, method, path)
                await self.app(scope, receive, send_wrapper)
            except _Rejected as rej:
                await self._problem(scope, send_wrapper, rej.error, rej.headers)
            except Exception as exc:
                if started[0]:
                    raise
                log.exception("unhandled error", extra={"route": _route_template(self.routes(), scope)}, exc_info=exc)
                await self._send_json(
                    send_wrapper, 500, problem_body(INTERNAL, "the service failed to answer; see its logs", path)
                )
        finally:
            self.metrics.http_in_flight.dec()
            elapsed = time.perf_counter() - start
            route = _route_template(self.routes(), scope)
            self.metrics.observe_request(method, route, status_box[0], elapsed)
            self._access(scope, state, route, status_box[0], elapsed)
            request_id_var.reset(token)

    # -- steps ------------------------------------------------------------------------

    def _guard(self, scope: Scope) -> None:
        client = (scope.get("client") or (None, None))[0]
        if self.settings.auth_disabled and not is_loopback(client):
            raise _Rejected(Forbidden("authentication is disabled on this server, which then serves loopback clients only"))
        if self.buckets is None:
            return
        auth = _header(scope, b"authorization") or ""
        scheme, _, credential = auth.partition(" ")
        if scheme.lower() == "bearer" and credential.strip():
            key = "key:" + hashlib.sha256(credential.strip().encode()).hexdigest()[:32]
        else:
            key = f"ip:{client}"
        wait = self.buckets.take(key)
        if wait > 0:
            retry_after = max(1, math.ceil(wait))
            raise _Rejected(
                RateLimited(
                    f"more than {self.settings.rate_limit_per_second:g} requests a second "
                    f"(burst {self.settings.rate_limit_burst}) for this API key; retry in {retry_after} s",
                    retry_after=retry_after,
                ),
                {"Retry-After": str(retry_after)},
            )

    async def _limit_body(self, scope: Scope, receive: Receive, method: str, path: str) -> Receive:
        if _is_upload(method, path):
            return receive  # the spool enforces max_upload_bytes while streaming to disk
        limit = int(self.settings.max_body_bytes)
        declared = _header(scope, b"content-length")
        chunked = _header(scope, b"transfer-encoding") is not None
        if declared is not None and declared.strip().isdigit():
            if int(declared) > limit:
                raise _Rejected(
                    PayloadTooLarge(f"body of {int(declared)} bytes exceeds the limit of {limit} bytes", limit=limit)
                )
            if int(declared) == 0 and not chunked:
                return receive
        elif not chunked:
            return receive
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
                raise _Rejected(PayloadTooLarge(f"body exceeds the limit of {limit} bytes", limit=limit))
            chunks.append(body)
            if not message.get("more_body", False):
                whole = b"".join(chunks)
                if whole and is_json_body(_header(scope, b"content-type")):
                    found = measure(whole).problem()
                    if found is not None:
                        raise _Rejected(JsonLimit(found[0], **found[1]))
                pending = [{"type": "http.request", "body": whole, "more_body": False}]
                break

        async def replay() -> Message:
            if pending:
                return pending.pop(0)
            return await receive()

        return replay

    async def _problem(self, scope: Scope, send: Send, error: Exception, headers: dict[str, str]) -> None:
        ptype = problem_for(error)
        assert ptype is not None
        data = {k: v for k, v in getattr(error, "data", {}).items() if v is not None}
        body = problem_body(ptype, str(getattr(error, "reason", error)), scope.get("path", ""), **data)
        await self._send_json(send, ptype.status, body, headers)

    @staticmethod
    async def _send_json(send: Send, status: int, body: dict[str, Any], headers: dict[str, str] | None = None) -> None:
        raw = json.dumps(body).encode()
        head = [(b"content-type", b"application/problem+json"), (b"content-length", str(len(raw)).encode())]
        head += [(k.lower().encode(), v.encode()) for k, v in (headers or {}).items()]
        if status == 413:
            head.append((b"connection", b"close"))  # the rest of the body is not read
        await send({"type": "http.response.start", "status": status, "headers": head})
        await send({"type": "http.response.body", "body": raw, "more_body": False})

    def _access(self, scope: Scope, state: dict[str, Any], route: str, status: int, elapsed: float) -> None:
        principal = state.get("principal")
        params = scope.get("path_params") or {}
        extra: dict[str, Any] = {
            "method": scope["method"],
            "route": route,
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
