"""Graph and version resources."""

from __future__ import annotations

from datetime import datetime
from typing import Any

from pydantic import BaseModel, ConfigDict, Field

from .common import Page

__all__ = ["GraphCreate", "GraphRead", "GraphPage", "UploadWarning", "VersionRead", "VersionList"]


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


class UploadWarning(BaseModel):
    code: str = Field(description="What kind of warning: `ids_without_edges` or `unknown_consent`.")
    message: str
    count: int = Field(description="How many records or ids it concerns in all.")
    ids: list[str] = Field(description="The first 20 of them.")


class VersionRead(BaseModel):
    graph_id: str
    number: int
    created_at: datetime
    nodes: int
    edges: int
    origin: dict[str, Any] = Field(description="How the version was made: part, mode, format, records.")
    summary: dict[str, Any] = Field(
        description="Figures computed at ingest; for CSV also the `encoding` and `delimiter` the file was read with."
    )
    warnings: list[UploadWarning] = Field(
        default_factory=list,
        description="Things the upload accepted but the sender should check (e.g. people in a node file "
        "with no edge).",
    )


class VersionList(BaseModel):
    items: list[VersionRead]
