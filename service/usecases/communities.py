"""Reading communities from the newest ``scores`` result that has them.

One capability, :func:`list_communities`: the partition stored by a
``scores`` job run with ``community`` (Leiden, modularity objective), largest
community first, each with its size, internal edges, density and top members
by a measure. Which result answers, cursors, ETags and the version asked for
work as for rankings (:mod:`service.usecases._score_results`).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import datetime
from typing import Any

import numpy as np
from numpy.typing import NDArray
from sqlalchemy.orm import Session

from . import _ranking_tables as R
from ._ranking_tables import key
from ._score_results import (
    KnownEtag, Shown, Unchanged, Version, as_written, check_measure, digest, etag_of, find_scores_result,
    node_table, read_cursor, version_number, whole,
)

__all__ = ["CommunityList", "CommunityQuery", "list_communities"]


@dataclass(frozen=True)
class CommunityQuery:
    """Communities asked for: top members per community ranked by ``measure`` (None: the
    result's default), page size, version (as for :class:`service.usecases.rankings.RankingQuery`); checked when built."""

    graph_id: str
    measure: str | None = None
    top: int = 5
    limit: int = 50
    version: Version = None
    number: int | None = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        if self.measure is not None:
            check_measure(self.measure, None)
        object.__setattr__(self, "number", version_number(self.version))

    @property
    def digest(self) -> str:
        return digest("communities", self.measure, as_written(self.version))


@dataclass(frozen=True)
class CommunityList:
    """A page of communities, largest first, and the result it was read from."""

    etag: str
    graph_id: str
    version: int
    scores_version: int
    job_id: str
    computed_at: datetime
    count: int
    modularity: float | None
    measure: str
    meta: dict[str, Any]
    items: list[dict[str, Any]]
    next_cursor: str | None


def list_communities(
    db: Session, tenant: str, query: CommunityQuery, *, cursor: str | None = None,
    known_etag: KnownEtag | None = None, shown: Shown | None = None,
) -> CommunityList | Unchanged:
    """Communities largest first, with size, internal edges, density and top members by
    ``query.measure`` (default ``degree`` when the result has it, else its first measure),
    ties by node id. Raises as :func:`read_ranking`."""
    keep = shown or whole
    asked, measure, limit, top = query.digest, query.measure, query.limit, query.top
    pinned, position, nodes_id = read_cursor(cursor, asked)
    need = [key("community", "membership")] + ([key("order", measure)] if measure else [])
    found = find_scores_result(db, tenant, query.graph_id, query.number, need, result_id=pinned,
                               nodes_id=nodes_id, what=["community"] + ([measure] if measure else []))
    ranked = found.ranked()
    by = measure or ("degree" if "degree" in ranked else (ranked[0] if ranked else None))
    etag = etag_of(found.job_id, found.etag, found.version_id, asked, top, limit, position)
    if known_etag is not None and known_etag(etag):
        return Unchanged(etag)
    nodes = node_table(db, found.version_id)
    membership = found.array(db, key("community", "membership"))
    sizes = found.array(db, key("community", "size"))
    internal = found.array(db, key("community", "internal_edges"))
    order = found.array(db, key("order", by) if by else key("id_order"))
    values = found.array(db, key("score", by)) if by else None

    def group() -> tuple[NDArray[np.int32], NDArray[np.int64]]:
        # Members grouped by community, each group in ranking order.
        grouped = order[np.argsort(membership[order], kind="stable")]
        return grouped, np.searchsorted(membership[grouped], np.arange(sizes.shape[0]))

    grouped, starts = R.cached(("grouped", found.job_id, by), group)
    labels = np.flatnonzero(sizes)
    items = []
    for c in labels[position:position + limit].tolist():
        size, inner = int(sizes[c]), int(internal[c])
        members = grouped[starts[c]:starts[c] + min(top, size)].tolist()
        items.append({
            "community": c, "size": size, "internal_edges": inner,
            "density": keep(inner / (size * (size - 1) / 2)) if size > 1 else None,
            "top_members": [{"node_id": nodes.ids[j], "label": nodes.labels[j] if nodes.labels else None,
                             "score": R.as_number(keep(float(values[j]))) if values is not None else None}
                            for j in members],
        })
    meta = found.data["measures"].get("community", {})
    return CommunityList(
        etag=etag, graph_id=query.graph_id, version=found.version, scores_version=found.scores_version,
        job_id=found.job_id, computed_at=found.created_at, count=int(labels.shape[0]),
        modularity=meta.get("modularity"), measure=by or "node_id", meta=meta, items=items,
        next_cursor=R.encode_cursor(found.job_id, position + limit, asked[:16], found.cursor_nodes())
        if position + limit < labels.shape[0] else None,
    )
