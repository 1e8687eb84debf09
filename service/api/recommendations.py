"""Introductions for a person, next contacts and referral asks, and CSV exports of batch results.

Both recommendation routes answer synchronously. The first request on a
version builds its neighbour index (and, for next contacts, the arc
probabilities of the model asked for) and keeps it for the process; later
requests touch only the person's or the adopters' neighbourhoods.
"""

from __future__ import annotations

import asyncio
import csv
import hashlib
import io
import json
from collections.abc import Callable, Iterator
from typing import Annotated, Any, TypeVar

import numpy as np
from fastapi import APIRouter, Depends, Header, HTTPException, Query, Request, Response, status
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse, StreamingResponse
from pydantic import ValidationError
from sqlalchemy.orm import Session, sessionmaker

from service.analytics.errors import UnknownNode
from service.analytics.ties.recommend import Recommendation, recommend_for
from service.analytics.ties.referrals import NextContact, next_contacts, referral_asks
from service.usecases.diffusion_inputs import diffusion_graph_for
from service.indexes import compute_pool, follow_on_for, neighbour_index_for
from service.jobs import registry
from service.jobs.errors import ResultNotReady
from service.jobs.tasks.referral_asks import contact_reason, exposure_explained
from service.usecases.loading import LoadedVersion, load_version
from service.usecases.rankings import safe_cell
from storage.errors import NotFound
from storage.repo import graphs as graph_repo
from storage.repo import jobs as job_repo
from storage.repo import results as result_repo

from .deps import SettingsDep, TenantDep, require_graph
from .errors import InvalidParams, PayloadTooLarge, UnsupportedMediaType
from .graphs import parse_version
from .etags import etag_matches
from .node_ids import node_route
from .rendering import round_document, round_cell
from .schemas.common import PROBLEM_RESPONSES
from .schemas.recommendations import (
    METHOD_ALIASES,
    Method,
    NextContactsPage,
    NextContactsRequest,
    RecommendationPage,
)

__all__ = ["csv_cell", "router"]

router = APIRouter(tags=["recommendations"], responses=PROBLEM_RESPONSES)

IfNoneMatch = Annotated[str | None, Header(alias="If-None-Match")]
T = TypeVar("T")

# Bumped whenever the ranking or the answer's shape changes, so old ETags stop matching.
ETAG_SALT = "recommendations/1"

def _csv_exports() -> dict[str, Callable[..., tuple[list[str], Iterator[list[Any]]]]]:
    """Job kinds whose result can be exported as CSV, and how (each kind declares its ``csv``)."""
    return {k.name: k.csv for k in registry.REGISTRY.values() if k.csv is not None}


def _maker(request: Request) -> sessionmaker[Session]:
    maker: sessionmaker[Session] = request.app.state.sessionmaker
    return maker


async def _compute(fn: Callable[[], T]) -> T:
    """Run ``fn`` on the bounded compute pool (see service.indexes), off the event loop."""
    return await asyncio.get_running_loop().run_in_executor(compute_pool(), fn)


def _etag(*parts: object) -> str:
    digest = hashlib.sha256(json.dumps([ETAG_SALT, *parts], default=str).encode()).hexdigest()
    return f'"{digest[:40]}"'


def _version(db: Session, tenant: str, graph_id: str, version: object) -> tuple[Any, Any]:
    graph = graph_repo.get_graph(db, tenant, graph_id)
    return graph, graph_repo.get_version(db, graph, parse_version(version))  # type: ignore[arg-type]


# -- introductions -------------------------------------------------------------------


def _recommendation_items(v: LoadedVersion, recs: list[Recommendation]) -> list[dict[str, Any]]:
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


