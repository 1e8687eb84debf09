"""Idempotency records: the first answer to a keyed POST, replayed on repeats."""

from __future__ import annotations

from typing import Any

from sqlalchemy.orm import Session

from ..errors import Conflict
from ..models import IdempotencyRecord

__all__ = ["get_replay", "add_record"]


def get_replay(
    db: Session, tenant_id: str, key: str, route: str, request_hash: str
) -> IdempotencyRecord | None:
    """The stored answer for ``key``, or None; a different request under the same key is a Conflict."""
    rec = db.get(IdempotencyRecord, (tenant_id, key))
    if rec is None:
        return None
    if rec.route != route or rec.request_hash != request_hash:
        raise Conflict(
            "Idempotency-Key was already used with a different request",
            field="Idempotency-Key",
        )
    return rec


def add_record(
    db: Session,
    *,
    tenant_id: str,
    key: str,
    route: str,
    request_hash: str,
    status_code: int,
    body: dict[str, Any],
    location: str | None,
) -> None:
    db.add(
        IdempotencyRecord(
            tenant_id=tenant_id,
            key=key,
            route=route,
            request_hash=request_hash,
            status_code=status_code,
            body=body,
            location=location,
        )
    )
    db.flush()
