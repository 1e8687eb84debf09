"""A real server process for tests that need real sockets and real workers."""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import httpx

__all__ = ["free_port", "live_server"]


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


@contextmanager
def live_server(
    data_dir: Path, *, workers: int = 0, env: dict[str, str] | None = None, database_url: str | None = None,
    startup_timeout: float = 60.0,
) -> Iterator[str]:
    """Run ``bellwether serve`` on a free loopback port; yield its base URL."""
    port = free_port()
    full_env = dict(os.environ)
    full_env.update(
        {
            "BELLWETHER_DATA_DIR": str(data_dir),
            "BELLWETHER_AUTH_DISABLED": "true",
            "PYTHONUNBUFFERED": "1",
        }
    )
    if database_url:
        full_env["BELLWETHER_DATABASE_URL"] = database_url
    full_env.update(env or {})
    log = open(data_dir.parent / f"server-{port}.log", "wb")
    proc = subprocess.Popen(
        [sys.executable, "-m", "service.cli.main", "serve", "--port", str(port), "--workers", str(workers)],
        env=full_env,
        stdout=log,
        stderr=subprocess.STDOUT,
        start_new_session=True,
    )
    base = f"http://127.0.0.1:{port}"
    try:
        deadline = time.monotonic() + startup_timeout
        while True:
            if proc.poll() is not None:
                raise RuntimeError(f"server exited with {proc.returncode}; see {log.name}")
            try:
                if httpx.get(base + "/healthz", timeout=1).status_code == 200:
                    break
            except httpx.HTTPError:
                pass
            if time.monotonic() > deadline:
                raise RuntimeError(f"server did not start in {startup_timeout}s; see {log.name}")
            time.sleep(0.2)
        yield base
    finally:
        try:
            os.killpg(proc.pid, signal.SIGTERM)
            proc.wait(timeout=20)
        except (ProcessLookupError, subprocess.TimeoutExpired):
            try:
                os.killpg(proc.pid, signal.SIGKILL)
            except ProcessLookupError:
                pass
            proc.wait()
        log.close()