@node_route(
    router,
    "/v1/graphs/{graph_id}/nodes/{node_id}/recommendations",
    dependencies=[Depends(require_graph)],
    summary="Whom to introduce a person to, with the shared contacts that explain it",
    description=(
        "People the node is not yet tied to, best first. `node_id` is one path segment, "
        "percent-encoded (`/` as `%2F`). Methods: `adamic_adar` (default), `resource_allocation`, "
        "`jaccard`, `common_neighbours`, `preferential_attachment`, `personalized_pagerank`, "
        "`weighted_adamic_adar` (alias `tie_strength`). An unknown node is a 404. The first "
        "request on a version builds its neighbour index (seconds on a million edges); later "
        "ones touch only the person's neighbourhood. The answer is fixed by the version and "
        "the parameters, hence the ETag."
    ),
    response_model=RecommendationPage,
    responses={304: {"description": "Not modified (If-None-Match matched the ETag)."}},
)
async def list_recommendations(
    graph_id: str,
    node_id: str,
    request: Request,
    tenant: TenantDep,
    method: Method = "adamic_adar",
    limit: Annotated[int, Query(ge=1, le=1000)] = 10,
    contactable: Annotated[bool, Query(description="Only people with contact consent.")] = False,
    version: Annotated[str | None, Query(description="Version number or 'latest' (default).")] = None,
    explain: Annotated[int, Query(ge=0, le=20, description="Shared contacts per recommendation.")] = 3,
    if_none_match: IfNoneMatch = None,
) -> Response:
    maker = _maker(request)
    name = METHOD_ALIASES.get(method, method)

    def work() -> Response:
        with maker() as db:
            graph, ver = _version(db, tenant, graph_id, version)
            etag = _etag(ver.id, node_id, name, limit, contactable, explain)
            headers = {"ETag": etag, "Cache-Control": "no-cache"}
            if etag_matches(if_none_match, etag):
                return Response(status_code=status.HTTP_304_NOT_MODIFIED, headers=headers)
            loaded = load_version(db, ver)
        node = loaded.index.get(node_id)
        if node is None:
            raise NotFound(
                f"node {node_id!r} is not in version {ver.number} of this graph", resource="node", id=node_id
            )
        index = neighbour_index_for(ver.id, loaded.graph)
        eligible = loaded.attrs.contactable() if contactable else None
        recs = recommend_for(index, node, method=name, limit=limit, eligible=eligible, explain=explain)
        body = {
            "graph_id": graph.id,
            "version": ver.number,
            "node_id": node_id,
            "method": name,
            "contactable": contactable,
            "items": _recommendation_items(loaded, recs),
        }
        return JSONResponse(round_document(body), headers=headers)

    return await _compute(work)


# -- next contacts and referral asks ----------------------------------------------


async def _read_body(request: Request, limit: int) -> bytes:
    declared = request.headers.get("content-length")
    if declared is not None and declared.isdigit() and int(declared) > limit:
        raise PayloadTooLarge(f"body of {int(declared)} bytes exceeds the limit of {limit} bytes", limit=limit)
    chunks, size = [], 0
    async for chunk in request.stream():
        size += len(chunk)
        if size > limit:
            raise PayloadTooLarge(f"body exceeds the limit of {limit} bytes", limit=limit)
        chunks.append(chunk)
    return b"".join(chunks)


def _csv_ids(raw: bytes, column: str) -> list[str]:
    """The ``column`` values of a CSV with a header row (RFC 4180), blank lines skipped."""
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise InvalidParams("the CSV body is not UTF-8", field="body") from exc
    reader = csv.reader(io.StringIO(text, newline=""), strict=True)
    try:
        header = next(reader, None)
        if header is None:
            raise InvalidParams(f"the CSV body is empty; send a header row with an {column!r} column", field="body")
        names = [h.strip() for h in header]
        if column not in names:
            raise InvalidParams(
                f"the CSV header has no {column!r} column (columns: {', '.join(names)})", field="body", line=1
            )
        at = names.index(column)
        out = []
        for row in reader:
            if not row or row == [""]:
                continue
            if at >= len(row):
                raise InvalidParams(f"line {reader.line_num} has no {column!r} value", field="body", line=reader.line_num)
            out.append(row[at])
        return out
    except csv.Error as exc:
        raise InvalidParams(f"line {reader.line_num}: {exc}", field="body", line=reader.line_num) from exc


