"""Health and readiness."""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, Request
from fastapi.responses import JSONResponse
from pydantic import BaseModel, Field

__all__ = ["router"]

router = APIRouter(tags=["operations"])


class Liveness(BaseModel):
    status: str = Field(examples=["ok"])


class Readiness(BaseModel):
    status: str = Field(description="`ready` or `unavailable`.")
    database: str = Field(description="`ok` or `unreachable`.")
    migrations: dict[str, str | None] | None = Field(default=None, description="Current and head revision.")
    detail: str | None = Field(default=None, description="The kind of database failure.")


READY_RESPONSES: dict[int | str, dict[str, Any]] = {
    200: {"model": Readiness, "description": "Ready."},
    503: {"model": Readiness, "description": "Not ready: the database is unreachable or not migrated."},
}


@router.get("/healthz", summary="Liveness: the process answers", response_model=Liveness)
async def healthz() -> dict[str, str]:
    return {"status": "ok"}


@router.get("/readyz", summary="Readiness: the database answers and migrations are current",
            responses=READY_RESPONSES)
def readyz(request: Request) -> JSONResponse:
    from storage.migrate import migration_status

    engine = request.app.state.engine
    try:
        current, head = migration_status(engine)
    except Exception as exc:  # any database failure means not ready
        return JSONResponse(
            {"status": "unavailable", "database": "unreachable", "detail": type(exc).__name__},
            status_code=503,
        )
    if current != head:
        return JSONResponse(
            {"status": "unavailable", "database": "ok", "migrations": {"current": current, "head": head}},
            status_code=503,
        )
    return JSONResponse({"status": "ready", "database": "ok", "migrations": {"current": current, "head": head}})
