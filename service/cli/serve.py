"""``bellwether serve``: migrations (embedded default), worker processes, the API."""

from __future__ import annotations

import contextlib
import logging
import os
import signal
import threading
from types import FrameType
from typing import TYPE_CHECKING

import uvicorn

from service.telemetry.logs import configure_logging, uvicorn_log_config
from service.settings import Settings

if TYPE_CHECKING:
    from fastapi import FastAPI

__all__ = ["serve"]

log = logging.getLogger("bellwether.serve")


class _Stopped(Exception):
    """SIGTERM or SIGINT reached serve: leave uvicorn and stop the workers."""


def serve(settings: Settings, *, workers: int, api_processes: int = 1, migrate: bool = True) -> int:
    configure_logging(settings.log_level, settings.log_format)
    settings.data_dir.mkdir(parents=True, exist_ok=True)
    if migrate:
        from storage.migrate import upgrade

        upgrade(settings.resolved_database_url())
    if settings.auth_disabled and settings.host not in ("127.0.0.1", "localhost", "::1"):
        raise SystemExit("BELLWETHER_AUTH_DISABLED is allowed only when binding to loopback")
    if settings.job_memory_limit_bytes is None:
        # One limit for the API's admission check and every worker: half the machine's
        # memory shared by the workers (Settings.job_memory_limit).
        limit = settings.job_memory_limit(max(workers, 1))
        settings = settings.model_copy(update={"job_memory_limit_bytes": limit})
        os.environ["BELLWETHER_JOB_MEMORY_LIMIT_BYTES"] = str(limit)
    if settings.threads is None:
        # The workers share the cores, as they share memory (Settings.thread_count).
        threads = settings.thread_count(max(workers, 1))
        settings = settings.model_copy(update={"threads": threads})
        os.environ["BELLWETHER_THREADS"] = str(threads)
    supervisor = None
    if workers > 0:
        try:
            from .worker import start_workers
        except ImportError:  # job runner not installed in this build
            pass
        else:
            supervisor = start_workers(settings, workers)
    os.environ.setdefault("BELLWETHER_HOST", settings.host)
    received: list[int] = []
    if supervisor is not None and threading.current_thread() is threading.main_thread():
        # uvicorn raises the signal that stopped it again once it has shut down, with
        # the handlers it found in place. With the default handler that ends this
        # process at once and the `finally` below never stops the workers (they ran
        # on as orphans); this one leaves uvicorn.run (also when the signal comes
        # before uvicorn has put its own handlers in place) and the workers are stopped.
        def on_signal(signum: int, _frame: FrameType | None) -> None:
            if not received:
                received.append(signum)
                raise _Stopped

        for sig in (signal.SIGTERM, signal.SIGINT):
            signal.signal(sig, on_signal)
    try:
        with contextlib.suppress(_Stopped):
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
    if received:
        log.info("stopped by signal %s", received[0])
    return 0


def app_factory() -> FastAPI:
    from service.app import create_app

    return create_app(Settings())
