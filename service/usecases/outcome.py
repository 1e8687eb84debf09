"""What a computing use case hands back, and how it reports progress.

Every use case that a job runs returns a :class:`Computed`: a JSON-able document
(described by the kind's result model) and named numpy arrays (one value per
person, say), stored beside the document. ``progress(fraction, message)`` may be
called as often as the use case likes; the caller decides what to do with it (the
worker writes it at most every ~0.5 s and raises ``Cancelled`` once the job is
cancelled).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

from numpy.typing import NDArray

__all__ = ["Computed", "Progress", "RESERVED_RESULT_KEYS"]

Progress = Callable[[float, "str | None"], None]

# Every result document carries these; a use case's own data must not use them.
RESERVED_RESULT_KEYS = ("kind", "graph_id", "version", "params", "random_seed", "job_id", "created_at", "arrays")


@dataclass(frozen=True)
class Computed:
    """A JSON-able document and named numpy arrays (one per node, say)."""

    data: dict[str, Any]
    arrays: dict[str, NDArray[Any]] = field(default_factory=dict)
