"""Rankings, the node view and communities, read from the newest ``scores`` result.

Each read finds, in one query, the newest succeeded ``scores`` job of the
version that holds the arrays it needs (or, when that version has none, of
the newest earlier version with the same edge content: scores depend on the
edges only, so an upload that changed only attributes keeps its rankings,
filtered by the new attributes), answers 304 when ``If-None-Match``
matches (before touching any array), and otherwise slices the result's
stored arrays, cached per result id in :mod:`service.rankings`. Handlers are
``async`` and do their work in one thread-pool call: sync dependencies
would each cost a thread hop, which is most of a top-50 read.
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import datetime
from functools import partial
from typing import Annotated, Any, Literal

import numpy as np
from fastapi import APIRouter, Depends, Header, Query, Request, Response, status
from fastapi.concurrency import run_in_threadpool
from fastapi.responses import JSONResponse, StreamingResponse
from numpy.typing import NDArray
from sqlalchemy import bindparam, select
from sqlalchemy.orm import Session, sessionmaker

from service import rankings as R
from service.analytics.structure.centrality import MEASURES
from service.jobs.errors import ResultNotReady
from service.usecases.loading import load_version
from service.settings import Settings
from storage.arrays import decode_strings, read_array
from storage.errors import NotFound
from storage.models import Graph, GraphVersion, Job, JobResult, ResultArray
from storage.repo import graphs as graph_repo

from .rendering import round_value
from .deps import get_principal, require_graph
from .errors import InvalidParams
from .graphs import parse_version
from .etags import etag_matches
from .node_ids import node_route
from .schemas.common import PROBLEM_RESPONSES
from .schemas.scores import CommunityPage, NodeRead, ScorePage

__all__ = ["router"]

ETAG_SALT = "scores-views/1"
RANKED = [m for m in MEASURES if m not in R.LABEL_MEASURES]
IfNoneMatch = Annotated[str | None, Header(alias="If-None-Match")]
VersionQ = Annotated[str | None, Query(description="Version number or 'latest' (default).")]
NOT_MODIFIED: dict[int | str, dict[str, Any]] = {304: {"description": "Not modified (If-None-Match matched the ETag)."}}
COMPOSITE = "sum_m w_m p_m / sum_m w_m over percentile ranks p_m (0..100; undefined counts 0)"


router = APIRouter(prefix="/v1/graphs", tags=["scores"], responses=PROBLEM_RESPONSES)


# -- finding the result ----------------------------------------------------------------


@dataclass(frozen=True)
class _Found:
    """A scores result, and the version whose people it is shown for.

    ``version``/``version_id`` is that version; ``scores_version`` the one the
    job ran on: the same, or an earlier version with the same edge content.
    """

    job_id: str
    version: int
    version_id: str
    etag: str
    created_at: datetime
    manifest: dict[str, Any]
    data: dict[str, Any]
    scores_version: int

    @property
    def reused(self) -> bool:
        return self.scores_version != self.version

    def cursor_nodes(self) -> str | None:
        """The version id a cursor must carry (None when it is the result's own)."""
        return self.version_id if self.reused else None

    def ranked(self) -> list[str]:
        return [m for m in self.data.get("measures", {}) if R.key("score", m) in self.manifest]

    def has(self, name: str) -> bool:
        return name in self.manifest

    def array(self, db: Session, name: str) -> NDArray[Any]:
        arr: NDArray[Any] = R.cached(("array", self.job_id, name),
                                     lambda: read_array(db, ResultArray, self.job_id, name, self.manifest))
        return arr


def _find_statement(which: str) -> Any:
    q = (
        select(Job.id, Job.version, GraphVersion.id, JobResult.etag, JobResult.created_at, JobResult.manifest)
        .join(JobResult, JobResult.job_id == Job.id)
        .join(Graph, Graph.id == Job.graph_id)
        .join(GraphVersion, (GraphVersion.graph_id == Job.graph_id) & (GraphVersion.number == Job.version))
        .where(Graph.id == bindparam("gid"), Graph.tenant_id == bindparam("tenant"), Job.kind == "scores",
               Job.status == "succeeded")
    )
    if which == "earlier":  # versions with the same edges, newest first; params to skip attribute-based runs
        return (q.add_columns(Job.params).where(Job.version.in_(bindparam("numbers", expanding=True)))
                .order_by(Job.version.desc(), Job.finished_at.desc(), Job.id.desc()).limit(100))
    where = {"pinned": Job.id == bindparam("rid"), "latest": Job.version == Graph.latest_version,
             "version": Job.version == bindparam("number")}[which]
    return q.where(where).order_by(Job.finished_at.desc(), Job.id.desc()).limit(100)


# Built once: composing the statement costs more than running it on a warm connection.
_FIND = {which: _find_statement(which) for which in ("pinned", "latest", "version", "earlier")}


def _uses_attributes(params: dict[str, Any] | None) -> bool:
    """A scores job whose result depends on node attributes (PageRank jumping by an attribute)."""
    personalization = (params or {}).get("personalization") or {}
    return bool(personalization.get("attribute"))


def _data(db: Session, jid: str) -> dict[str, Any]:
    def load() -> dict[str, Any]:
        return dict(db.execute(select(JobResult.data).where(JobResult.job_id == jid)).scalar_one())

    data: dict[str, Any] = R.cached(("data", jid), load)
    return data


def _earlier(db: Session, tenant: str, graph_id: str, target: GraphVersion, need: Sequence[str]) -> _Found | None:
    """The newest usable result of an earlier version whose edges equal ``target``'s."""
    numbers = graph_repo.list_same_edges(db, target)
    if not numbers:
        return None
    rows = db.execute(_FIND["earlier"], {"gid": graph_id, "tenant": tenant, "numbers": numbers}).all()
    for jid, number, _, etag, created, manifest, params in rows:
        if all(n in manifest for n in need) and not _uses_attributes(params):
            return _Found(jid, target.number, target.id, etag, created, manifest, _data(db, jid), number)
    return None


def _shown_version(db: Session, graph_id: str, nodes_id: str, scores_version_id: str) -> GraphVersion:
    """The version a reusing cursor names, checked to have the result's edges."""
    shown, own = db.get(GraphVersion, nodes_id), db.get(GraphVersion, scores_version_id)
    if (shown is None or own is None or shown.graph_id != graph_id or shown.edges_digest is None
            or shown.edges_digest != own.edges_digest):
        raise NotFound("the cursor's version no longer exists; start again without a cursor",
                       resource="version", id=nodes_id)
    return shown


def _find(
    db: Session, tenant: str, graph_id: str, version: int | None, need: Sequence[str], *,
    result_id: str | None = None, nodes_id: str | None = None, what: Sequence[str] = (),
) -> _Found:
    """The newest succeeded scores result of the version holding every array in ``need``,
    else of the newest earlier version with the same edges (see the module notes).
    ``nodes_id``: a pinned cursor's version, when it reused an earlier result."""
    args: dict[str, Any] = {"gid": graph_id, "tenant": tenant}
    if result_id is not None:
        stmt, args["rid"] = _FIND["pinned"], result_id
    elif version is None:
        stmt = _FIND["latest"]
    else:
        stmt, args["number"] = _FIND["version"], version
    for jid, number, vid, etag, created, manifest in db.execute(
        stmt, args
    ).all():
        if all(n in manifest for n in need):
            if nodes_id is not None and nodes_id != vid:
                shown = _shown_version(db, graph_id, nodes_id, vid)
                return _Found(jid, shown.number, shown.id, etag, created, manifest, _data(db, jid), number)
            return _Found(jid, number, vid, etag, created, manifest, _data(db, jid), number)
    graph = graph_repo.get_graph(db, tenant, graph_id)
    if result_id is not None:
        raise NotFound("the cursor's scores result no longer exists; start again without a cursor",
                       resource="result", id=result_id)
    target = graph_repo.get_version(db, graph, version)
    reused = _earlier(db, tenant, graph_id, target, need)
    if reused is not None:
        return reused
    number = target.number
    params = f', "params": {{"measures": {json.dumps(list(what))}}}' if what else ""
    raise ResultNotReady(
        f"no succeeded scores job on version {number} of this graph has "
        f"{'measure(s) ' + ', '.join(what) if what else 'a result'}; run one: POST /v1/graphs/{graph_id}/jobs "
        f'with {{"kind": "scores", "version": {number}{params}}}',
        graph_id=graph_id, version=number,
    )


def _nodes(db: Session, version_id: str) -> R.NodeTable:
    """Ids, segments, consent and labels of a version (no edges), cached per version."""
    def build() -> R.NodeTable:
        v = db.get(GraphVersion, version_id)
        if v is None:
            raise NotFound("version not found", resource="version", id=version_id)
        man = v.manifest
        a = graph_repo.get_version_arrays(db, v, ["ids", "segment", "consent", "extra"])
        n = int(man["n"])
        extra = json.loads(a["extra"].tobytes()) if "extra" in a else {}
        consent = np.asarray(a["consent"], dtype=np.int8)
        contactable = consent == 1 if man.get("has_consent_data") else np.ones(n, dtype=bool)
        return R.NodeTable(decode_strings(a["ids"], n), np.asarray(a["segment"]), tuple(man["segment_labels"]),
                           consent, contactable, extra.get("label"))

    table: R.NodeTable = R.cached(("nodes", version_id), build)
    return table


def _caller(request: Request) -> tuple[str, Settings, sessionmaker[Session]]:
    settings: Settings = request.app.state.settings
    maker: sessionmaker[Session] = request.app.state.sessionmaker
    return get_principal(request).tenant_id, settings, maker


def _digest(*parts: object) -> str:
    return hashlib.sha256(json.dumps([ETAG_SALT, *parts], sort_keys=True, default=str).encode()).hexdigest()


def _cursor(cursor: str | None, query: str) -> tuple[str | None, int, str | None]:
    """(pinned result id, position, version id shown) of a cursor issued for this query
    (``query``: its digest)."""
    if cursor is None:
        return None, 0, None
    try:
        pinned, position, issued_for, nodes_id = R.decode_cursor(cursor)
    except ValueError as exc:
        raise InvalidParams(str(exc), field="cursor") from exc
    if issued_for != query[:16]:
        raise InvalidParams("the cursor belongs to another query; repeat that query's parameters", field="cursor")
    return pinned, position, nodes_id


def _not_modified(if_none_match: str | None, *parts: object) -> tuple[dict[str, str], Response | None]:
    etag = f'"{_digest(*parts)[:40]}"'
    headers = {"ETag": etag, "Cache-Control": "no-cache"}
    if etag_matches(if_none_match, etag):
        return headers, Response(status_code=status.HTTP_304_NOT_MODIFIED, headers=headers)
    return headers, None


def _measure(measure: str, weights: str | None) -> dict[str, float] | None:
    """Check a ranking's measure; the composite's weights, or None for a plain measure."""
    if measure == "composite":
        if not weights:
            raise InvalidParams("measure=composite needs weights, e.g. weights=pagerank:0.5,degree:0.5",
                                field="weights")
        try:
            return R.parse_weights(weights, RANKED)
        except ValueError as exc:
            raise InvalidParams(str(exc), field="weights") from exc
    if measure in R.LABEL_MEASURES:
        raise InvalidParams(f"{measure} is a label, not a score: see GET /v1/graphs/{{graph_id}}/communities, "
                            "or filter a ranking with community=", field="measure", value=measure)
    if measure not in MEASURES:
        raise InvalidParams(f"unknown measure {measure!r}; expected one of {', '.join(RANKED)}, or composite",
                            field="measure", value=measure, expected=[*RANKED, "composite"])
    if weights:
        raise InvalidParams("weights apply to measure=composite only", field="weights")
    return None


# -- rankings ---------------------------------------------------------------------------


@dataclass(frozen=True)
class _RankingQuery:
    graph_id: str
    measure: str
    weights: dict[str, float] | None
    segments: list[str]
    contactable: bool | None
    community: int | None
    version: int | None
    limit: int
    format: str
    digest: str

    @property
    def names(self) -> list[str]:
        return list(self.weights or [self.measure])


def _ranking(db: Session, found: _Found, q: _RankingQuery) -> R.Ranking:
    if q.weights is None:
        return R.Ranking(found.array(db, R.key("score", q.measure)), found.array(db, R.key("pct", q.measure)),
                         found.array(db, R.key("order", q.measure)))
    weights = q.weights

    def build() -> R.Ranking:
        values = R.composite_scores({m: found.array(db, R.key("pct", m)) for m in weights}, weights)
        order = R.ranking_order(values, found.array(db, R.key("id_order")))
        return R.Ranking(values, R.percentile_ranks(values, order), order)

    ranking: R.Ranking = R.cached(("composite", found.job_id, tuple(sorted(weights.items()))), build)
    return ranking


def _read_ranking(db: Session, tenant: str, q: _RankingQuery, cursor: str | None,
                  if_none_match: str | None) -> Response:
    pinned, position, nodes_id = _cursor(cursor, q.digest)
    need = [R.key("pct" if q.weights else "order", m) for m in q.names]
    need += [R.key("community", "membership")] if q.community is not None else []
    found = _find(db, tenant, q.graph_id, q.version, need, result_id=pinned, nodes_id=nodes_id, what=q.names)
    headers, unchanged = _not_modified(if_none_match, found.job_id, found.etag, found.version_id, q.digest, q.limit,
                                       position, q.format)
    if unchanged is not None:
        return unchanged
    nodes = _nodes(db, found.version_id)
    membership = found.array(db, R.key("community", "membership")) if found.has("community.membership") else None
    ranking = _ranking(db, found, q)
    try:
        mask = R.filter_mask(nodes, segments=q.segments, contactable=q.contactable, membership=membership,
                             community=q.community)
    except ValueError as exc:
        raise InvalidParams(str(exc), field="segment") from exc
    order: NDArray[np.int32] = ranking.order if mask is None else R.cached(
        ("filtered", found.job_id, found.version_id, q.digest), lambda: ranking.order[mask[ranking.order]])
    if q.format == "csv":
        name = f"rankings-{q.graph_id}-v{found.version}-{q.measure}.csv"
        headers["Content-Disposition"] = f'attachment; filename="{name}"'
        return StreamingResponse(R.csv_chunks(order, ranking, nodes, membership, _shown),
                                 media_type="text/csv; charset=utf-8", headers=headers)
    page = order[position:position + q.limit]
    cols = R.columns(page, ranking, nodes, membership, _shown)
    measures = found.data["measures"]
    body = {
        "graph_id": q.graph_id, "version": found.version, "scores_version": found.scores_version,
        "job_id": found.job_id,
        "computed_at": found.created_at.isoformat().replace("+00:00", "Z"),
        "measure": q.measure, "weights": q.weights, "total": int(order.shape[0]),
        "meta": measures[q.measure] if q.weights is None else
        {"formula": COMPOSITE, "measures": {m: measures[m] for m in q.weights}},
        "items": [
            {"rank": position + k + 1, "node_id": nid, "score": sc, "percentile": p, "segment": sg,
             "contactable": ct, "label": lb, "community": cm}
            for k, (nid, sc, p, sg, ct, lb, cm) in enumerate(zip(*cols))
        ],
        "next_cursor": R.encode_cursor(found.job_id, position + q.limit, q.digest[:16], found.cursor_nodes())
        if position + q.limit < order.shape[0] else None,
    }
    return JSONResponse(body, headers=headers)


@router.get(
    "/{graph_id}/rankings",
    dependencies=[Depends(require_graph)],
    summary="Rank people by a measure or a weighted composite, filtered, paged or exported as CSV",
    description=(
        "From the newest succeeded `scores` job of the version (default: newest) that has the measure. "
        "Best first (lowest first for `constraint`), ties by node id. `percentile` is the mid-rank "
        "percentile among all scored nodes, 100 = top. `measure=composite&weights=pagerank:0.5,degree:0.5` "
        "ranks by `sum w_m p_m / sum w_m` over the measures' percentiles `p_m` (undefined counts 0). "
        "`next_cursor` pins the result it came from, so paging survives a newer scores job. "
        "`format=csv` streams the whole filtered ranking (text cells that start with = + - @ tab or CR "
        "get a leading apostrophe)."
    ),
    response_model=ScorePage,
    responses={**NOT_MODIFIED, 200: {"content": {"text/csv": {}}, "description": "JSON page, or CSV."}},
)
async def list_rankings(
    graph_id: str,
    request: Request,
    measure: Annotated[str, Query(description="A measure name, or `composite` with `weights`.")] = "pagerank",
    weights: Annotated[str | None, Query(description="Composite: `name:weight,...`, weights > 0.")] = None,
    limit: Annotated[int | None, Query(ge=1)] = None,
    cursor: str | None = None,
    segment: Annotated[list[str] | None, Query(description="Keep these segments (repeat for several).")] = None,
    contactable: Annotated[bool | None, Query(description="true: only people with consent; false: only without.")] = None,
    community: Annotated[int | None, Query(ge=0, description="Keep one community (needs a result with communities).")] = None,
    version: VersionQ = None,
    format_: Annotated[Literal["json", "csv"], Query(alias="format")] = "json",
    if_none_match: IfNoneMatch = None,
) -> Response:
    tenant, settings, maker = _caller(request)
    w = _measure(measure, weights)
    segments = sorted(set(segment or []))
    q = _RankingQuery(
        graph_id, measure, w, segments, contactable, community, parse_version(version),
        min(limit or settings.page_limit_default, settings.page_limit_max), format_,
        _digest(measure, sorted((w or {}).items()), segments, contactable, community, version),
    )

    def work() -> Response:
        with maker() as db:
            return _read_ranking(db, tenant, q, cursor, if_none_match)

    return await run_in_threadpool(work)


# -- one person -----------------------------------------------------------------------


def _shown(x: float) -> float:
    """Scores and percentiles to four significant digits, as every answer rounds shares."""
    return round_value(x, "share")


def _inverse(order: NDArray[np.int32]) -> NDArray[np.int32]:
    rank_of = np.empty(order.shape[0], dtype=np.int32)
    rank_of[order] = np.arange(1, order.shape[0] + 1, dtype=np.int32)
    return rank_of


def _read_node(db: Session, tenant: str, graph_id: str, nid: str, version: int | None) -> NodeRead:
    graph = graph_repo.get_graph(db, tenant, graph_id)
    ver = graph_repo.get_version(db, graph, version)
    loaded = load_version(db, ver)
    i = loaded.index.get(nid)
    if i is None:
        raise NotFound(f"node {nid!r} is not in version {ver.number} of this graph", resource="node", id=nid)
    g, a = loaded.graph, loaded.attrs
    out_deg, in_deg = int(np.count_nonzero(g.src == i)), int(np.count_nonzero(g.dst == i))
    try:
        found: _Found | None = _find(db, tenant, graph_id, ver.number, [])
    except ResultNotReady:
        found = None
    scores: dict[str, dict[str, Any]] = {}
    community = None
    if found is not None:
        for m in found.ranked():
            order = found.array(db, R.key("order", m))
            rank_of: NDArray[np.int32] = R.cached(("rank_of", found.job_id, m), partial(_inverse, order))
            scores[m] = {"score": R.as_number(_shown(float(found.array(db, R.key("score", m))[i]))),
                         "percentile": R.as_number(_shown(round(float(found.array(db, R.key("pct", m))[i]), 4))),
                         "rank": int(rank_of[i])}
        if found.has("community.membership"):
            c = int(found.array(db, R.key("community", "membership"))[i])
            community = {"community": c, "size": int(found.array(db, R.key("community", "size"))[c])}
    consent = int(a.consent[i])
    return NodeRead.model_validate({
        "graph_id": graph.id, "version": ver.number, "node_id": nid,
        "attributes": {
            "segment": a.segment_labels[a.segment[i]] if a.segment[i] >= 0 else None,
            "region": a.region_labels[a.region[i]] if a.region[i] >= 0 else None,
            "consent": None if consent < 0 else consent == 1,
            "contactable": bool(a.contactable()[i]),
            "cost": R.as_number(float(a.cost[i])), "value": R.as_number(float(a.value[i])),
            "label": loaded.labels[i], "extra": {k: v[i] for k, v in a.extra.items() if k != "label"},
        },
        "degree": out_deg + in_deg,  # undirected: each edge once as src or dst; a self-loop twice
        "in_degree": in_deg if g.directed else None, "out_degree": out_deg if g.directed else None,
        "job_id": found.job_id if found else None, "computed_at": found.created_at if found else None,
        "scores_version": found.scores_version if found else None,
        "scores": scores, "community": community,
    })


@node_route(
    router,
    "/{graph_id}/nodes/{node_id}",
    dependencies=[Depends(require_graph)],
    summary="Read a person: attributes, degree, every score with its percentile and rank, community",
    description="`node_id` is one percent-encoded path segment (`/` as `%2F`). Scores come from the "
    "newest succeeded `scores` job of the version; `scores` is empty and `job_id` null when none has run.",
    response_model=NodeRead,
)
async def read_node(graph_id: str, node_id: str, request: Request, version: VersionQ = None) -> NodeRead:
    tenant, _, maker = _caller(request)
    number = parse_version(version)

    def work() -> NodeRead:
        with maker() as db:
            return _read_node(db, tenant, graph_id, node_id, number)

    return await run_in_threadpool(work)


# -- communities --------------------------------------------------------------------


def _read_communities(
    db: Session, tenant: str, graph_id: str, version: int | None, measure: str | None, top: int, limit: int,
    cursor: str | None, digest: str, if_none_match: str | None,
) -> Response:
    pinned, position, nodes_id = _cursor(cursor, digest)
    need = [R.key("community", "membership")] + ([R.key("order", measure)] if measure else [])
    found = _find(db, tenant, graph_id, version, need, result_id=pinned, nodes_id=nodes_id,
                  what=["community"] + ([measure] if measure else []))
    ranked = found.ranked()
    by = measure or ("degree" if "degree" in ranked else (ranked[0] if ranked else None))
    headers, unchanged = _not_modified(if_none_match, found.job_id, found.etag, found.version_id, digest, top, limit,
                                       position)
    if unchanged is not None:
        return unchanged
    nodes = _nodes(db, found.version_id)
    membership = found.array(db, R.key("community", "membership"))
    sizes = found.array(db, R.key("community", "size"))
    internal = found.array(db, R.key("community", "internal_edges"))
    order = found.array(db, R.key("order", by) if by else R.key("id_order"))
    values = found.array(db, R.key("score", by)) if by else None

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
            "density": _shown(inner / (size * (size - 1) / 2)) if size > 1 else None,
            "top_members": [{"node_id": nodes.ids[j], "label": nodes.labels[j] if nodes.labels else None,
                             "score": R.as_number(_shown(float(values[j]))) if values is not None else None}
                            for j in members],
        })
    meta = found.data["measures"].get("community", {})
    body = CommunityPage(
        graph_id=graph_id, version=found.version, scores_version=found.scores_version, job_id=found.job_id,
        computed_at=found.created_at,
        count=int(labels.shape[0]), modularity=meta.get("modularity"), measure=by or "node_id", meta=meta,
        items=items,  # type: ignore[arg-type]
        next_cursor=R.encode_cursor(found.job_id, position + limit, digest[:16], found.cursor_nodes())
        if position + limit < labels.shape[0] else None,
    )
    return JSONResponse(body.model_dump(mode="json"), headers=headers)


