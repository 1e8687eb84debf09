"""``recommendations``: introductions for many people in one batch, for nightly exports.

The same ranking as ``GET /v1/graphs/{id}/nodes/{node}/recommendations``
(``service.analytics.ties.recommend.recommend_for``), for every node or a given
list. The result document holds the counts; the rows are stored as arrays
(one entry per recommendation) and exported as CSV by
``GET /v1/jobs/{job_id}/result.csv`` (see :func:`csv_table`).
"""

from __future__ import annotations


import time
from collections.abc import Iterator, Sequence
from typing import TYPE_CHECKING, Any, Literal

import numpy as np
from numpy.typing import NDArray
from pydantic import BaseModel, ConfigDict, Field

from service.analytics._chunks import ChunkSizer

from .. import admission
from ..kinds import JobKind, TaskContext, TaskOutput

if TYPE_CHECKING:
    from service.usecases.loading import LoadedVersion

__all__ = [
    "LinkMethodName", "METHOD_ALIASES", "RecommendationsParams", "run", "csv_table", "resolve_ids", "KIND",
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
METHOD_ALIASES = {"tie_strength": "weighted_adamic_adar"}
CHUNK = 2048  # people per recommend_all call: bounds the Python objects alive at once


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


def resolve_ids(index: dict[str, int], ids: Sequence[str], field: str) -> NDArray[np.int64]:
    """Node indices of ``ids``; :class:`UnknownNode` naming the first few unknown ones."""
    from service.analytics.errors import UnknownNode

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


def run(ctx: TaskContext, params: RecommendationsParams) -> TaskOutput:
    from service.analytics.ties.recommend import recommend_all
    from service.indexes import neighbour_index_for

    v = ctx.load()
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
    sizer = ChunkSizer(first=16, most=CHUNK)  # slices of about a quarter second: cancel points
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
        ctx.progress(min(1.0, c0 / total), f"{c0} people")
    arrays = {
        name: (np.concatenate(parts) if parts else np.zeros(0, np.float64 if name in (
            "score", "tie_to_person", "tie_to_candidate") else np.int32))
        for name, parts in cols.items()
    }
    with_recs = int(np.unique(arrays["person"]).shape[0])
    return TaskOutput(
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


def csv_table(
    version: LoadedVersion, data: dict[str, Any], arrays: dict[str, NDArray[Any]]
) -> tuple[list[str], Iterator[list[Any]]]:
    """The export: one row per recommendation, ids in place of indices."""
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


KIND = JobKind(
    csv=csv_table,
    name="recommendations",
    params=RecommendationsParams,
    run=run,
    estimate=admission.linear_estimate,
    summary="Introductions for every node (or a list): link prediction with shared contacts",
    result_description=(
        "Counts (people, people_with_recommendations, rows) and the columns of the CSV export "
        "GET /v1/jobs/{job_id}/result.csv: node_id, rank, candidate_id, score, common, and per "
        "shared contact its id and the two tie strengths. Rows are stored as arrays."
    ),
)
