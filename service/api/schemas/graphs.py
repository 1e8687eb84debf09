"""Graph and version resources."""

from __future__ import annotations

from datetime import datetime
from typing import Any

from pydantic import BaseModel, ConfigDict, Field

from .common import Page

__all__ = ["GraphCreate", "GraphRead", "GraphPage", "VersionRead", "VersionList"]


class GraphCreate(BaseModel):
    model_config = ConfigDict(extra="forbid", strict=True)  # JSON types as declared: 0 is no boolean

    name: str = Field(min_length=1, max_length=200)
    directed: bool
    description: str | None = Field(default=None, max_length=5000)
    allow_self_loops: bool = Field(default=False, description="Accept edges from a node to itself.")


class GraphRead(BaseModel):
    id: str
    name: str
    directed: bool
    description: str | None
    allow_self_loops: bool
    created_at: datetime
    latest_version: int | None = Field(description="Newest version number, null before the first upload.")


class GraphPage(Page):
    items: list[GraphRead]


class VersionRead(BaseModel):
    graph_id: str
    number: int
    created_at: datetime
    nodes: int
    edges: int
    origin: dict[str, Any] = Field(description="How the version was made: part, mode, format, records.")
    summary: dict[str, Any] = Field(description="Figures computed at ingest.")


class VersionList(BaseModel):
    items: list[VersionRead]
