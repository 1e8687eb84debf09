"""The result document of the ``project_events`` job (kept apart from :mod:`.event_graphs`, which the
upload imports: the result models import the job kinds, which import the use cases)."""

from __future__ import annotations

from typing import Any, Literal

from pydantic import Field

from .event_graphs import ProjectEventsParams
from .result_models import Result

__all__ = ["ProjectEventsResult"]


class ProjectEventsResult(Result):
    kind: Literal["project_events"]
    params: ProjectEventsParams
    version_created: int = Field(description="The version whose ties this job made.")
    nodes: int
    edges: int
    projection: dict[str, Any] = Field(description="How ties were weighted, and what the events held.")
    backbone: dict[str, Any] = Field(description="Which ties were kept, and the share of ties, weight and "
                                     "people kept.")