def _validation(exc: ValidationError, prefix: tuple[str, ...]) -> RequestValidationError:
    errors = [{**e, "loc": (*prefix, *e["loc"])} for e in exc.errors(include_url=False, include_context=False)]
    return RequestValidationError(errors)


def _contact_items(
    cs: list[NextContact] | tuple[NextContact, ...], v: LoadedVersion, model: str, follow_on: str | None,
    blend: float,
) -> list[dict[str, Any]]:
    ids, labels = v.ids, v.labels
    return [
        {
            "node_id": ids[c.node],
            "label": labels[c.node] or None,
            "exposure": c.exposure,
            "score": c.score,
            "adopter_contacts": c.adopter_contacts,
            "ask": None if c.ask < 0 else {
                "node_id": ids[c.ask], "label": labels[c.ask] or None, "tie_strength": c.ask_tie,
                "probability": c.ask_probability,
            },
            "reason": contact_reason(c, ids, model, follow_on, blend),
        }
        for c in cs
    ]


NEXT_CONTACTS_BODY = {
    "requestBody": {
        "required": True,
        "description": (
            "JSON (the options below), or for long adopter lists `text/csv` with a header row and an "
            "`id` column (rename with the `id` query parameter), the options then given as query "
            "parameters (`scheme`, `p`, `q` for the probability model)."
        ),
        "content": {
            "application/json": {"schema": NextContactsRequest.model_json_schema(
                ref_template="#/components/schemas/{model}")},
            "text/csv": {"schema": {"type": "string"}, "example": "id\nm00001\nm00042\n"},
        },
    }
}


@router.post(
    "/v1/graphs/{graph_id}/next-contacts",
    dependencies=[Depends(require_graph)],
    summary="Which non-adopters to contact next, and which adopter should ask each",
    description=(
        "Non-adopters with contact consent, those with an adopter who may ask them first, then by "
        "exposure, their chance of being reached in the next round from the adopters: Independent "
        "Cascade 1 - prod(1 - p_uv), Linear Threshold the adopters' incoming weight (Kempe, Kleinberg "
        "and Tardos 2003), optionally blended with a follow-on measure; equal exposures (common under "
        "weighted cascade) by the strength of the asking tie. Each names the adopter best placed to "
        "ask (strongest tie); `exposure_explained` says in words what exposure means under the chosen "
        "model. Only people with contact consent are listed or asked. `group_by=adopter` answers per adopter whom to ask them to "
        "refer, each target assigned to one adopter only. Unknown adopter ids are a 422 listing "
        "them (or, with strict=false, skipped and counted)."
    ),
    openapi_extra=NEXT_CONTACTS_BODY,
    responses={200: {"model": NextContactsPage}},
)
async def create_next_contacts(
    graph_id: str,
    request: Request,
    tenant: TenantDep,
    settings: SettingsDep,
    id: Annotated[str | None, Query(max_length=200, description="CSV body: the id column.")] = None,
    limit: Annotated[str | None, Query(description="CSV body: a number, or 'all'.")] = None,
    model: Annotated[str | None, Query(description="CSV body: 'ic' or 'lt'.")] = None,
    scheme: Annotated[str | None, Query(description="CSV body: probability scheme.")] = None,
    p: Annotated[float | None, Query(description="CSV body: probability.p.")] = None,
    q: Annotated[float | None, Query(description="CSV body: probability.q.")] = None,
    random_seed: Annotated[int | None, Query()] = None,
    version: Annotated[str | None, Query(description="CSV body: version number or 'latest'.")] = None,
    follow_on: Annotated[str | None, Query()] = None,
    blend: Annotated[float | None, Query()] = None,
    group_by: Annotated[str | None, Query()] = None,
    per_adopter: Annotated[int | None, Query()] = None,
    strict: Annotated[bool | None, Query()] = None,
) -> Response:
    ctype = (request.headers.get("content-type") or "").split(";")[0].strip().lower()
    if ctype not in ("application/json", "text/csv", "application/csv"):
        raise UnsupportedMediaType(
            f"Content-Type {ctype or '(none)'!r} is not read here; send application/json or text/csv",
            field="Content-Type",
        )
    raw = await _read_body(request, settings.max_body_bytes)
    options: dict[str, Any] = {
        k: v for k, v in {
            "limit": limit, "model": model, "random_seed": random_seed, "version": version,
            "follow_on": follow_on, "blend": blend, "group_by": group_by, "per_adopter": per_adopter,
            "strict": strict,
        }.items() if v is not None
    }
    prob = {k: v for k, v in {"scheme": scheme, "p": p, "q": q}.items() if v is not None}
    if ctype == "application/json":
        if options or prob or id is not None:
            raise InvalidParams(
                "with a JSON body, give the options in the body, not as query parameters",
                field=next(iter([*options, *prob, "id"])),
            )
        try:
            req = NextContactsRequest.model_validate_json(raw, strict=True)  # 0 is no boolean
        except ValidationError as exc:
            raise _validation(exc, ("body",)) from exc
    else:
        ids = await asyncio.to_thread(_csv_ids, raw, id or "id")
        if options.get("limit") == "all":
            options["limit"] = None
        if "version" in options and options["version"] != "latest":
            options["version"] = parse_version(options["version"])
        if prob:
            options["probability"] = prob
        try:
            req = NextContactsRequest.model_validate({**options, "adopters": ids})
        except ValidationError as exc:
            raise _validation(exc, ("query",)) from exc
    maker = _maker(request)
    return await _compute(lambda: _next_contacts(maker, tenant, graph_id, req))


