"""Shared helpers of the operations tests: apps with auth on, keys, processes on loopback."""

from __future__ import annotations

import contextlib
import os
import signal
import subprocess
import sys
import time
from collections.abc import AsyncIterator, Callable, Iterator
from pathlib import Path
from typing import Any

import httpx

from service.app import create_app
from storage.db import make_engine, make_sessionmaker
from storage.repo import keys as key_repo
from tests.conftest import make_settings
from tests.live import free_port

__all__ = [
    "PROBLEM",
    "ROOT",
    "Proc",
    "bearer",
    "cli",
    "make_key",
    "secured_app",
    "start_api",
    "start_worker",
    "wait_until",
]

ROOT = Path(__file__).resolve().parents[2]
PROBLEM = "application/problem+json"


def bearer(key: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {key}"}


def make_key(url: str, tenant: str, scopes: list[str], **kw: Any) -> str:
    engine = make_engine(url)
    try:
        with make_sessionmaker(engine)() as db:
            _, plain = key_repo.add_key(db, tenant_id=tenant, scopes=scopes, **kw)
            db.commit()
    finally:
        engine.dispose()
    return plain


@contextlib.asynccontextmanager
async def secured_app(
    url: str, tmp_path: Path, *, client: tuple[str, int] = ("127.0.0.1", 50000), **overrides: Any
) -> AsyncIterator[httpx.AsyncClient]:
    """An app with auth on (unless overridden) and an httpx client whose peer address is ``client``."""
    values: dict[str, Any] = {"auth_disabled": False}
    values.update(overrides)
    app = create_app(make_settings(url, tmp_path, **values))
    async with app.router.lifespan_context(app):
        transport = httpx.ASGITransport(app=app, client=client)
        async with httpx.AsyncClient(transport=transport, base_url="http://t") as c:
            c.app = app  # type: ignore[attr-defined]
            yield c


def wait_until(cond: Callable[[], Any], timeout: float, what: str, every: float = 0.1) -> Any:
    deadline = time.monotonic() + timeout
    while True:
        value = cond()
        if value:
            return value
        if time.monotonic() > deadline:
            raise AssertionError(f"timed out after {timeout} s waiting for {what}")
        time.sleep(every)


class Proc:
    """A child process in its own session, logging to a file; stopped by pid (never by name)."""

    def __init__(self, args: list[str], env: dict[str, str], log: Path) -> None:
        self.log_path = log
        self._log = open(log, "wb")  # noqa: SIM115  (closed in stop())
        self.popen = subprocess.Popen(
            args, env=env, cwd=str(ROOT), stdout=self._log, stderr=subprocess.STDOUT, start_new_session=True
        )

    @property
    def pid(self) -> int:
        return self.popen.pid

    def alive(self) -> bool:
        return self.popen.poll() is None

    def kill(self, sig: int = signal.SIGKILL) -> None:
        with contextlib.suppress(ProcessLookupError):
            os.killpg(self.popen.pid, sig)

    def stop(self, timeout: float = 15.0) -> None:
        if self.alive():
            self.kill(signal.SIGTERM)
            try:
                self.popen.wait(timeout)
            except subprocess.TimeoutExpired:
                self.kill(signal.SIGKILL)
                self.popen.wait(10)
        self._log.close()

    def tail(self, n: int = 40) -> str:
        try:
            return "\n".join(self.log_path.read_text(errors="replace").splitlines()[-n:])
        except OSError:
            return ""


def child_env(data_dir: Path, database_url: str | None, **extra: str) -> dict[str, str]:
    env = {k: v for k, v in os.environ.items() if not k.startswith("BELLWETHER_")}
    env.update(
        {
            "BELLWETHER_DATA_DIR": str(data_dir),
            "PYTHONUNBUFFERED": "1",
            "BELLWETHER_LOG_LEVEL": "WARNING",
        }
    )
    if database_url:
        env["BELLWETHER_DATABASE_URL"] = database_url
    env.update(extra)
    return env


def cli(args: list[str], env: dict[str, str], timeout: float = 60.0) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "service.cli.main", *args],
        env=env, cwd=str(ROOT), capture_output=True, text=True, timeout=timeout, check=False,
    )


def start_api(data_dir: Path, env: dict[str, str], *, port: int | None = None, workers: int = 0) -> tuple[Proc, str]:
    port = port or free_port()
    proc = Proc(
        [sys.executable, "-m", "service.cli.main", "serve", "--port", str(port), "--workers", str(workers)],
        env,
        data_dir.parent / f"api-{port}.log",
    )
    base = f"http://127.0.0.1:{port}"
    return proc, base


def wait_healthy(proc: Proc, base: str, timeout: float = 60.0) -> None:
    def up() -> bool:
        if not proc.alive():
            raise AssertionError(f"server exited with {proc.popen.returncode}:\n{proc.tail()}")
        try:
            return httpx.get(base + "/healthz", timeout=1).status_code == 200
        except httpx.HTTPError:
            return False

    wait_until(up, timeout, f"{base}/healthz", every=0.2)


def start_worker(data_dir: Path, env: dict[str, str], name: str) -> Proc:
    return Proc([sys.executable, "-m", "service.cli.main", "worker"], env, data_dir.parent / f"worker-{name}.log")


@contextlib.contextmanager
def running(*procs: Proc) -> Iterator[None]:
    try:
        yield
    finally:
        for p in procs:
            p.stop()
