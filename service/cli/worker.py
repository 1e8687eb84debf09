"""Worker processes: ``bellwether worker`` (one) and the supervisor of ``serve --workers N``.

:func:`run_worker` runs one worker in this process until SIGTERM or SIGINT
(stop claiming; the running job gets ``job_shutdown_grace_seconds`` to
finish, then goes back to the queue). :func:`start_workers` starts N worker
processes (``python -m service.cli.worker``, the settings passed down as
``BELLWETHER_*`` variables) and a thread that restarts any that dies, with
a doubling back-off; :meth:`Supervisor.stop` sends SIGTERM, waits the grace
period and a second, then kills a worker still running and requeues its job.
A supervised worker dies with its supervisor (``PR_SET_PDEATHSIG``).
"""

from __future__ import annotations

import json
import logging
import os
import signal
import socket
import subprocess
import sys
import threading
import time
from collections.abc import Mapping
from pathlib import Path
from types import FrameType
from typing import Any

from service.usecases.caches import set_max_bytes as set_cache_bytes
from service.usecases.forecasts import warm_kernels
from service.jobs.worker import Worker, WorkerConfig, give_back_jobs
from service.telemetry.logs import configure_logging
from service.settings import Settings
from storage.db import make_engine, make_sessionmaker

__all__ = ["run_worker", "start_workers", "Supervisor", "settings_env", "die_with_parent", "main"]

log = logging.getLogger("bellwether.supervisor")
worker_log = logging.getLogger("bellwether.worker")

PARENT_ENV = "BELLWETHER_WORKER_PARENT_PID"
PR_SET_PDEATHSIG = 1  # from <linux/prctl.h>
#: Seconds the supervisor waits past the grace period before it kills a worker.
KILL_MARGIN_SECONDS = 1.0


def run_worker(settings: Settings, *, install_signals: bool = True) -> None:
    """Run one worker until SIGTERM/SIGINT (or, when started by a supervisor, its exit)."""
    configure_logging(settings.log_level, settings.log_format)
    set_cache_bytes(settings.cache_bytes)
    settings.data_dir.mkdir(parents=True, exist_ok=True)
    engine = make_engine(settings.resolved_database_url())
    worker = Worker(make_sessionmaker(engine), WorkerConfig.from_settings(settings))
    if install_signals:

        def on_signal(signum: int, _frame: FrameType | None) -> None:
            worker_log.info("signal %s: stopping", signum, extra={"worker_id": worker.worker_id})
            worker.request_stop()

        signal.signal(signal.SIGTERM, on_signal)
        signal.signal(signal.SIGINT, on_signal)
    # Load the compiled diffusion kernels now rather than in the first forecast (~1 s from numba's cache).
    threading.Thread(target=warm_kernels, name="bw-warm-kernels", daemon=True).start()
    parent = os.environ.get(PARENT_ENV)
    if parent:
        # The kernel ends this process when its supervisor dies, even inside a long
        # compiled loop; the thread below is the fallback where prctl is missing.
        die_with_parent(int(parent))
        threading.Thread(target=_watch_parent, args=(int(parent), worker), daemon=True).start()
    try:
        worker.run_forever()
    finally:
        engine.dispose()


def die_with_parent(parent_pid: int) -> bool:
    """Ask Linux to SIGKILL this process when its parent dies (``PR_SET_PDEATHSIG``).

    SIGKILL, not SIGTERM: a worker inside a compiled loop runs no Python signal
    handler, and an orphan must not keep computing. Its job's lease then runs out
    and the next worker puts the job back in the queue. Returns False where prctl
    is not available (the parent watcher thread is the fallback). Exits at once
    when the parent is already gone.
    """
    ok = False
    if sys.platform.startswith("linux"):
        try:
            import ctypes

            libc = ctypes.CDLL(None, use_errno=True)
            ok = libc.prctl(PR_SET_PDEATHSIG, signal.SIGKILL, 0, 0, 0) == 0
        except (OSError, AttributeError):
            ok = False
    if os.getppid() != parent_pid:  # the parent died before prctl took effect
        os._exit(0)
    return ok


def _watch_parent(parent_pid: int, worker: Worker) -> None:
    """Stop when the supervising process is gone (its workers must not outlive it)."""
    while not worker.stopping:
        if os.getppid() != parent_pid:
            worker.request_stop()
            return
        time.sleep(1.0)


def settings_env(settings: Settings, base: Mapping[str, str] | None = None) -> dict[str, str]:
    """The environment that makes ``Settings()`` in a child equal ``settings``."""
    fields = type(settings).model_fields
    managed = {"BELLWETHER_" + name.upper() for name in fields}
    env = {k: v for k, v in (os.environ if base is None else base).items() if k.upper() not in managed}
    for name in fields:
        value: Any = getattr(settings, name)
        key = "BELLWETHER_" + name.upper()
        if value is None:
            continue
        if isinstance(value, bool):
            env[key] = "true" if value else "false"
        elif isinstance(value, (str, int, float)):
            env[key] = str(value)
        elif isinstance(value, Path):
            env[key] = str(value.resolve())
        else:
            env[key] = json.dumps(value, default=str)
    return env


