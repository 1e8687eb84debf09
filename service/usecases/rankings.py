"""Reading rankings, one person and communities from the newest ``scores`` result.

Four capabilities, each one call whichever door asks (HTTP route, CLI):

- :func:`read_ranking`: a page of people ranked by a measure or a weighted
  composite of measures, filtered by segment, consent and community;
- :func:`export_ranking`: the whole filtered ranking as CSV text, in chunks;
- :func:`read_person`: one person's attributes, degree, every score with its
  percentile and rank, and community;
- :func:`list_communities`: communities with size, density and top members.

Which result answers is decided in :mod:`service.usecases._score_results`;
the arrays, orders and filters in :mod:`service.usecases._ranking_tables`.
Paged reads return a cursor that pins the result it came from (so paging
survives a newer scores job) and is bound to the query it was issued for. The
ranking and community reads compute their ETag before touching any array and
return :class:`Unchanged` when the caller already holds it.

Figures are returned at full precision unless the door passes ``shown``, the
rounding it shows numbers with.
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass, field
from datetime import datetime
from functools import partial
from typing import Any, TypedDict

import numpy as np
from numpy.typing import NDArray
from sqlalchemy.orm import Session

from service.analytics.errors import InvalidParameter
from service.analytics.structure.centrality import MEASURES
from service.jobs.errors import ResultNotReady
from service.loader import load_version
from storage.errors import NotFound
from storage.repo import graphs as graph_repo

from . import _ranking_tables as R
from ._ranking_tables import LABEL_MEASURES, key, safe_cell
from ._score_results import ScoresResult, find_scores_result, node_table

__all__ = [
    "COMPOSITE",
    "RANKED",
    "CommunityList",
    "CommunityQuery",
    "MeasurePosition",
    "PersonRead",
    "RankedPerson",
    "RankingExport",
    "RankingPage",
    "RankingQuery",
    "Unchanged",
    "check_measure",
    "export_ranking",
    "list_communities",
    "read_person",
    "read_ranking",
    "safe_cell",
]

ETAG_SALT = "scores-views/1"
#: Measures a ranking can be ordered by (labels such as ``community`` are not scores).
RANKED = [m for m in MEASURES if m not in LABEL_MEASURES]
COMPOSITE = "sum_m w_m p_m / sum_m w_m over percentile ranks p_m (0..100; undefined counts 0)"

Shown = Callable[[float], float]
KnownEtag = Callable[[str], bool]


def _whole(x: float) -> float:
    return x


def _digest(*parts: object) -> str:
    return hashlib.sha256(json.dumps([ETAG_SALT, *parts], sort_keys=True, default=str).encode()).hexdigest()


def _etag(*parts: object) -> str:
    return f'"{_digest(*parts)[:40]}"'


@dataclass(frozen=True)
class Unchanged:
    """The caller already holds this answer (its ETag matched)."""

    etag: str


def check_measure(measure: str, weights: str | None) -> dict[str, float] | None:
    """Check a ranking's measure: the composite's weights, or None for a plain measure.

    Raises InvalidParameter (field ``measure`` or ``weights``) saying what to ask instead.
    """
    if measure == "composite":
        if not weights:
            raise InvalidParameter("measure=composite needs weights, e.g. weights=pagerank:0.5,degree:0.5",
                                   field="weights")
        try:
            return R.parse_weights(weights, RANKED)
        except ValueError as exc:
            raise InvalidParameter(str(exc), field="weights") from exc
    if measure in LABEL_MEASURES:
        raise InvalidParameter(f"{measure} is a label, not a score: see GET /v1/graphs/{{graph_id}}/communities, "
                               "or filter a ranking with community=", field="measure", value=measure)
    if measure not in MEASURES:
        raise InvalidParameter(f"unknown measure {measure!r}; expected one of {', '.join(RANKED)}, or composite",
                               field="measure", value=measure, expected=[*RANKED, "composite"])
    if weights:
        raise InvalidParameter("weights apply to measure=composite only", field="weights")
    return None


def _cursor(cursor: str | None, query: str) -> tuple[str | None, int, str | None]:
    """(pinned result id, position, version id shown) of a cursor issued for this query
    (``query``: its digest)."""
    if cursor is None:
        return None, 0, None
    try:
        pinned, position, issued_for, nodes_id = R.decode_cursor(cursor)
    except ValueError as exc:
        raise InvalidParameter(str(exc), field="cursor") from exc
    if issued_for != query[:16]:
        raise InvalidParameter("the cursor belongs to another query; repeat that query's parameters",
                               field="cursor")
    return pinned, position, nodes_id


Version = int | str | None


def _version_number(version: Version) -> int | None:
    """``"latest"`` (or None) means the newest version; otherwise a positive integer."""
    if version is None or version == "latest":
        return None
    try:
        n = int(version)
    except ValueError as exc:
        raise InvalidParameter("version must be a positive integer or 'latest'", field="version") from exc
    if n < 1:
        raise InvalidParameter("version must be a positive integer or 'latest'", field="version")
    return n


def _as_written(version: Version) -> str | None:
    """The version as a caller writes it: cursors and ETags are bound to it."""
    return None if version is None else str(version)


# -- rankings ---------------------------------------------------------------------------


@dataclass(frozen=True)
class RankingQuery:
    """A ranking asked for: measure (or composite weights), filters, version and page size.

    Build it with :meth:`parse` from what a caller wrote. ``version``: a
    number, ``"latest"`` or None (the newest); ``number`` is it checked.
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
        object.__setattr__(self, "number", _version_number(self.version))
        object.__setattr__(self, "digest", _digest(
            self.measure, sorted((self.weights or {}).items()), list(self.segments), self.contactable,
            self.community, _as_written(self.version)))

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
    pinned, position, nodes_id = _cursor(cursor, q.digest)
    need = [key("pct" if q.weights else "order", m) for m in q.names]
    need += [key("community", "membership")] if q.community is not None else []
    found = find_scores_result(db, tenant, q.graph_id, q.number, need, result_id=pinned, nodes_id=nodes_id,
                               what=q.names)
    etag = _etag(found.job_id, found.etag, found.version_id, q.digest, q.limit, position, fmt)
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
    cols = R.columns(page, o.ranking, o.nodes, o.membership, shown or _whole)
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
                         R.csv_chunks(o.order, o.ranking, o.nodes, o.membership, shown or _whole))


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
    keep = shown or _whole
    number = _version_number(version)
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


