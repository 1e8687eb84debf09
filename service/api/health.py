"""Health and readiness."""

from __future__ import annotations

from fastapi import APIRouter, Request
from fastapi.responses import JSONResponse

__all__ = ["router"]

router = APIRouter(tags=["operations"])


@router.get("/healthz", summary="Liveness: the process answers")
async def healthz() -> dict[str, str]:
    return {"status": "ok"}


@router.get("/readyz", summary="Readiness: the database answers and migrations are current")
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
