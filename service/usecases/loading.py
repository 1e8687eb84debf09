"""Stored version arrays <-> analytics types, with a per-process cache.

A version is immutable, so once loaded its :class:`LoadedVersion` can be
kept and shared by every request and job in the process: it is kept in
:data:`service.usecases.caches.version_cache`, keyed by version id, under the shared
byte bound of :mod:`service.usecases.caches`.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from functools import cached_property
from typing import Any

import numpy as np
from numpy.typing import NDArray
from sqlalchemy.orm import Session

from service.analytics.graph import GraphArrays, NodeAttributes
from service.usecases.caches import version_cache
from storage.arrays import decode_strings, encode_strings
from storage.models import GraphVersion
from storage.repo import graphs as graph_repo

__all__ = ["LoadedVersion", "load_version", "version_arrays", "clear_cache", "version_origin"]


@dataclass(frozen=True, eq=False)
class LoadedVersion:
    """A version ready for analytics: the graph, the caller's ids and node attributes."""

    version_id: str
    number: int
    graph: GraphArrays
    ids: list[str]
    attrs: NodeAttributes

    @property
    def labels(self) -> list[str | None]:
        """Display labels (the ``label`` column), None where not given."""
        return self.attrs.extra.get("label") or [None] * self.graph.n

    @cached_property
    def index(self) -> dict[str, int]:
        return {s: i for i, s in enumerate(self.ids)}

    def nbytes(self) -> int:
        g = self.graph
        total = g.src.nbytes + g.dst.nbytes + g.weight.nbytes
        total += 0 if g.probability is None else g.probability.nbytes
        return total + sum(len(s) + 60 for s in self.ids) + 40 * g.n


def version_arrays(
    graph: GraphArrays, ids: list[str], attrs: NodeAttributes
) -> tuple[dict[str, NDArray[Any]], dict[str, Any]]:
    """Arrays and manifest entries to store a version (inverse of :func:`load_version`)."""
    arrays: dict[str, NDArray[Any]] = {
        "src": graph.src.astype(np.int32, copy=False),
        "dst": graph.dst.astype(np.int32, copy=False),
        "weight": graph.weight.astype(np.float64, copy=False),
        "ids": encode_strings(ids),
        "segment": attrs.segment,
        "region": attrs.region,
        "consent": attrs.consent,
        "cost": attrs.cost,
        "value": attrs.value,
    }
    if graph.probability is not None:
        arrays["probability"] = graph.probability
    if attrs.extra:
        arrays["extra"] = np.frombuffer(json.dumps(attrs.extra).encode(), dtype=np.uint8)
    extra = {
        "n": graph.n,
        "directed": graph.directed,
        "segment_labels": list(attrs.segment_labels),
        "region_labels": list(attrs.region_labels),
        "has_consent_data": attrs.has_consent_data,
        "extra_columns": sorted(attrs.extra),
    }
    return arrays, extra


def clear_cache() -> None:
    """Forget every loaded version (tests)."""
    version_cache.clear()


def load_version(db: Session, version: GraphVersion) -> LoadedVersion:
    """The version's graph, ids and attributes (cached per process)."""
    _origins[version.id] = (version.graph_id, db.get_bind())
    return version_cache.get(version.id, lambda: _load(db, version))


# Version id -> (graph id, database it was loaded from), for the use cases that read more
# of the same graph (its campaigns, a learned model) while holding only the loaded version.
_origins: dict[str, tuple[str, Any]] = {}


def version_origin(version_id: str) -> tuple[str, Any]:
    """The graph id of a version loaded in this process and the database it came from.

    Raises ``KeyError`` for a version this process never loaded.
    """
    return _origins[version_id]


def _load(db: Session, version: GraphVersion) -> LoadedVersion:
    man = version.manifest
    # Event tables kept with the version are read only by the event use cases.
    a = graph_repo.get_version_arrays(db, version, [k for k in man["arrays"] if not k.startswith("events.")])
    n = int(man["n"])
    g = GraphArrays(
        n=n,
        directed=bool(man["directed"]),
        src=a["src"],
        dst=a["dst"],
        weight=a["weight"],
        probability=a.get("probability"),
    )
    extra = json.loads(a["extra"].tobytes()) if "extra" in a else {}
    attrs = NodeAttributes(
        n=n,
        segment=a["segment"],
        segment_labels=tuple(man["segment_labels"]),
        region=a["region"],
        region_labels=tuple(man["region_labels"]),
        consent=a["consent"],
        cost=a["cost"],
        value=a["value"],
        has_consent_data=bool(man["has_consent_data"]),
        extra=extra,
    )
    return LoadedVersion(version.id, version.number, g, decode_strings(a["ids"], n), attrs)