@router.get(
    "/{graph_id}/communities",
    dependencies=[Depends(require_graph)],
    summary="Communities: size, internal density, top members by a measure, and modularity",
    description="From the newest succeeded `scores` job of the version with `community` (Leiden, "
    "modularity objective). Largest first; members ranked by `measure` (default `degree` when the "
    "result has it, else its first measure), ties by node id.",
    response_model=CommunityPage,
    responses=NOT_MODIFIED,
)
async def list_communities(
    graph_id: str,
    request: Request,
    version: VersionQ = None,
    measure: Annotated[str | None, Query(description="Rank top members by this measure.")] = None,
    top: Annotated[int, Query(ge=0, le=1000, description="Members listed per community.")] = 5,
    limit: Annotated[int | None, Query(ge=1)] = None,
    cursor: str | None = None,
    if_none_match: IfNoneMatch = None,
) -> Response:
    tenant, settings, maker = _caller(request)
    if measure is not None:
        _measure(measure, None)
    number = parse_version(version)
    size = min(limit or settings.page_limit_default, settings.page_limit_max)
    digest = _digest("communities", measure, version)

    def work() -> Response:
        with maker() as db:
            return _read_communities(db, tenant, graph_id, number, measure, top, size, cursor, digest, if_none_match)

    return await run_in_threadpool(work)