class Supervisor:
    """N worker processes, restarted when one dies."""

    def __init__(
        self,
        settings: Settings,
        n: int,
        *,
        command: list[str] | None = None,
        cwd: str | None = None,
    ) -> None:
        self.settings = settings
        self.n = n
        self.command = command or [sys.executable, "-m", "service.cli.worker"]
        self.cwd = cwd
        self.procs: list[subprocess.Popen[bytes] | None] = [None] * n
        self.restarts = 0
        self._lock = threading.Lock()
        self._stop = threading.Event()
        self._stopping = threading.Event()  # no more restarts
        self._thread: threading.Thread | None = None
        self._backoff = [settings.worker_restart_backoff_seconds] * n
        self._next_start = [0.0] * n
        self._started = [0.0] * n

    def _spawn(self, i: int) -> subprocess.Popen[bytes]:
        env = settings_env(self.settings)
        env[PARENT_ENV] = str(os.getpid())
        proc = subprocess.Popen(self.command, env=env, cwd=self.cwd)
        self._started[i] = time.monotonic()
        log.info("worker process started", extra={"slot": i, "pid": proc.pid})
        return proc

    def start(self) -> Supervisor:
        with self._lock:
            for i in range(self.n):
                self.procs[i] = self._spawn(i)
        self._thread = threading.Thread(target=self._watch, name="bw-supervisor", daemon=True)
        self._thread.start()
        return self

    @property
    def pids(self) -> list[int]:
        with self._lock:
            return [p.pid for p in self.procs if p is not None]

    def _watch(self) -> None:
        base = self.settings.worker_restart_backoff_seconds
        while not self._stop.wait(0.2):
            with self._lock:
                for i, proc in enumerate(self.procs):
                    if self._stopping.is_set():
                        break
                    now = time.monotonic()
                    if proc is not None:
                        if proc.poll() is None:
                            continue
                        log.warning(
                            "worker process exited; restarting",
                            extra={"slot": i, "pid": proc.pid, "returncode": proc.returncode},
                        )
                        if now - self._started[i] > 30.0:
                            self._backoff[i] = base  # it had been up a while: not a crash loop
                        self._next_start[i] = now + self._backoff[i]
                        self._backoff[i] = min(self._backoff[i] * 2, 60.0)
                        self.procs[i] = None
                    if now >= self._next_start[i]:
                        self.procs[i] = self._spawn(i)
                        self.restarts += 1

    def stop(self, timeout: float | None = None) -> None:
        """SIGTERM every worker, wait up to ``timeout`` (grace + 1 s), then kill and requeue.

        A worker inside a long compiled loop cannot run its signal handler, so
        after the wait it is killed (SIGKILL) and the job it held goes back to
        the queue here. The restart thread ends only afterwards: Linux sends
        the workers' parent-death signal when the thread that started them
        ends, not only when this process does.
        """
        self._stopping.set()
        wait = self.settings.job_shutdown_grace_seconds + KILL_MARGIN_SECONDS if timeout is None else timeout
        killed: list[int] = []
        with self._lock:
            live = [p for p in self.procs if p is not None and p.poll() is None]
            for p in live:
                p.send_signal(signal.SIGTERM)
            deadline = time.monotonic() + wait
            for p in live:
                try:
                    p.wait(max(deadline - time.monotonic(), 0.01))
                except subprocess.TimeoutExpired:
                    log.warning("worker still running after the grace period; killing it", extra={"pid": p.pid})
                    p.kill()
                    p.wait()
                    killed.append(p.pid)
        if killed:
            self._give_back(killed)
        self._stop.set()
        if self._thread is not None:
            self._thread.join()

    def _give_back(self, pids: list[int]) -> None:
        """Put the jobs the killed workers held back in the queue."""
        engine = make_engine(self.settings.resolved_database_url())
        try:
            n = give_back_jobs(make_sessionmaker(engine), [f"{socket.gethostname()}:{pid}:" for pid in pids])
        except Exception:  # the database is gone too: the leases run out instead
            log.exception("could not give the killed workers' jobs back")
            return
        finally:
            engine.dispose()
        if n:
            log.warning("jobs of killed workers put back in the queue", extra={"jobs": n})


def start_workers(settings: Settings, n: int) -> Supervisor:
    """Start ``n`` supervised worker processes (for ``bellwether serve --workers N``)."""
    return Supervisor(settings, n).start()


def main() -> None:
    # Logging is set up by run_worker (JSON lines, one handler): no basicConfig here, which
    # would add a second, plain-text handler and write every line twice.
    run_worker(Settings())


if __name__ == "__main__":
    main()
