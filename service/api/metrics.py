"""``GET /metrics``: Prometheus text exposition.

Open to loopback clients (the peer address of the connection is 127.0.0.0/8
or ::1; forwarded-for headers are not believed), so a Prometheus beside the
service scrapes without a key; from anywhere else it needs a key with the
``admin`` scope. ``metrics_open_on_loopback=false`` requires the key always
(do that when a reverse proxy on the same host forwards outside traffic).
"""

from __future__ import annotations

from datetime import datetime

from fastapi import APIRouter, Request, Response
from fastapi.concurrency import run_in_threadpool

from service.telemetry.metrics import CONTENT_TYPE_LATEST, QueueCollector, exposition
from storage.repo import jobs as job_repo

from .auth import _lookup
from .errors import Forbidden, Unauthorized
from .middleware import is_loopback

__all__ = ["router"]

router = APIRouter(tags=["operations"])

METRICS_RESPONSES: dict[int | str, dict[str, object]] = {
    200: {
        "description": "Prometheus text exposition format 0.0.4.",
        "content": {"text/plain": {"schema": {"type": "string"}}},
    },
}


def _require_admin(request: Request) -> None:
    """401 without a live key, 403 without the ``admin`` scope (the scope table's ``read`` does not apply)."""
    settings = request.app.state.settings
    if settings.auth_disabled:
        return
    scheme, _, token = request.headers.get("authorization", "").partition(" ")
    if scheme.lower() != "bearer" or not token.strip():
        raise Unauthorized("send an API key with the 'admin' scope as 'Authorization: Bearer <key>'")
    principal = _lookup(request, token.strip())
    if principal is None:
        raise Unauthorized("the API key is unknown, revoked or expired")
    request.state.principal = principal
    if "admin" not in principal.scopes:
        raise Forbidden("GET /metrics from outside loopback needs the 'admin' scope", scope="admin")


@router.get(
    "/metrics",
    summary="Prometheus metrics (no key from loopback; else an admin key)",
    response_class=Response,
    responses=METRICS_RESPONSES,
)
async def read_metrics(request: Request) -> Response:
    settings = request.app.state.settings
    client = request.client.host if request.client else None
    if not (settings.metrics_open_on_loopback and is_loopback(client)):
        await run_in_threadpool(_require_admin, request)
    maker = request.app.state.sessionmaker

    def read_queue(now: datetime) -> job_repo.QueueFigures:
        with maker() as db:
            return job_repo.get_queue_figures(db, now)

    queue = QueueCollector(read_queue, lease_seconds=settings.job_lease_seconds)
    body = await run_in_threadpool(exposition, queue)
    return Response(body, media_type=CONTENT_TYPE_LATEST)
