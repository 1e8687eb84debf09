"""Errors raised by the analytics layer. They carry data, not prose."""

from __future__ import annotations

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

    def __init__(self, reason: str | None = None, **data: object) -> None:
        self.reason = reason or (self.__class__.__doc__ or "").strip()
        self.data = data
        super().__init__(self.reason)


class InvalidParameter(AnalyticsError):
    """A parameter is outside its allowed range or contradicts another one."""


class UnknownNode(AnalyticsError):
    """A node named in the request is not in the graph."""


class InfeasibleRequest(AnalyticsError):
    """The request's rules cannot all be satisfied on this graph."""


class EmptyGraph(AnalyticsError):
    """The graph has no nodes (or no edges where edges are required)."""


class ComputationFailed(AnalyticsError):
    """The underlying graph library or a compiled kernel failed."""


class Cancelled(AnalyticsError):
    """The computation was cancelled by its caller."""


class TooExpensive(AnalyticsError):
    """The computation would need more memory or work than one job may use."""
