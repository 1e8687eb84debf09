"""API keys: create (returns the secret once), find by presented key, list, revoke."""

from __future__ import annotations

import hashlib
import hmac
import secrets
from datetime import datetime, timedelta

from sqlalchemy import or_, select
from sqlalchemy.orm import Session

from ..errors import NotFound
from ..models import ApiKey, new_id, utcnow

__all__ = ["SCOPES", "add_key", "get_key_by_secret", "get_live_key", "list_keys", "revoke_key", "hash_key"]

SCOPES = ("read", "write", "admin")
KEY_PREFIX = "bw"


def hash_key(secret: str) -> str:
    return hashlib.sha256(secret.encode()).hexdigest()


def add_key(
    db: Session,
    *,
    tenant_id: str,
    scopes: list[str],
    name: str | None = None,
    expires_in: timedelta | None = None,
    now: datetime | None = None,
) -> tuple[ApiKey, str]:
    """Create a key; the plain secret is returned here and never stored.

    The key is ``bw_<prefix>_<secret>``: 8 hex characters of visible prefix
    and 32 random bytes (256 bits) of secret.
    """
    bad = sorted(set(scopes) - set(SCOPES))
    if bad or not scopes:
        raise ValueError(f"scopes must be among {', '.join(SCOPES)}; got {', '.join(bad) or 'none'}")
    now = now or utcnow()
    # The visible prefix must be unique; with 32 bits a collision is rare but possible.
    for _ in range(8):
        prefix = secrets.token_hex(4)
        if db.execute(select(ApiKey.id).where(ApiKey.prefix == prefix)).first() is None:
            break
    plain = f"{KEY_PREFIX}_{prefix}_{secrets.token_urlsafe(32)}"
    key = ApiKey(
        id=new_id("key"),
        tenant_id=tenant_id,
        prefix=prefix,
        key_hash=hash_key(plain),
        scopes=",".join(s for s in SCOPES if s in scopes),
        name=name,
        created_at=now,
        expires_at=(now + expires_in) if expires_in else None,
    )
    db.add(key)
    db.flush()
    return key, plain


def get_key_by_secret(db: Session, plain: str, *, now: datetime | None = None) -> ApiKey | None:
    """The live key matching ``plain``, or None (unknown, revoked or expired)."""
    parts = plain.split("_")
    if len(parts) < 3 or parts[0] != KEY_PREFIX:
        return None
    key = db.execute(select(ApiKey).where(ApiKey.prefix == parts[1])).scalar_one_or_none()
    if key is None or not hmac.compare_digest(key.key_hash, hash_key(plain)):
        return None
    now = now or utcnow()
    if key.revoked_at is not None or (key.expires_at is not None and key.expires_at <= now):
        return None
    return key


def get_live_key(db: Session, key_id: str, *, now: datetime | None = None) -> ApiKey | None:
    """The key with id ``key_id`` if it is still live (not revoked, not expired), else None."""
    key = db.get(ApiKey, key_id)
    now = now or utcnow()
    if key is None or key.revoked_at is not None or (key.expires_at is not None and key.expires_at <= now):
        return None
    return key


def list_keys(db: Session, tenant_id: str | None = None) -> list[ApiKey]:
    q = select(ApiKey).order_by(ApiKey.created_at)
    if tenant_id is not None:
        q = q.where(ApiKey.tenant_id == tenant_id)
    return list(db.execute(q).scalars())


def revoke_key(db: Session, ident: str, *, tenant_id: str | None = None) -> ApiKey:
    q = select(ApiKey).where(or_(ApiKey.id == ident, ApiKey.prefix == ident))
    if tenant_id is not None:
        q = q.where(ApiKey.tenant_id == tenant_id)
    key = db.execute(q).scalar_one_or_none()
    if key is None:
        raise NotFound("key not found", resource="key", id=ident)
    if key.revoked_at is None:
        key.revoked_at = utcnow()
    db.flush()
    return key
