"""Reading rankings and one person from the newest ``scores`` result.

Three capabilities, each one call whichever door asks (HTTP route, CLI):

- :func:`read_ranking`: a page of people ranked by a measure or a weighted
  composite of measures, filtered by segment, consent and community;
- :func:`export_ranking`: the whole filtered ranking as CSV text, in chunks;
- :func:`read_person`: one person's attributes, degree, every score with its
  percentile and rank, and community.

Communities are read in :mod:`service.usecases.communities`.

Which result answers is decided in :mod:`service.usecases._score_results`;
the arrays, orders and filters in :mod:`service.usecases._ranking_tables`.
A page carries a cursor that pins the result it came from (so paging
survives a newer scores job) and is bound to the query it was issued for. A
ranking read computes its ETag before touching any array and returns
:class:`Unchanged` when the caller already holds it.

Figures are returned at full precision unless the door passes ``shown``, the
rounding it shows numbers with.
"""

from __future__ import annotations

from collections.abc import Iterator, Sequence
from dataclasses import dataclass, field
from datetime import datetime
from functools import partial
from typing import Any, TypedDict

import numpy as np
from numpy.typing import NDArray
from sqlalchemy.orm import Session

from service.analytics.errors import InvalidParameter
from service.usecases.errors import ResultNotReady
from service.usecases.loading import load_version
from storage.errors import NotFound
from storage.repo import graphs as graph_repo

from . import _ranking_tables as R
from ._ranking_tables import key, safe_cell
from ._score_results import (
    RANKED, KnownEtag, ScoresResult, Shown, Unchanged, Version, as_written, check_measure, digest, etag_of,
    find_scores_result, node_table, read_cursor, version_number, whole,
)

__all__ = [
    "COMPOSITE",
    "RANKED",
    "MeasurePosition",
    "PersonRead",
    "RankedPerson",
    "RankingExport",
    "RankingPage",
    "RankingQuery",
    "Unchanged",
    "check_measure",
    "export_ranking",
    "read_person",
    "read_ranking",
    "safe_cell",
]

COMPOSITE = "sum_m w_m p_m / sum_m w_m over percentile ranks p_m (0..100; undefined counts 0)"


# -- rankings ---------------------------------------------------------------------------


@dataclass(frozen=True)
class RankingQuery:
    """A ranking asked for: measure (or composite weights), filters, version and page size.

    Build it with :meth:`parse` from what a caller wrote (it checks the
    measure). ``version``: a number, ``"latest"`` or None (the newest), as
    written; ``number``: that version checked, None for the newest.
    """

    graph_id: str
    measure: str
    weights: dict[str, float] | None
    segments: tuple[str, ...] = ()
    contactable: bool | None = None
    community: int | None = None
    version: Version = None
    limit: int = 50
    number: int | None = field(init=False, repr=False, compare=False)
    digest: str = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "number", version_number(self.version))
        object.__setattr__(self, "digest", digest(
            self.measure, sorted((self.weights or {}).items()), list(self.segments), self.contactable,
            self.community, as_written(self.version)))

    @classmethod
    def parse(
        cls, graph_id: str, *, measure: str = "pagerank", weights: str | None = None,
        segments: Sequence[str] = (), contactable: bool | None = None, community: int | None = None,
        version: Version = None, limit: int = 50,
    ) -> RankingQuery:
        """Check the measure and weights (:func:`check_measure`), then the version;
        segments are a set."""
        return cls(graph_id, measure, check_measure(measure, weights), tuple(sorted(set(segments))),
                   contactable, community, version, limit)

    @property
    def names(self) -> list[str]:
        return list(self.weights or [self.measure])


class RankedPerson(TypedDict):
    """One row of a ranking."""

    rank: int
    node_id: str
    score: float | None
    percentile: float | None
    segment: str | None
    contactable: bool
    label: str | None
    community: int | None


@dataclass(frozen=True)
class RankingPage:
    """A page of a ranking and the result it was read from."""

    etag: str
    graph_id: str
    version: int
    scores_version: int
    job_id: str
    computed_at: datetime
    measure: str
    weights: dict[str, float] | None
    total: int
    meta: dict[str, Any]
    items: list[RankedPerson]
    next_cursor: str | None


@dataclass(frozen=True)
class RankingExport:
    """The whole filtered ranking as CSV: a file name and the text in chunks."""

    etag: str
    filename: str
    chunks: Iterator[str]


