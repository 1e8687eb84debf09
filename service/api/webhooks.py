"""Webhooks: subscribe a URL to job events; read the delivery log."""

from __future__ import annotations

import hashlib
import json
from datetime import timedelta
from typing import Annotated

from fastapi import APIRouter, Header, Query, Request, Response, status
from fastapi.responses import JSONResponse

from service.jobs.webhooks import check_url, new_secret
from storage.repo import idempotency as idem_repo
from storage.repo import jobs as job_repo
from storage.repo import webhooks as webhook_repo

from .deps import DbDep, SettingsDep, TenantDep
from .errors import InvalidParams
from .jobs import clock_of, maker_of
from .schemas.common import PROBLEM_RESPONSES
from .schemas.webhooks import (
    DeliveryPage,
    DeliveryRead,
    SecretRotate,
    SecretRotated,
    WebhookCreate,
    WebhookCreated,
    WebhookList,
    WebhookRead,
)

__all__ = ["router"]

router = APIRouter(prefix="/v1/webhooks", tags=["webhooks"], responses=PROBLEM_RESPONSES)

IdemKey = Annotated[str | None, Header(alias="Idempotency-Key", min_length=1, max_length=200)]
ROUTE = "POST /v1/webhooks"


@router.post(
    "",
    status_code=status.HTTP_201_CREATED,
    summary="Subscribe a URL to job events (the answer shows the signing secret, once)",
    response_model=WebhookCreated,
    responses={200: {"description": "Replay of an earlier request with the same Idempotency-Key", "model": WebhookCreated}},
)
def create_webhook(
    body: WebhookCreate, request: Request, tenant: TenantDep, settings: SettingsDep, idempotency_key: IdemKey = None
) -> JSONResponse:
    digest = hashlib.sha256(json.dumps(body.model_dump(mode="json"), sort_keys=True).encode()).hexdigest()
    check_url(body.url, allow_loopback=settings.webhook_allow_loopback)
    with job_repo.write_session(maker_of(request)) as db:
        if idempotency_key:
            replay = idem_repo.get_replay(db, tenant, idempotency_key, ROUTE, digest)
            if replay is not None:
                return JSONResponse(replay.body, status_code=200, headers={"Location": replay.location or ""})
        hook = webhook_repo.add_webhook(
            db,
            tenant_id=tenant,
            url=body.url,
            events=list(body.events),
            secret=body.secret or new_secret(),
            description=body.description,
            now=clock_of(request).now(),
        )
        out = WebhookCreated.model_validate(hook, from_attributes=True).model_dump(mode="json")
        location = f"/v1/webhooks/{hook.id}"
        if idempotency_key:
            idem_repo.add_record(
                db, tenant_id=tenant, key=idempotency_key, route=ROUTE, request_hash=digest,
                status_code=201, body=out, location=location,
            )
        db.commit()
    return JSONResponse(out, status_code=201, headers={"Location": location})


@router.get("", summary="List webhooks")
def list_webhooks(db: DbDep, tenant: TenantDep) -> WebhookList:
    return WebhookList(
        items=[WebhookRead.model_validate(h, from_attributes=True) for h in webhook_repo.list_webhooks(db, tenant)]
    )


@router.get("/{webhook_id}", summary="Read a webhook")
def read_webhook(webhook_id: str, db: DbDep, tenant: TenantDep) -> WebhookRead:
    return WebhookRead.model_validate(webhook_repo.get_webhook(db, tenant, webhook_id), from_attributes=True)


@router.delete("/{webhook_id}", status_code=status.HTTP_204_NO_CONTENT, summary="Delete a webhook and its log")
def delete_webhook(webhook_id: str, request: Request, tenant: TenantDep) -> Response:
    with job_repo.write_session(maker_of(request)) as db:
        webhook_repo.delete_webhook(db, webhook_repo.get_webhook(db, tenant, webhook_id))
        db.commit()
    return Response(status_code=status.HTTP_204_NO_CONTENT)


@router.post(
    "/{webhook_id}/rotate-secret",
    summary="Replace the signing secret (the answer shows the new one, once); the old one stays valid for an overlap",
    response_model=SecretRotated,
)
def rotate_secret(
    webhook_id: str,
    request: Request,
    tenant: TenantDep,
    settings: SettingsDep,
    body: SecretRotate | None = None,
    idempotency_key: IdemKey = None,
) -> JSONResponse:
    """A retry with the same ``Idempotency-Key`` answers the same secret instead of rotating again
    (a second rotation would retire the secret the receiver still holds)."""
    seconds = body.overlap_seconds if body is not None else None
    overlap = timedelta(seconds=settings.webhook_secret_overlap_seconds if seconds is None else seconds)
    route = f"POST /v1/webhooks/{webhook_id}/rotate-secret"
    digest = hashlib.sha256(json.dumps({"overlap_seconds": seconds}).encode()).hexdigest()
    with job_repo.write_session(maker_of(request)) as db:
        hook = webhook_repo.get_webhook(db, tenant, webhook_id)
        if idempotency_key:
            replay = idem_repo.get_replay(db, tenant, idempotency_key, route, digest)
            if replay is not None:
                return JSONResponse(replay.body, status_code=200)
        webhook_repo.rotate_secret(db, hook, secret=new_secret(), now=clock_of(request).now(), overlap=overlap)
        out = SecretRotated(
            id=hook.id, secret=hook.secret, previous_secret_expires_at=hook.previous_secret_expires_at
        ).model_dump(mode="json")
        if idempotency_key:
            idem_repo.add_record(
                db, tenant_id=tenant, key=idempotency_key, route=route, request_hash=digest,
                status_code=200, body=out, location=None,
            )
        db.commit()
    return JSONResponse(out, status_code=200)


@router.get("/{webhook_id}/deliveries", summary="List a webhook's deliveries and their attempts, newest first")
def list_deliveries(
    webhook_id: str,
    db: DbDep,
    tenant: TenantDep,
    settings: SettingsDep,
    limit: Annotated[int, Query(ge=1)] = 50,
    cursor: str | None = None,
) -> DeliveryPage:
    hook = webhook_repo.get_webhook(db, tenant, webhook_id)
    try:
        rows, nxt = webhook_repo.list_deliveries(db, hook, limit=min(limit, settings.page_limit_max), cursor=cursor)
    except ValueError as exc:
        raise InvalidParams(str(exc), field="cursor") from exc
    items = []
    for d in rows:
        item = DeliveryRead.model_validate(d, from_attributes=True)
        if d.status != "pending":
            item = item.model_copy(update={"next_attempt_at": None})
        items.append(item)
    return DeliveryPage(items=items, next_cursor=nxt)
