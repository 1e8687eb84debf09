"""Past campaigns of a graph: create, list, read, delete, and upload a log once."""

from __future__ import annotations

import hashlib
import json
from typing import Annotated

from fastapi import APIRouter, Header, Query, Request, Response, status
from fastapi.concurrency import run_in_threadpool

from service.intake import SizeLimits
from service.usecases import campaigns as uc

from .deps import DbDep, SettingsDep, TenantDep, WriteDbDep
from .errors import UnsupportedMediaType
from .graphs import parse_version
from .schemas.common import PROBLEM_RESPONSES
from .spool import FORMATS, media_type, spool_body

__all__ = ["router"]

router = APIRouter(prefix="/v1/graphs/{graph_id}/campaigns", tags=["campaigns"], responses=PROBLEM_RESPONSES)

IdemKey = Annotated[str | None, Header(alias="Idempotency-Key", max_length=200)]

LOG_BODY = {
    "requestBody": {
        "required": True,
        "description": "The campaign's log, one row per person: person, role (seed or adopter), time (ISO 8601 "
        "with a time zone, or hours after the start) or round (0 for seeds), optional referred_by. CSV with a "
        "header row, NDJSON, or JSON (an array of rows, or an object whose `log` member is that array).",
        "content": {
            "application/json": {"schema": {"type": "object", "additionalProperties": True}},
            "application/x-ndjson": {"schema": {"type": "string", "format": "binary"}},
            "text/csv": {"schema": {"type": "string", "format": "binary"}},
        },
    }
}


def _hash(*parts: object) -> str:
    return hashlib.sha256(json.dumps(parts, sort_keys=True, default=str).encode()).hexdigest()


@router.post("", status_code=status.HTTP_201_CREATED, summary="Record a past campaign")
def create_campaign(graph_id: str, body: uc.CampaignCreate, db: WriteDbDep, tenant: TenantDep,
                    response: Response, idempotency_key: IdemKey = None) -> uc.CampaignRead:
    out = uc.create_campaign(db, tenant, graph_id, body, idempotency_key=idempotency_key,
                             request_hash=_hash(body.model_dump(mode="json")))
    response.headers["Location"] = f"/v1/graphs/{graph_id}/campaigns/{out.id}"
    return out


@router.get("", summary="List a graph's past campaigns, oldest first")
def list_campaigns(graph_id: str, db: DbDep, tenant: TenantDep) -> uc.CampaignList:
    return uc.list_campaigns(db, tenant, graph_id)


@router.get("/{campaign_id}", summary="Read a past campaign and what its log holds")
def get_campaign(graph_id: str, campaign_id: str, db: DbDep, tenant: TenantDep) -> uc.CampaignRead:
    return uc.read_campaign(db, tenant, graph_id, campaign_id)


@router.delete("/{campaign_id}", status_code=status.HTTP_204_NO_CONTENT,
               summary="Delete a past campaign and its log")
def delete_campaign(graph_id: str, campaign_id: str, db: WriteDbDep, tenant: TenantDep) -> Response:
    uc.delete_campaign(db, tenant, graph_id, campaign_id)
    return Response(status_code=status.HTTP_204_NO_CONTENT)


@router.put("/{campaign_id}/log", summary="Upload a campaign's log (once)", openapi_extra=LOG_BODY,
            response_model=uc.CampaignRead)
async def upload_campaign_log(
    graph_id: str,
    campaign_id: str,
    request: Request,
    tenant: TenantDep,
    settings: SettingsDep,
    version: Annotated[str | None, Query(description="Version to check the ids against: a number or "
                                                     "'latest' (default).")] = None,
) -> uc.CampaignRead:
    ctype, charset = media_type(request.headers.get("content-type"))
    fmt = FORMATS.get(ctype)
    if fmt not in ("csv", "ndjson", "json"):
        raise UnsupportedMediaType(
            f"Content-Type {ctype or '(none)'!r} is not read here; send text/csv, application/x-ndjson "
            "or application/json", field="Content-Type")
    number = parse_version(version)
    maker = request.app.state.sessionmaker
    with maker() as db:  # an unknown graph or campaign is a 404 before the body is read
        uc.read_campaign(db, tenant, graph_id, campaign_id)
    spool = await spool_body(request, settings.spool_dir(), settings.max_upload_bytes)
    try:
        upload = uc.LogUpload(spool.path, fmt, charset, number, spool.sha256)  # type: ignore[arg-type]
        limits = SizeLimits(settings.upload_max_id_chars, settings.upload_max_label_chars,
                            settings.upload_max_value_chars)
        return await run_in_threadpool(
            uc.upload_campaign_log, maker, tenant, graph_id, campaign_id, upload, limits=limits)
    finally:
        spool.remove()
