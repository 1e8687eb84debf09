"""Past campaigns of a graph: what was sent, when, and (once uploaded) who adopted."""

from __future__ import annotations

from datetime import datetime
from typing import Any

from sqlalchemy import JSON, ForeignKey, Integer, String, Text
from sqlalchemy.orm import Mapped, mapped_column

from .base import Base, UtcDateTime, utcnow

__all__ = ["Campaign"]


class Campaign(Base):
    """One past campaign; its log is written once (``uploaded_at``) and never changed.

    ``log`` holds the validated rows as ``[person, role, seconds after started_at or
    None, round or None, referred_by or None]``; ``report`` the counts and warnings of
    the validation against version ``version`` of the graph.
    """

    __tablename__ = "campaign"

    id: Mapped[str] = mapped_column(String(40), primary_key=True)
    tenant_id: Mapped[str] = mapped_column(String(64), index=True)
    graph_id: Mapped[str] = mapped_column(ForeignKey("graph.id", ondelete="CASCADE"), index=True)
    name: Mapped[str] = mapped_column(String(200))
    started_at: Mapped[datetime] = mapped_column(UtcDateTime)
    channel: Mapped[str | None] = mapped_column(String(200), default=None)
    notes: Mapped[str | None] = mapped_column(Text, default=None)
    created_at: Mapped[datetime] = mapped_column(UtcDateTime, default=utcnow)
    uploaded_at: Mapped[datetime | None] = mapped_column(UtcDateTime, default=None)
    version: Mapped[int | None] = mapped_column(Integer, default=None)
    log: Mapped[list[Any] | None] = mapped_column(JSON, default=None)
    report: Mapped[dict[str, Any] | None] = mapped_column(JSON, default=None)