@dataclass(frozen=True)
class _Ordered:
    found: ScoresResult
    ranking: R.Ranking
    order: NDArray[np.int32]
    nodes: R.NodeTable
    membership: NDArray[np.int32] | None


def _ranking(db: Session, found: ScoresResult, q: RankingQuery) -> R.Ranking:
    if q.weights is None:
        return R.Ranking(found.array(db, key("score", q.measure)), found.array(db, key("pct", q.measure)),
                         found.array(db, key("order", q.measure)))
    weights = q.weights

    def build() -> R.Ranking:
        values = R.composite_scores({m: found.array(db, key("pct", m)) for m in weights}, weights)
        order = R.ranking_order(values, found.array(db, key("id_order")))
        return R.Ranking(values, R.percentile_ranks(values, order), order)

    ranking: R.Ranking = R.cached(("composite", found.job_id, tuple(sorted(weights.items()))), build)
    return ranking


def _locate(db: Session, tenant: str, q: RankingQuery, cursor: str | None,
            fmt: str, known_etag: KnownEtag | None) -> tuple[ScoresResult, int, str, bool]:
    """The result, the page's position, the ETag, and whether the caller already holds it."""
    pinned, position, nodes_id = read_cursor(cursor, q.digest)
    need = [key("pct" if q.weights else "order", m) for m in q.names]
    need += [key("community", "membership")] if q.community is not None else []
    found = find_scores_result(db, tenant, q.graph_id, q.number, need, result_id=pinned, nodes_id=nodes_id,
                               what=q.names)
    etag = etag_of(found.job_id, found.etag, found.version_id, q.digest, q.limit, position, fmt)
    return found, position, etag, known_etag is not None and known_etag(etag)


def _ordered(db: Session, found: ScoresResult, q: RankingQuery) -> _Ordered:
    nodes = node_table(db, found.version_id)
    membership = found.array(db, key("community", "membership")) if found.has("community.membership") else None
    ranking = _ranking(db, found, q)
    try:
        mask = R.filter_mask(nodes, segments=q.segments, contactable=q.contactable, membership=membership,
                             community=q.community)
    except ValueError as exc:
        raise InvalidParameter(str(exc), field="segment") from exc
    order: NDArray[np.int32] = ranking.order if mask is None else R.cached(
        ("filtered", found.job_id, found.version_id, q.digest), lambda: ranking.order[mask[ranking.order]])
    return _Ordered(found, ranking, order, nodes, membership)


def read_ranking(
    db: Session, tenant: str, query: RankingQuery, *, cursor: str | None = None,
    known_etag: KnownEtag | None = None, shown: Shown | None = None,
) -> RankingPage | Unchanged:
    """A page of the ranking ``query`` asks for, best first (lowest first for ``constraint``),
    ties by node id; from ``cursor``'s position and result when given.

    Raises InvalidParameter (a cursor of another query, an unknown segment),
    NotFound or ResultNotReady (see :func:`find_scores_result`).
    """
    found, position, etag, unchanged = _locate(db, tenant, query, cursor, "json", known_etag)
    if unchanged:
        return Unchanged(etag)
    o = _ordered(db, found, query)
    page = o.order[position:position + query.limit]
    cols = R.columns(page, o.ranking, o.nodes, o.membership, shown or whole)
    measures = found.data["measures"]
    end = position + query.limit
    return RankingPage(
        etag=etag, graph_id=query.graph_id, version=found.version, scores_version=found.scores_version,
        job_id=found.job_id, computed_at=found.created_at, measure=query.measure, weights=query.weights,
        total=int(o.order.shape[0]),
        meta=measures[query.measure] if query.weights is None else
        {"formula": COMPOSITE, "measures": {m: measures[m] for m in query.weights}},
        items=[
            {"rank": position + k + 1, "node_id": nid, "score": sc, "percentile": p, "segment": sg,
             "contactable": ct, "label": lb, "community": cm}
            for k, (nid, sc, p, sg, ct, lb, cm) in enumerate(zip(*cols))
        ],
        next_cursor=R.encode_cursor(found.job_id, end, query.digest[:16], found.cursor_nodes())
        if end < o.order.shape[0] else None,
    )


