"""``bellwether serve``: migrations (embedded default), worker processes, the API."""

from __future__ import annotations

import logging
import os
from typing import TYPE_CHECKING

import uvicorn

from service.logs import configure_logging, uvicorn_log_config
from service.settings import Settings

if TYPE_CHECKING:
    from fastapi import FastAPI

__all__ = ["serve"]

log = logging.getLogger("bellwether.serve")


def serve(settings: Settings, *, workers: int, api_processes: int = 1, migrate: bool = True) -> int:
    configure_logging(settings.log_level, settings.log_format)
    settings.data_dir.mkdir(parents=True, exist_ok=True)
    if migrate:
        from storage.migrate import upgrade

        upgrade(settings.resolved_database_url())
    if settings.auth_disabled and settings.host not in ("127.0.0.1", "localhost", "::1"):
        raise SystemExit("BELLWETHER_AUTH_DISABLED is allowed only when binding to loopback")
    supervisor = None
    if workers > 0:
        try:
            from .worker import start_workers
        except ImportError:  # job runner not installed in this build
            pass
        else:
            supervisor = start_workers(settings, workers)
    os.environ.setdefault("BELLWETHER_HOST", settings.host)
    try:
        uvicorn.run(
            "service.cli.serve:app_factory",
            factory=True,
            host=settings.host,
            port=settings.port,
            workers=api_processes if api_processes > 1 else None,
            log_level="info",
            log_config=uvicorn_log_config(settings.log_level, settings.log_format),
            access_log=False,
        )
    finally:
        if supervisor is not None:
            supervisor.stop()
    return 0


def app_factory() -> FastAPI:
    from service.app import create_app

    return create_app(Settings())
