"""Rankings, the node view and communities, read from ``scores`` results."""

from __future__ import annotations

from datetime import datetime
from typing import Any

from pydantic import BaseModel, Field

from .common import Page

__all__ = [
    "CommunityMember",
    "CommunityPage",
    "CommunityRead",
    "NodeAttributesRead",
    "NodeCommunity",
    "NodeRead",
    "NodeScore",
    "RankingItem",
    "ScorePage",
]


class _FromResult(BaseModel):
    graph_id: str
    version: int
    scores_version: int = Field(
        description="The version that scores job ran on: `version` itself, or an earlier version with the "
        "same edges (after an upload that changed only attributes), whose scores are then shown with this "
        "version's attributes."
    )
    job_id: str = Field(description="The scores job whose result this is read from.")
    computed_at: datetime = Field(description="When that result was stored.")


class RankingItem(BaseModel):
    rank: int = Field(description="1-based position in this (filtered) ranking.")
    node_id: str
    score: float | None = Field(description="The measure's value (composite: 0..100); null when undefined.")
    percentile: float | None = Field(
        description="Percentile rank among all scored nodes, 100 = top (mid-rank convention)."
    )
    segment: str | None
    contactable: bool = Field(description="Has marketing consent (everyone, when the version holds no consent data).")
    label: str | None
    community: int | None = Field(default=None, description="Community label when the result has communities.")


class ScorePage(_FromResult, Page):
    measure: str
    weights: dict[str, float] | None = Field(
        default=None, description="Composite only: the weights, as given (normalised to sum 1 in the formula)."
    )
    total: int = Field(description="People in the filtered ranking.")
    meta: dict[str, Any] = Field(description="How the measure was computed and normalised.")
    items: list[RankingItem]


class NodeAttributesRead(BaseModel):
    segment: str | None
    region: str | None
    consent: bool | None = Field(description="Marketing consent: true, false, or null when unknown.")
    contactable: bool
    cost: float | None
    value: float | None
    label: str | None
    extra: dict[str, str | None] = Field(description="Other uploaded columns, kept as strings.")


class NodeScore(BaseModel):
    score: float | None
    percentile: float | None = Field(description="Percentile rank, 100 = top.")
    rank: int | None = Field(description="1-based position in the unfiltered ranking.")


class NodeCommunity(BaseModel):
    community: int = Field(description="Community label; 0 is the largest community.")
    size: int


class NodeRead(BaseModel):
    graph_id: str
    version: int
    node_id: str
    attributes: NodeAttributesRead
    degree: int = Field(description="Edges at the node (in + out on directed graphs).")
    in_degree: int | None = Field(description="Directed graphs only.")
    out_degree: int | None = Field(description="Directed graphs only.")
    job_id: str | None = Field(description="The scores job the scores come from; null when none has run.")
    computed_at: datetime | None
    scores_version: int | None = Field(
        default=None,
        description="The version that job ran on: `version`, or an earlier version with the same edges.",
    )
    scores: dict[str, NodeScore] = Field(description="Every ranked measure of that result.")
    community: NodeCommunity | None


class CommunityMember(BaseModel):
    node_id: str
    label: str | None
    score: float | None


class CommunityRead(BaseModel):
    community: int = Field(description="Label; 0 is the largest community.")
    size: int
    internal_edges: int = Field(description="Linked pairs inside the community (undirected view).")
    density: float | None = Field(description="internal_edges / (size (size - 1) / 2); null for one person.")
    top_members: list[CommunityMember]


class CommunityPage(_FromResult, Page):
    count: int = Field(description="Communities in the partition.")
    modularity: float | None = Field(description="Newman's modularity of the partition.")
    measure: str = Field(description="The measure top members are ranked by.")
    meta: dict[str, Any] = Field(description="How the partition was computed.")
    items: list[CommunityRead]
