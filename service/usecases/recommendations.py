"""Introductions: whom to introduce one person to, and the same for everyone in one batch.

:func:`recommend_for_person` answers ``GET /v1/graphs/{id}/nodes/{node}/recommendations``;
:func:`recommend_everyone` is the body of the ``recommendations`` job kind, whose rows are
stored as arrays and exported by :func:`recommendations_table`. Both rank with
:func:`service.analytics.ties.recommend.recommend_for` (one person) and ``recommend_all``
(many) on the version's neighbour index, built once per version (:mod:`.indexes`).
"""

from __future__ import annotations

import hashlib
import json
import time
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
from numpy.typing import NDArray
from pydantic import BaseModel, ConfigDict, Field
from sqlalchemy.orm import Session

from service.analytics._chunks import ChunkSizer
from service.analytics.errors import UnknownNode
from service.analytics.ties.recommend import Recommendation, recommend_all, recommend_for
from service.usecases.loading import LoadedVersion, load_version
from storage.errors import NotFound
from storage.repo import graphs as graph_repo

from .outcome import Computed, Progress
from .indexes import neighbour_index_for

__all__ = [
    "LinkMethodName",
    "METHOD_ALIASES",
    "RecommendationsParams",
    "BatchOutput",
    "Progress",
    "PersonQuery",
    "PersonAnswer",
    "resolve_ids",
    "recommend_for_person",
    "recommend_everyone",
    "recommendations_table",
]

LinkMethodName = Literal[
    "adamic_adar",
    "resource_allocation",
    "jaccard",
    "common_neighbours",
    "preferential_attachment",
    "personalized_pagerank",
    "weighted_adamic_adar",
    "tie_strength",
]
#: Accepted spellings -> the analytics method name.
METHOD_ALIASES = {"tie_strength": "weighted_adamic_adar"}
CHUNK = 2048  # people per recommend_all call: bounds the Python objects alive at once
# Bumped whenever the ranking or the answer's shape changes, so old ETags stop matching.
ETAG_SALT = "recommendations/1"

#: ``progress(fraction, message)``; may raise to cancel (a job's ``TaskContext.progress``).
BatchOutput = Computed  # what a batch use case hands back to be stored


class RecommendationsParams(BaseModel):
    model_config = ConfigDict(extra="forbid")

    method: LinkMethodName = Field(
        default="adamic_adar", description="Ranking method ('tie_strength' is weighted_adamic_adar)."
    )
    limit: int = Field(default=10, ge=1, le=1000, description="Recommendations per person.")
    nodes: list[str] | None = Field(
        default=None, min_length=1, description="The people to recommend for (ids); null: every node."
    )
    contactable: bool = Field(default=False, description="Recommend only people with contact consent.")
    explain: int = Field(default=3, ge=0, le=10, description="Shared contacts listed per recommendation.")


@dataclass(frozen=True)
class PersonQuery:
    """One person's introductions: who, on which version (None: the newest), how, how many."""

    graph_id: str
    node_id: str
    method: LinkMethodName = "adamic_adar"
    limit: int = 10
    contactable: bool = False
    explain: int = 3
    version: int | None = None


@dataclass(frozen=True)
class PersonAnswer:
    """The ETag of the answer, and the answer (a ``RecommendationPage``), None when not needed."""

    etag: str
    document: dict[str, Any] | None


def resolve_ids(index: dict[str, int], ids: Sequence[str], field: str) -> NDArray[np.int64]:
    """Node indices of ``ids``; :class:`UnknownNode` naming the first few unknown ones."""
    got = [index.get(s, -1) for s in ids]
    out = np.asarray(got, dtype=np.int64)
    if out.size and (out < 0).any():
        unknown = list(dict.fromkeys(s for s, i in zip(ids, got) if i < 0))
        shown = ", ".join(repr(s) for s in unknown[:5])
        raise UnknownNode(
            f"{len(unknown)} id{'s' if len(unknown) != 1 else ''} in {field} "
            f"{'are' if len(unknown) != 1 else 'is'} not in this version: {shown}"
            + (" ..." if len(unknown) > 5 else ""),
            field=field,
            unknown=unknown[:20],
            unknown_count=len(unknown),
        )
    return out


def _etag(*parts: object) -> str:
    digest = hashlib.sha256(json.dumps([ETAG_SALT, *parts], default=str).encode()).hexdigest()
    return f'"{digest[:40]}"'


def _items(v: LoadedVersion, recs: list[Recommendation]) -> list[dict[str, Any]]:
    ids = v.ids
    return [
        {
            "node_id": ids[r.candidate],
            "score": r.score,
            "common": r.common,
            "shared_contacts": [
                {"node_id": ids[s.node], "tie_to_person": s.tie_to_person, "tie_to_candidate": s.tie_to_candidate}
                for s in r.shared
            ],
        }
        for r in recs
    ]


