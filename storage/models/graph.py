"""Graphs, their immutable versions, and the versions' array chunks."""

from __future__ import annotations

from datetime import datetime
from typing import Any

from sqlalchemy import JSON, Boolean, ForeignKey, Index, Integer, LargeBinary, String, Text, UniqueConstraint
from sqlalchemy.orm import Mapped, mapped_column, relationship

from .base import Base, UtcDateTime, utcnow

__all__ = ["Graph", "GraphVersion", "VersionArray"]


class Graph(Base):
    __tablename__ = "graph"

    id: Mapped[str] = mapped_column(String(40), primary_key=True)
    tenant_id: Mapped[str] = mapped_column(String(64), index=True)
    name: Mapped[str] = mapped_column(String(200))
    description: Mapped[str | None] = mapped_column(Text, default=None)
    directed: Mapped[bool] = mapped_column(Boolean)
    allow_self_loops: Mapped[bool] = mapped_column(Boolean, default=False)
    created_at: Mapped[datetime] = mapped_column(UtcDateTime, default=utcnow)
    latest_version: Mapped[int] = mapped_column(Integer, default=0)

    versions: Mapped[list[GraphVersion]] = relationship(
        back_populates="graph", cascade="all, delete-orphan", passive_deletes=True
    )


class GraphVersion(Base):
    """One immutable version. Its arrays live in :class:`VersionArray` chunks."""

    __tablename__ = "graph_version"
    __table_args__ = (
        UniqueConstraint("graph_id", "number"),
        Index("ix_graph_version_graph_id_edges_digest", "graph_id", "edges_digest"),
    )

    id: Mapped[str] = mapped_column(String(40), primary_key=True)
    graph_id: Mapped[str] = mapped_column(ForeignKey("graph.id", ondelete="CASCADE"), index=True)
    number: Mapped[int] = mapped_column(Integer)
    created_at: Mapped[datetime] = mapped_column(UtcDateTime, default=utcnow)
    nodes: Mapped[int] = mapped_column(Integer)
    edges: Mapped[int] = mapped_column(Integer)
    # How the version was made: part, mode, format, records read, duplicates merged.
    origin: Mapped[dict[str, Any]] = mapped_column(JSON)
    summary: Mapped[dict[str, Any]] = mapped_column(JSON)
    # name -> {"dtype": ..., "length": ...} for every stored array, plus labels.
    manifest: Mapped[dict[str, Any]] = mapped_column(JSON)
    # SHA-256 of the edge content (node ids in order, edge arrays): versions with
    # equal digests have equal scores, so a later one can reuse an earlier one's.
    edges_digest: Mapped[str | None] = mapped_column(String(64), default=None)

    graph: Mapped[Graph] = relationship(back_populates="versions")


class VersionArray(Base):
    """A chunk of one named array of a version (chunks keep rows under the blob limits)."""

    __tablename__ = "version_array"

    version_id: Mapped[str] = mapped_column(
        ForeignKey("graph_version.id", ondelete="CASCADE"), primary_key=True
    )
    name: Mapped[str] = mapped_column(String(64), primary_key=True)
    seq: Mapped[int] = mapped_column(Integer, primary_key=True)
    data: Mapped[bytes] = mapped_column(LargeBinary)