def export_ranking(
    db: Session, tenant: str, query: RankingQuery, *, cursor: str | None = None,
    known_etag: KnownEtag | None = None, shown: Shown | None = None,
) -> RankingExport | Unchanged:
    """The whole filtered ranking as RFC 4180 CSV (columns of :data:`CSV_HEADER
    <service.usecases._ranking_tables.CSV_HEADER>`); text cells a spreadsheet would run
    as a formula get a leading apostrophe. Raises as :func:`read_ranking`."""
    found, _, etag, unchanged = _locate(db, tenant, query, cursor, "csv", known_etag)
    if unchanged:
        return Unchanged(etag)
    o = _ordered(db, found, query)
    return RankingExport(etag, f"rankings-{query.graph_id}-v{found.version}-{query.measure}.csv",
                         R.csv_chunks(o.order, o.ranking, o.nodes, o.membership, shown or whole))


# -- one person -----------------------------------------------------------------------


class MeasurePosition(TypedDict):
    score: float | None
    percentile: float | None
    rank: int


@dataclass(frozen=True)
class PersonRead:
    """One person of a version, with every ranked measure of its newest scores result."""

    graph_id: str
    version: int
    node_id: str
    attributes: dict[str, Any]
    degree: int
    in_degree: int | None
    out_degree: int | None
    job_id: str | None
    computed_at: datetime | None
    scores_version: int | None
    scores: dict[str, MeasurePosition]
    community: dict[str, int] | None


def _inverse(order: NDArray[np.int32]) -> NDArray[np.int32]:
    rank_of = np.empty(order.shape[0], dtype=np.int32)
    rank_of[order] = np.arange(1, order.shape[0] + 1, dtype=np.int32)
    return rank_of


def read_person(
    db: Session, tenant: str, graph_id: str, node_id: str, version: Version = None, *,
    shown: Shown | None = None,
) -> PersonRead:
    """A person's attributes, degree, and each measure's score, percentile and rank (in the
    unfiltered ranking) with their community; no scores when no scores job has run.

    Raises InvalidParameter for a malformed version, NotFound for an unknown graph,
    version or person.
    """
    keep = shown or whole
    number = version_number(version)
    graph = graph_repo.get_graph(db, tenant, graph_id)
    ver = graph_repo.get_version(db, graph, number)
    loaded = load_version(db, ver)
    i = loaded.index.get(node_id)
    if i is None:
        raise NotFound(f"node {node_id!r} is not in version {ver.number} of this graph", resource="node",
                       id=node_id)
    g, a = loaded.graph, loaded.attrs
    out_deg, in_deg = int(np.count_nonzero(g.src == i)), int(np.count_nonzero(g.dst == i))
    try:
        found: ScoresResult | None = find_scores_result(db, tenant, graph_id, ver.number, [])
    except ResultNotReady:
        found = None
    scores: dict[str, MeasurePosition] = {}
    community = None
    if found is not None:
        for m in found.ranked():
            order = found.array(db, key("order", m))
            rank_of: NDArray[np.int32] = R.cached(("rank_of", found.job_id, m), partial(_inverse, order))
            scores[m] = {"score": R.as_number(keep(float(found.array(db, key("score", m))[i]))),
                         "percentile": R.as_number(keep(round(float(found.array(db, key("pct", m))[i]), 4))),
                         "rank": int(rank_of[i])}
        if found.has("community.membership"):
            c = int(found.array(db, key("community", "membership"))[i])
            community = {"community": c, "size": int(found.array(db, key("community", "size"))[c])}
    consent = int(a.consent[i])
    return PersonRead(
        graph_id=graph.id, version=ver.number, node_id=node_id,
        attributes={
            "segment": a.segment_labels[a.segment[i]] if a.segment[i] >= 0 else None,
            "region": a.region_labels[a.region[i]] if a.region[i] >= 0 else None,
            "consent": None if consent < 0 else consent == 1,
            "contactable": bool(a.contactable()[i]),
            "cost": R.as_number(float(a.cost[i])), "value": R.as_number(float(a.value[i])),
            "label": loaded.labels[i], "extra": {k: v[i] for k, v in a.extra.items() if k != "label"},
        },
        degree=out_deg + in_deg,  # undirected: each edge once as src or dst; a self-loop twice
        in_degree=in_deg if g.directed else None, out_degree=out_deg if g.directed else None,
        job_id=found.job_id if found else None, computed_at=found.created_at if found else None,
        scores_version=found.scores_version if found else None, scores=scores, community=community,
    )
