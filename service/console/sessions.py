"""Console sign-in: an API key exchanged for a short-lived signed session cookie.

The cookie carries the key's id, a fresh random session id and an expiry,
signed with HMAC-SHA256 (standard library ``hmac``: one signature over three
fields needs no library). Nothing is stored server-side; every request checks
the signature, the expiry and that the key is still live in the key table, so
revoking or expiring the key ends the session at once. The key's tenant and
scopes apply to everything the console shows or does.

The CSRF token of a session is an HMAC of its session id under the same
secret: every POST form carries it and it is compared in constant time.
"""

from __future__ import annotations

import base64
import hashlib
import hmac
import os
import secrets
import time
from dataclasses import dataclass
from pathlib import Path

from fastapi import Request
from sqlalchemy.orm import Session, sessionmaker

from service.settings import Settings
from storage.repo import keys as key_repo

__all__ = ["COOKIE", "ConsoleSession", "SignInNeeded", "BadForm", "ReadOnly", "new_cookie", "read_session",
           "check_csrf", "secret_of", "OPEN_KEY"]

COOKIE = "bw_console"
OPEN_KEY = "open"  # the key id of a session on a server with authentication off (loopback only)


class SignInNeeded(Exception):
    """No valid session: the console sends the person to the sign-in page."""


class ReadOnly(Exception):
    """A form that starts or cancels work, sent with a key that may only read."""


class BadForm(Exception):
    """A POST without the session's CSRF token (a stale page or a forged request)."""


@dataclass(frozen=True)
class ConsoleSession:
    """Who is signed in: the key's tenant and scopes, and this session's CSRF token."""

    key_id: str
    key_name: str
    tenant_id: str
    scopes: frozenset[str]
    session_id: str
    expires: int
    csrf: str

    @property
    def can_write(self) -> bool:
        return "write" in self.scopes


def secret_of(settings: Settings) -> bytes:
    """The signing secret: the setting, else a random one kept (0600) in the data folder."""
    if settings.console_secret:
        return settings.console_secret.encode()
    path = Path(settings.data_dir) / "console-secret"
    try:
        return path.read_bytes()
    except FileNotFoundError:
        path.parent.mkdir(parents=True, exist_ok=True)
        fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
        with os.fdopen(fd, "wb") as f:
            f.write(secrets.token_bytes(32))
        return path.read_bytes()


def _app_secret(request: Request) -> bytes:
    cached: bytes | None = getattr(request.app.state, "console_secret", None)
    if cached is None:
        cached = secret_of(request.app.state.settings)
        request.app.state.console_secret = cached
    return cached


def _sign(secret: bytes, text: str) -> str:
    mac = hmac.new(secret, text.encode(), hashlib.sha256).digest()
    return base64.urlsafe_b64encode(mac).decode().rstrip("=")


def new_cookie(request: Request, key_id: str) -> tuple[str, int]:
    """A new session (a new random id at every sign-in) for ``key_id``: (cookie value, max age)."""
    settings: Settings = request.app.state.settings
    max_age = settings.console_session_minutes * 60
    payload = f"{key_id}.{secrets.token_urlsafe(18)}.{int(time.time()) + max_age}"
    return f"{payload}.{_sign(_app_secret(request), payload)}", max_age


def read_session(request: Request) -> ConsoleSession:
    """The signed-in session of this request, or :class:`SignInNeeded`."""
    raw = request.cookies.get(COOKIE, "")
    parts = raw.split(".")
    if len(parts) != 4:
        raise SignInNeeded()
    key_id, session_id, expires, mac = parts
    secret = _app_secret(request)
    if not hmac.compare_digest(mac, _sign(secret, f"{key_id}.{session_id}.{expires}")):
        raise SignInNeeded()
    if not expires.isdigit() or int(expires) < time.time():
        raise SignInNeeded()
    settings: Settings = request.app.state.settings
    csrf = _sign(secret, "csrf:" + session_id)
    if key_id == OPEN_KEY:
        if not settings.auth_disabled:
            raise SignInNeeded()
        return ConsoleSession(OPEN_KEY, "open access", settings.default_tenant, frozenset(key_repo.SCOPES),
                              session_id, int(expires), csrf)
    maker: sessionmaker[Session] = request.app.state.sessionmaker
    with maker() as db:
        key = key_repo.get_live_key(db, key_id)
        if key is None:
            raise SignInNeeded()
        return ConsoleSession(key.id, key.name or f"key {key.prefix}", key.tenant_id,
                              frozenset(key.scopes.split(",")), session_id, int(expires), csrf)


def check_csrf(session: ConsoleSession, token: str | None) -> None:
    """Refuse a form whose token is not this session's."""
    if not token or not hmac.compare_digest(token, session.csrf):
        raise BadForm()
