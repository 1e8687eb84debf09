"""Bearer API keys (RFC 6750) and scopes, checked once per /v1 request.

The scope a route needs follows from one table: reads need ``read``, writes
need ``write``, and managing webhooks, schedules and keys needs ``admin``.
Tenancy is enforced below this layer: every repository query takes the
tenant, so another tenant's resource is simply not found (404, not 403).
"""

from __future__ import annotations

import threading
import time

from fastapi import Request

from storage.repo import keys as key_repo

from .deps import Principal
from .errors import Forbidden, Unauthorized

__all__ = ["authorize", "required_scope", "ADMIN_PREFIXES"]

ADMIN_PREFIXES = ("/v1/webhooks", "/v1/schedules", "/v1/keys")
_CACHE_SECONDS = 5.0
_cache: dict[str, tuple[float, Principal | None]] = {}
_lock = threading.Lock()


def required_scope(method: str, path: str) -> str:
    if path.startswith(ADMIN_PREFIXES):
        return "admin"
    if method in ("GET", "HEAD", "OPTIONS"):
        return "read"
    # Read-only computations posted with a body.
    if path.endswith("/next-contacts"):
        return "read"
    return "write"


def _lookup(request: Request, plain: str) -> Principal | None:
    now = time.monotonic()
    with _lock:
        hit = _cache.get(plain)
        if hit is not None and hit[0] > now:
            return hit[1]
    with request.app.state.sessionmaker() as db:
        key = key_repo.get_key_by_secret(db, plain)
        principal = (
            Principal(key.tenant_id, frozenset(key.scopes.split(",")), key.id) if key is not None else None
        )
    with _lock:
        if len(_cache) > 10_000:
            _cache.clear()
        _cache[plain] = (now + _CACHE_SECONDS, principal)
    return principal


def authorize(request: Request) -> None:
    """Resolve the caller's key into ``request.state.principal`` and check the scope."""
    settings = request.app.state.settings
    if settings.auth_disabled:
        request.state.principal = Principal(settings.default_tenant, frozenset(key_repo.SCOPES))
        return
    header = request.headers.get("authorization", "")
    scheme, _, token = header.partition(" ")
    if scheme.lower() != "bearer" or not token.strip():
        raise Unauthorized("send an API key as 'Authorization: Bearer <key>'")
    principal = _lookup(request, token.strip())
    if principal is None:
        raise Unauthorized("the API key is unknown, revoked or expired")
    need = required_scope(request.method, request.url.path)
    if need not in principal.scopes:
        raise Forbidden(f"this route needs the '{need}' scope", scope=need)
    request.state.principal = principal