def recommend_for_person(
    sessions: Callable[[], Session],
    tenant: str,
    query: PersonQuery,
    *,
    is_current: Callable[[str], bool] = lambda etag: False,
) -> PersonAnswer:
    """People ``query.node_id`` is not yet tied to, best first, with the shared contacts that explain it.

    The answer is fixed by the version and the query, hence its ETag; when
    ``is_current(etag)`` says the caller already holds it, nothing is loaded
    and the document is None. The database session is closed before the
    ranking runs. Raises :class:`~storage.errors.NotFound` for an unknown
    graph, version or node.
    """
    name = METHOD_ALIASES.get(query.method, query.method)
    with sessions() as db:
        graph = graph_repo.get_graph(db, tenant, query.graph_id)
        ver = graph_repo.get_version(db, graph, query.version)
        etag = _etag(ver.id, query.node_id, name, query.limit, query.contactable, query.explain)
        if is_current(etag):
            return PersonAnswer(etag, None)
        loaded = load_version(db, ver)
    node = loaded.index.get(query.node_id)
    if node is None:
        raise NotFound(
            f"node {query.node_id!r} is not in version {ver.number} of this graph", resource="node", id=query.node_id
        )
    index = neighbour_index_for(ver.id, loaded.graph)
    eligible = loaded.attrs.contactable() if query.contactable else None
    recs = recommend_for(index, node, method=name, limit=query.limit, eligible=eligible, explain=query.explain)
    return PersonAnswer(etag, {
        "graph_id": graph.id,
        "version": ver.number,
        "node_id": query.node_id,
        "method": name,
        "contactable": query.contactable,
        "items": _items(loaded, recs),
    })


def recommend_everyone(v: LoadedVersion, params: RecommendationsParams, *, progress: Progress) -> BatchOutput:
    """Introductions for every node (or ``params.nodes``), one array entry per recommendation.

    People are ranked in slices of about a quarter second, each followed by a
    ``progress`` call (a cancel point). The document holds the counts and the
    columns of the CSV export.
    """
    method = METHOD_ALIASES.get(params.method, params.method)
    people = (np.arange(v.graph.n, dtype=np.int64) if params.nodes is None
              else np.unique(resolve_ids(v.index, params.nodes, "nodes")))
    index = neighbour_index_for(v.version_id, v.graph)
    eligible = v.attrs.contactable() if params.contactable else None
    k = params.explain
    cols: dict[str, list[NDArray[Any]]] = {
        name: [] for name in ("person", "rank", "candidate", "score", "common", "shared",
                              "tie_to_person", "tie_to_candidate")
    }
    total = max(1, people.shape[0])
    sizer = ChunkSizer(first=16, most=CHUNK)
    c0 = 0
    while c0 < people.shape[0]:
        t0 = time.perf_counter()
        chunk = people[c0 : c0 + sizer.next(people.shape[0] - c0)]
        batch = recommend_all(index, chunk, method=method, limit=params.limit, eligible=eligible,
                              explain=k)
        rows = [(int(p), r, rec) for p, recs in zip(chunk, batch) for r, rec in enumerate(recs)]
        cols["person"].append(np.fromiter((p for p, _, _ in rows), np.int32, len(rows)))
        cols["rank"].append(np.fromiter((r + 1 for _, r, _ in rows), np.int32, len(rows)))
        cols["candidate"].append(np.fromiter((x.candidate for _, _, x in rows), np.int32, len(rows)))
        cols["score"].append(np.fromiter((x.score for _, _, x in rows), np.float64, len(rows)))
        cols["common"].append(np.fromiter((x.common for _, _, x in rows), np.int32, len(rows)))
        shared = np.full((len(rows), k), -1, np.int32)
        tx = np.zeros((len(rows), k))
        ty = np.zeros((len(rows), k))
        for i, (_, _, x) in enumerate(rows):
            for j, s in enumerate(x.shared):
                shared[i, j], tx[i, j], ty[i, j] = s.node, s.tie_to_person, s.tie_to_candidate
        cols["shared"].append(shared.ravel())
        cols["tie_to_person"].append(tx.ravel())
        cols["tie_to_candidate"].append(ty.ravel())
        sizer.took(chunk.shape[0], time.perf_counter() - t0)
        c0 += chunk.shape[0]
        progress(min(1.0, c0 / total), f"{c0} people")
    arrays = {
        name: (np.concatenate(parts) if parts else np.zeros(0, np.float64 if name in (
            "score", "tie_to_person", "tie_to_candidate") else np.int32))
        for name, parts in cols.items()
    }
    with_recs = int(np.unique(arrays["person"]).shape[0])
    return BatchOutput(
        data={
            "method": method,
            "limit": params.limit,
            "contactable": params.contactable,
            "explain": k,
            "people": int(people.shape[0]),
            "people_with_recommendations": with_recs,
            "rows": int(arrays["person"].shape[0]),
            "columns": _header(k),
        },
        arrays=arrays,
    )


def _header(k: int) -> list[str]:
    cols = ["node_id", "rank", "candidate_id", "score", "common"]
    for j in range(1, k + 1):
        cols += [f"shared_contact_{j}", f"tie_to_person_{j}", f"tie_to_candidate_{j}"]
    return cols


def recommendations_table(
    version: LoadedVersion, data: dict[str, Any], arrays: dict[str, NDArray[Any]]
) -> tuple[list[str], Iterator[list[Any]]]:
    """The export of :func:`recommend_everyone`: one row per recommendation, ids in place of indices."""
    ids = version.ids
    k = int(data["explain"])

    def rows() -> Iterator[list[Any]]:
        shared = arrays["shared"].reshape(-1, k) if k else None
        tx = arrays["tie_to_person"].reshape(-1, k) if k else None
        ty = arrays["tie_to_candidate"].reshape(-1, k) if k else None
        person, rank, cand = arrays["person"].tolist(), arrays["rank"].tolist(), arrays["candidate"].tolist()
        score, common = arrays["score"].tolist(), arrays["common"].tolist()
        for i in range(len(person)):
            row: list[Any] = [ids[person[i]], rank[i], ids[cand[i]], score[i], common[i]]
            for j in range(k):
                z = int(shared[i, j])  # type: ignore[index]
                row += ([ids[z], float(tx[i, j]), float(ty[i, j])]  # type: ignore[index]
                        if z >= 0 else [None, None, None])
            yield row

    return _header(k), rows()
