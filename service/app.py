"""create_app(settings) -> FastAPI: routers, problem handlers, lifespan."""

from __future__ import annotations

from collections.abc import AsyncIterator
from contextlib import asynccontextmanager

from fastapi import FastAPI
from starlette.middleware import Middleware

from storage.db import make_engine, make_sessionmaker

from .api import api_router
from .api import metrics as metrics_api
from .api.middleware import (
    AccessLog,
    AllowHeader,
    BodyLimits,
    InternalErrors,
    LoopbackOnly,
    RateLimits,
    RequestIds,
    RequestMetrics,
)
from .api.openapi import install_openapi, operation_id
from .api.problems import install_problem_handlers
from .api.spool import remove_stale_spool
from .console import console_router
from .usecases.caches import set_max_bytes as set_cache_bytes
from .telemetry.logs import configure_logging
from .settings import Settings

__all__ = ["create_app"]

DESCRIPTION = """Scores the people in a relationship graph, forecasts how far a message
travels from chosen seeds, and recommends whom to contact next.

Relationship data is personal data: upload only data you are allowed to process,
honour consent and opt-outs, and treat forecasts as model estimates, not promises.
Errors are RFC 9457 problem documents (`application/problem+json`)."""


def create_app(settings: Settings | None = None) -> FastAPI:
    settings = settings or Settings()

    @asynccontextmanager
    async def lifespan(app: FastAPI) -> AsyncIterator[None]:
        configure_logging(settings.log_level, settings.log_format)
        set_cache_bytes(settings.cache_bytes)
        settings.data_dir.mkdir(parents=True, exist_ok=True)
        remove_stale_spool(settings.spool_dir())
        engine = make_engine(settings.resolved_database_url())
        app.state.engine = engine
        app.state.sessionmaker = make_sessionmaker(engine)
        try:
            yield
        finally:
            engine.dispose()

    # Operations middleware (service/api/middleware/), outermost first. The first four wrap the
    # checks, so refused requests carry the request id and are logged and counted too; the
    # checks then run in README "Errors" order: rate (429), body size and shape (413, 422),
    # and the routes after them (key and scope, graph, fields).
    middleware = [
        Middleware(RequestIds),
        Middleware(AccessLog),
        Middleware(RequestMetrics),
        Middleware(InternalErrors),
        Middleware(AllowHeader),
        Middleware(LoopbackOnly, auth_disabled=settings.auth_disabled),
        Middleware(RateLimits, per_second=settings.rate_limit_per_second, burst=settings.rate_limit_burst),
        Middleware(BodyLimits, max_body_bytes=settings.max_body_bytes),
    ]
    app = FastAPI(
        title="Bellwether",
        version="0.1.0",
        summary="Outreach seeds, reach forecasts and contact recommendations over relationship graphs.",
        description=DESCRIPTION,
        lifespan=lifespan,
        generate_unique_id_function=operation_id,
        middleware=middleware,
    )
    app.state.settings = settings
    install_problem_handlers(app)
    app.include_router(api_router)
    app.include_router(metrics_api.router)
    app.include_router(console_router)
    install_openapi(app)
    return app