# -- communities --------------------------------------------------------------------


@dataclass(frozen=True)
class CommunityQuery:
    """Communities asked for: top members per community ranked by ``measure`` (None: the
    result's default), page size, version (as for :class:`RankingQuery`); checked when built."""

    graph_id: str
    measure: str | None = None
    top: int = 5
    limit: int = 50
    version: Version = None
    number: int | None = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        if self.measure is not None:
            check_measure(self.measure, None)
        object.__setattr__(self, "number", _version_number(self.version))

    @property
    def digest(self) -> str:
        return _digest("communities", self.measure, _as_written(self.version))


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
    keep = shown or _whole
    digest, measure, limit, top = query.digest, query.measure, query.limit, query.top
    pinned, position, nodes_id = _cursor(cursor, digest)
    need = [key("community", "membership")] + ([key("order", measure)] if measure else [])
    found = find_scores_result(db, tenant, query.graph_id, query.number, need, result_id=pinned,
                               nodes_id=nodes_id, what=["community"] + ([measure] if measure else []))
    ranked = found.ranked()
    by = measure or ("degree" if "degree" in ranked else (ranked[0] if ranked else None))
    etag = _etag(found.job_id, found.etag, found.version_id, digest, top, limit, position)
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
        next_cursor=R.encode_cursor(found.job_id, position + limit, digest[:16], found.cursor_nodes())
        if position + limit < labels.shape[0] else None,
    )