def _next_contacts(maker: sessionmaker[Session], tenant: str, graph_id: str, req: NextContactsRequest) -> Response:
    with maker() as db:
        graph, ver = _version(db, tenant, graph_id, req.version)
        loaded = load_version(db, ver)
    lookup = loaded.index
    got = [lookup.get(s, -1) for s in req.adopters]
    idx = np.asarray(got, dtype=np.int64)
    unknown: list[str] = []
    if (idx < 0).any():
        unknown = list(dict.fromkeys(s for s, i in zip(req.adopters, got) if i < 0))
        if req.strict:
            shown = ", ".join(repr(s) for s in unknown[:5])
            raise UnknownNode(
                f"{len(unknown)} adopter id{'s are' if len(unknown) != 1 else ' is'} not in version "
                f"{ver.number} of this graph: {shown}{' ...' if len(unknown) > 5 else ''}",
                field="adopters", unknown=unknown[:20], unknown_count=len(unknown),
            )
        idx = idx[idx >= 0]
    adopters = np.unique(idx)
    pr = req.probability
    dg = diffusion_graph_for(ver.id, loaded.graph, model=req.model, scheme=pr.scheme, p=pr.p, q=pr.q,
                             random_seed=req.random_seed)
    index = neighbour_index_for(ver.id, loaded.graph)
    ok = loaded.attrs.contactable()
    blend = req.blend if req.blend is not None else (0.5 if req.follow_on else 0.0)
    values = follow_on_for(ver.id, loaded.graph, req.follow_on) if req.follow_on else None
    body: dict[str, Any] = {
        "graph_id": graph.id,
        "version": ver.number,
        "model": req.model,
        "probability": pr.model_dump(),
        "follow_on": req.follow_on,
        "blend": blend,
        "adopters": int(adopters.shape[0]),
        "unknown_adopters": {"count": len(unknown), "examples": unknown[:20]} if unknown else None,
        "group_by": req.group_by,
        "exposure_explained": exposure_explained(req.model, pr.scheme),
    }
    ids, labels = loaded.ids, loaded.labels
    if req.group_by == "adopter":
        groups = referral_asks(dg, adopters, index=index, eligible=ok, askers=ok, follow_on=values,
                               blend=blend, per_adopter=req.per_adopter, limit=req.limit)
        body["groups"] = [
            {
                "adopter": ids[g.adopter],
                "adopter_label": labels[g.adopter] or None,
                "expected_referrals": g.expected_referrals,
                "targets": _contact_items(g.targets, loaded, req.model, req.follow_on, blend),
            }
            for g in groups
        ]
    else:
        cs = next_contacts(dg, adopters, index=index, eligible=ok, askers=ok, follow_on=values,
                           blend=blend, limit=req.limit)
        body["items"] = _contact_items(cs, loaded, req.model, req.follow_on, blend)
    return JSONResponse(round_document(body))


