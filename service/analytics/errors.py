"""Errors raised by the analytics layer. They carry data, not prose.

Each class carries its problem type as data: ``slug`` (the end of the problem's
``/problems/...`` type) and ``title``. ``service/jobs/errors.problem_document``
builds the document from them; only ``service/api/problems.py`` knows the HTTP status.
"""

from __future__ import annotations

from typing import ClassVar

__all__ = [
    "AnalyticsError",
    "InvalidParameter",
    "UnknownNode",
    "InfeasibleRequest",
    "EmptyGraph",
    "ComputationFailed",
    "Cancelled",
    "TooExpensive",
]


class AnalyticsError(Exception):
    """The analytics computation could not be carried out."""

    slug: ClassVar[str | None] = "computation-failed"
    title: ClassVar[str | None] = "Computation failed"

    def __init__(self, reason: str | None = None, **data: object) -> None:
        self.reason = reason or (self.__class__.__doc__ or "").strip()
        self.data = data
        super().__init__(self.reason)


class InvalidParameter(AnalyticsError):
    """A parameter is outside its allowed range or contradicts another one."""

    slug = "invalid-parameter"
    title = "Invalid parameter"


class UnknownNode(AnalyticsError):
    """A node named in the request is not in the graph."""

    slug = "unknown-node"
    title = "Unknown node id"


class InfeasibleRequest(AnalyticsError):
    """The request's rules cannot all be satisfied on this graph."""

    slug = "infeasible-request"
    title = "Rules cannot be satisfied"


class EmptyGraph(AnalyticsError):
    """The graph has no nodes (or no edges where edges are required)."""

    slug = "empty-graph"
    title = "Graph is empty"


class ComputationFailed(AnalyticsError):
    """The underlying graph library or a compiled kernel failed."""

    slug = "computation-failed"
    title = "Computation failed"


class Cancelled(AnalyticsError):
    """The computation was cancelled by its caller."""

    slug = "cancelled"
    title = "Computation cancelled"


class TooExpensive(AnalyticsError):
    """The computation would need more memory or work than one job may use."""

    slug = "too-expensive"
    title = "Job too expensive"