# -- CSV exports of batch results ----------------------------------------------------


def csv_cell(value: object) -> str:
    """One CSV cell; text a spreadsheet would run as a formula gets a leading apostrophe."""
    if value is None:
        return ""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        return repr(value) if np.isfinite(value) else ""
    if isinstance(value, int):
        return str(value)
    return safe_cell(str(value)) or ""


def _csv_stream(header: list[str], rows: Iterator[list[Any]], batch: int = 2000) -> Iterator[str]:
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\r\n")
    writer.writerow(header)
    for i, row in enumerate(rows, 1):
        writer.writerow([csv_cell(round_cell(v, col)) for v, col in zip(row, header)])
        if i % batch == 0:
            yield buf.getvalue()
            buf.seek(0)
            buf.truncate()
    yield buf.getvalue()


@router.get(
    "/v1/jobs/{job_id}/result.csv",
    summary="Export a succeeded job's result as CSV (shortlist, forecast, recommendations, referral_asks, "
    "link_evaluation)",
    response_class=StreamingResponse,
    responses={
        200: {"content": {"text/csv": {}}, "description": "RFC 4180 CSV with a header row."},
        304: {"description": "Not modified (If-None-Match matched the ETag)."},
        406: {"description": "This job kind has no CSV export.", "content": {"application/problem+json": {}}},
    },
)
async def read_job_result_csv(
    job_id: str, request: Request, tenant: TenantDep, if_none_match: IfNoneMatch = None
) -> Response:
    maker = _maker(request)

    def prepare() -> Response:
        with maker() as db:
            job = job_repo.get_job(db, tenant, job_id)
            exports = _csv_exports()
            render = exports.get(job.kind)
            if render is None:
                raise HTTPException(
                    status.HTTP_406_NOT_ACCEPTABLE,
                    f"jobs of kind {job.kind!r} have no CSV export; kinds with one: {', '.join(sorted(exports))}",
                )
            if job.status != "succeeded":
                raise ResultNotReady(f"job {job.id} has no result: it is {job.status}", job_id=job.id,
                                     job_status=job.status)
            result = result_repo.get_result(db, job.id)
            etag = f'"{result.etag}-csv"'
            headers = {
                "ETag": etag,
                "Cache-Control": "no-cache",
                "Content-Disposition": f'attachment; filename="{job.kind}-{job.id}.csv"',
            }
            if etag_matches(if_none_match, etag):
                return Response(status_code=status.HTTP_304_NOT_MODIFIED, headers=headers)
            arrays = result_repo.get_result_arrays(db, result)
            graph = graph_repo.get_graph(db, tenant, job.graph_id or "")
            loaded = load_version(db, graph_repo.get_version(db, graph, job.version))
            header, rows = render(loaded, result.data, arrays)
        return StreamingResponse(_csv_stream(header, rows), media_type="text/csv; charset=utf-8", headers=headers)

    return await _compute(prepare)
