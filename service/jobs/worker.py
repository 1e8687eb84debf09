"""The worker: claim a job, run it with heartbeats and progress, finish it; housekeeping.

One :class:`Worker` runs one job at a time in the calling thread (jobs are
CPU-bound: run more worker processes for more parallelism). While a job
runs, a heartbeat thread extends its lease every ``heartbeat_seconds`` and
notices cancellation; the job's ``progress`` callback is written at most
every ``progress_interval_seconds`` and is where cancellation, a lost lease
and shutdown take effect.

Finishing compares-and-sets on the claimed run (:mod:`storage.repo.jobs`),
and the result, the status change and the webhook events are written in one
transaction, so a job is never completed twice and never has a result
without being succeeded.

``run_forever`` adds housekeeping in a second thread: expired leases back to
the queue, due schedules fired, webhook deliveries sent, retention purge.
``request_stop`` (called from the SIGTERM handler) stops claiming; the
running job may finish within ``shutdown_grace_seconds``, after which it is
given back to the queue at its next progress point.
"""

from __future__ import annotations

import logging
import math
import os
import socket
import threading
import time
from dataclasses import dataclass, field
from datetime import date, datetime, timedelta
from typing import Any

import httpx
import numpy as np
from sqlalchemy import update
from sqlalchemy.orm import Session, sessionmaker

from service.analytics._chunks import memory_limit, thread_limit, usable_cores
from service.analytics.errors import Cancelled
from service.usecases.loading import LoadedVersion, load_version
from service.telemetry.metrics import service_metrics, start_worker_metrics_server
from storage.errors import LeaseLost, NotFound
from storage.models import Graph, Job
from storage.repo import graphs as graph_repo
from storage.repo import jobs as job_repo
from storage.repo import webhooks as webhook_repo

from . import admission, registry, schedules, webhooks
from .clock import Clock, SystemClock
from .errors import JobTimeout, Released, WorkerLost, problem_document
from .kinds import RESERVED_RESULT_KEYS, TaskContext
from .retry import RetryPolicy

__all__ = [
    "WorkerConfig",
    "Worker",
    "RunOutcome",
    "new_worker_id",
    "json_clean",
    "give_back_jobs",
    "worker_lost_error",
]

log = logging.getLogger("bellwether.worker")


@dataclass(frozen=True)
class WorkerConfig:
    lease_seconds: float = 30.0
    heartbeat_seconds: float = 5.0
    poll_seconds: float = 0.05
    poll_max_seconds: float = 0.25
    max_attempts: int = 3
    progress_interval_seconds: float = 0.5
    housekeeping_seconds: float = 1.0
    retention_days: float = 30.0
    purge_every_seconds: float = 3600.0
    shutdown_grace_seconds: float = 10.0
    retry: RetryPolicy = field(default_factory=RetryPolicy)
    delivery: webhooks.DeliveryPolicy = field(default_factory=webhooks.DeliveryPolicy)
    kind_modules: tuple[str, ...] = ()
    # Run time limits, and a /metrics port of the worker's own.
    timeout_seconds: float = 6 * 3600.0
    kind_timeouts: dict[str, float] = field(default_factory=dict)
    metrics_port: int | None = None
    metrics_host: str = "127.0.0.1"
    # The per-job memory limit in bytes (None: none).
    memory_limit_bytes: int | None = None
    # Threads one job may run on (None: every core the process may use).
    threads: int | None = None

    def timeout_for(self, kind: str) -> float:
        return float(self.kind_timeouts.get(kind, self.timeout_seconds))

    @classmethod
    def from_settings(cls, s: Any) -> WorkerConfig:
        """From a :class:`service.settings.Settings` (read by the caller)."""
        return cls(
            lease_seconds=s.job_lease_seconds,
            heartbeat_seconds=s.job_heartbeat_seconds,
            poll_seconds=s.job_poll_seconds,
            poll_max_seconds=s.job_poll_max_seconds,
            max_attempts=s.job_max_attempts,
            progress_interval_seconds=s.job_progress_interval_seconds,
            housekeeping_seconds=s.job_housekeeping_seconds,
            retention_days=s.retention_days,
            purge_every_seconds=s.retention_purge_every_seconds,
            shutdown_grace_seconds=s.job_shutdown_grace_seconds,
            retry=RetryPolicy(
                base_seconds=s.job_retry_base_seconds, max_seconds=s.job_retry_max_seconds
            ),
            delivery=webhooks.DeliveryPolicy(
                timeout_seconds=s.webhook_timeout_seconds,
                max_attempts=s.webhook_max_attempts,
                backoff_base_seconds=s.webhook_backoff_base_seconds,
                backoff_max_seconds=s.webhook_backoff_max_seconds,
                allow_loopback=s.webhook_allow_loopback,
            ),
            kind_modules=tuple(s.job_kind_modules),
            timeout_seconds=s.job_timeout_seconds,
            kind_timeouts=dict(s.job_kind_timeouts),
            metrics_port=s.worker_metrics_port,
            metrics_host=s.worker_metrics_host,
            memory_limit_bytes=s.job_memory_limit(),
            threads=s.thread_count(),
        )


@dataclass(frozen=True)
class RunOutcome:
    """What :meth:`Worker.run_once` did with the job it claimed."""

    job_id: str
    status: str  # succeeded, failed, queued (retry or released), cancelled, lease-lost
    error: dict[str, Any] | None = None


def new_worker_id() -> str:
    return f"{socket.gethostname()}:{os.getpid()}:{os.urandom(3).hex()}"


def give_back_jobs(maker: sessionmaker[Session], worker_prefixes: list[str]) -> int:
    """Requeue the running jobs of workers that were killed (ids starting with a prefix).

    Like a graceful release the attempt is not counted; a job whose
    cancellation was asked ends ``cancelled``. Returns how many jobs changed.
    """
    now = SystemClock().now()
    changed = 0
    with job_repo.write_session(maker) as db:
        for prefix in worker_prefixes:
            ours = (Job.status == "running") & Job.worker_id.startswith(prefix, autoescape=True)
            cancelled = list(db.execute(
                update(Job).where(ours & Job.cancel_requested.is_(True))
                .values(status="cancelled", finished_at=now, worker_id=None, lease_until=None)
                .returning(Job)
                .execution_options(synchronize_session=False)
            ).scalars())
            for job in cancelled:
                webhooks.queue_job_event(db, job, now)
            changed += len(cancelled)
            changed += len(list(db.execute(
                update(Job).where(ours)
                .values(status="queued", run_after=now, worker_id=None, lease_until=None,
                        attempts=Job.attempts - 1)
                .returning(Job.id)
                .execution_options(synchronize_session=False)
            ).scalars()))
        db.commit()
    return changed


def worker_lost_error(job: Job) -> dict[str, Any]:
    """The ``worker-lost`` problem a job ends with when its lease ran out on its last attempt."""
    return problem_document(
        WorkerLost(
            f"the worker running this job stopped answering {job.attempts} time(s) "
            f"(max_attempts {job.max_attempts}); the job was not retried again"
        ),
        attempts=job.attempts,
    )


def json_clean(value: Any) -> Any:
    """A JSON document from task output: numpy to Python, NaN and infinities to null."""
    if isinstance(value, dict):
        return {str(k): json_clean(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [json_clean(v) for v in value]
    if isinstance(value, np.ndarray):
        return json_clean(value.tolist())
    if isinstance(value, np.generic):
        return json_clean(value.item())
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, (datetime, date)):
        return value.isoformat()
    if value is None or isinstance(value, (str, int, bool)):
        return value
    return str(value)


class _Run:
    """State shared by a running job, its heartbeat thread and its progress callback."""

    def __init__(self, job: Job) -> None:
        self.job = job
        self.cancel = threading.Event()
        self.lost = threading.Event()
        self.done = threading.Event()
        self.last_write = -math.inf
        self.started = time.monotonic()
        self.timed_out: dict[str, Any] | None = None


class Worker:
    """Claims and runs jobs from the queue in ``maker``'s database."""

    def __init__(
        self,
        maker: sessionmaker[Session],
        config: WorkerConfig | None = None,
        worker_id: str | None = None,
        clock: Clock | None = None,
        http_client: httpx.Client | None = None,
    ) -> None:
        self.maker = maker
        self.config = config or WorkerConfig()
        self.worker_id = worker_id or new_worker_id()
        self.clock: Clock = clock or SystemClock()
        self._http = http_client
        self._stop = threading.Event()
        self._stop_at: float | None = None
        self._last_purge: float = -math.inf
        registry.import_kind_modules(self.config.kind_modules)

    # -- lifecycle ---------------------------------------------------------

    def request_stop(self) -> None:
        """Stop claiming; the running job may finish within the grace period."""
        if self._stop_at is None:
            self._stop_at = time.monotonic()
        self._stop.set()

    @property
    def stopping(self) -> bool:
        return self._stop.is_set()

    def run_forever(self) -> None:
        """Claim and run jobs until :meth:`request_stop`; housekeeping in a second thread."""
        keeper = threading.Thread(target=self._housekeeping_loop, name="bw-housekeeping", daemon=True)
        keeper.start()
        if self.config.metrics_port:
            start_worker_metrics_server(self.config.metrics_port, self.config.metrics_host)
        idle = self.config.poll_seconds
        log.info("worker started", extra={"worker_id": self.worker_id})
        try:
            while not self._stop.is_set():
                service_metrics().worker_alive()
                try:
                    outcome = self.run_once()
                except Exception:  # database unreachable and the like: wait, then try again
                    log.exception("worker loop error")
                    outcome = None
                if outcome is not None:
                    idle = self.config.poll_seconds
                    continue
                self._stop.wait(idle)
                idle = min(idle * 2, self.config.poll_max_seconds)
        finally:
            self._stop.set()
            keeper.join(timeout=self.config.delivery.timeout_seconds + 5)
            if self._http is not None:
                self._http.close()
            log.info("worker stopped", extra={"worker_id": self.worker_id})

    # -- one job -------------------------------------------------------------

    def run_once(self, *, heartbeat: bool = True) -> RunOutcome | None:
        """Claim one job and run it to its end; None when no job was eligible."""
        now = self.clock.now()
        with self.maker() as db:
            eligible = job_repo.any_due(db, now)
        if not eligible:
            return None
        with job_repo.write_session(self.maker) as db:
            job = job_repo.claim_next(db, self.worker_id, self.config.lease_seconds, now)
            db.commit()
        if job is None:
            return None
        log.info("job claimed", extra={"job_id": job.id, "kind": job.kind, "attempt": job.attempts})
        run = _Run(job)
        beat = None
        if heartbeat:
            beat = threading.Thread(target=self._heartbeat_loop, args=(run,), name="bw-heartbeat", daemon=True)
            beat.start()
        try:
            outcome = self._execute(run)
            if run.timed_out is not None:
                outcome = RunOutcome(job.id, "failed", run.timed_out)
            service_metrics().observe_job(job.kind, outcome.status, time.monotonic() - run.started)
            return outcome
        finally:
            run.done.set()
            if beat is not None:
                beat.join()

    def _execute(self, run: _Run) -> RunOutcome:
        job = run.job

        def progress(fraction: float, message: str | None = None) -> None:
            self._progress(run, fraction, message)

        try:
            kind = registry.get_kind(job.kind)
            params = registry.parse_params(kind, job.params)
            seed = int(getattr(params, "random_seed", 0) or 0)
            ctx = TaskContext(
                job_id=job.id,
                tenant_id=job.tenant_id,
                graph_id=job.graph_id,
                version=job.version,
                random_seed=seed,
                progress=progress,
                _load=self._loader(run),
                sessions=self.maker,
            )
            limit = self.config.memory_limit_bytes
            if kind.estimate is not None and job.graph_id is not None:
                v = ctx.load()
                admission.admit(kind.estimate(params, ctx.load, nodes=v.graph.n, edges=v.graph.m, limit=limit,
                                              threads=self.config.threads or usable_cores()), limit)
            token = memory_limit.set(limit)  # growing buffers check it (analytics._chunks)
            threads_token = thread_limit.set(self.config.threads)  # threads= defaults to it
            try:
                output = kind.run(ctx, params)
            finally:
                thread_limit.reset(threads_token)
                memory_limit.reset(token)
            data = {k: v for k, v in output.data.items() if k not in RESERVED_RESULT_KEYS}
            data.update(
                kind=job.kind,
                graph_id=job.graph_id,
                version=job.version,
                params=params.model_dump(mode="json"),
                random_seed=seed,
            )
            return self._succeed(run, json_clean(data), output.arrays)
        except Cancelled:
            return self._end(run, "cancelled")
        except Released:
            return self._end(run, "released")
        except LeaseLost:
            log.warning("lease lost while running", extra={"job_id": job.id})
            return RunOutcome(job.id, "lease-lost")
        except Exception as exc:
            return self._fail(run, exc)

    def _loader(self, run: _Run) -> Any:
        cache: list[LoadedVersion] = []

        def load() -> LoadedVersion:
            if cache:
                return cache[0]
            job = run.job
            with self.maker() as db:
                graph = db.get(Graph, job.graph_id) if job.graph_id else None
                if graph is None or graph.tenant_id != job.tenant_id:
                    raise NotFound("the job's graph no longer exists", resource="graph", id=job.graph_id)
                version = graph_repo.get_version(db, graph, job.version)
                loaded = load_version(db, version)
            job.version = version.number
            cache.append(loaded)
            return loaded

        return load

    def _progress(self, run: _Run, fraction: float, message: str | None = None) -> None:
        if run.lost.is_set():
            raise LeaseLost(job_id=run.job.id)
        if run.cancel.is_set():
            raise Cancelled(job_id=run.job.id)
        if self._stop_at is not None and time.monotonic() - self._stop_at >= self.config.shutdown_grace_seconds:
            raise Released(job_id=run.job.id)
        t = time.monotonic()
        if t - run.last_write < self.config.progress_interval_seconds:
            return
        run.last_write = t
        with job_repo.write_session(self.maker) as db:
            cancel = job_repo.update_progress(
                db,
                run.job,
                self.worker_id,
                fraction,
                message,
                lease_seconds=self.config.lease_seconds,
                now=self.clock.now(),
            )
            db.commit()
        if cancel:
            run.cancel.set()
            raise Cancelled(job_id=run.job.id)

    def _heartbeat_loop(self, run: _Run) -> None:
        limit = self.config.timeout_for(run.job.kind)
        while not run.done.wait(min(self.config.heartbeat_seconds, limit)):
            try:
                if time.monotonic() - run.started > limit:
                    self._time_out(run, limit)
                    return
                with job_repo.write_session(self.maker) as db:
                    cancel = job_repo.heartbeat(
                        db, run.job, self.worker_id, self.config.lease_seconds, self.clock.now()
                    )
                    db.commit()
                service_metrics().heartbeat()
                if cancel:
                    run.cancel.set()
            except LeaseLost:
                run.lost.set()
                return
            except Exception:  # a missed beat is not fatal; the lease has slack
                log.exception("heartbeat failed", extra={"job_id": run.job.id})

    def _time_out(self, run: _Run, limit: float) -> None:
        """Fail a job that ran past its kind's limit; the task's next progress call (or its finish) is refused."""
        job = run.job
        error = problem_document(
            JobTimeout(
                f"the {job.kind} job ran longer than its limit of {limit:g} s and was stopped; "
                "it is not retried (raise the kind's limit or make the job smaller)",
                limit_seconds=limit,
            ),
            attempts=job.attempts,
        )
        now = self.clock.now()
        with job_repo.write_session(self.maker) as db:
            job_repo.finish_failure(db, job, self.worker_id, error, now, None)
            webhooks.queue_job_event(db, job_repo.get_job_any_tenant(db, job.id), now)
            db.commit()
        run.timed_out = error
        run.lost.set()
        log.warning("job timed out", extra={"job_id": job.id, "kind": job.kind, "limit_seconds": limit})

    # -- finishing -------------------------------------------------------------

    def _succeed(self, run: _Run, data: dict[str, Any], arrays: dict[str, Any]) -> RunOutcome:
        job = run.job
        now = self.clock.now()
        try:
            with job_repo.write_session(self.maker) as db:
                job_repo.finish_success(db, job, self.worker_id, data, arrays, now)
                fresh = job_repo.get_job_any_tenant(db, job.id)
                webhooks.queue_job_event(db, fresh, now)
                db.commit()
        except LeaseLost:
            log.warning("lease lost at finish; result discarded", extra={"job_id": job.id})
            return RunOutcome(job.id, "lease-lost")
        log.info("job succeeded", extra={"job_id": job.id, "kind": job.kind})
        return RunOutcome(job.id, "succeeded")

    def _end(self, run: _Run, how: str) -> RunOutcome:
        job = run.job
        now = self.clock.now()
        try:
            with job_repo.write_session(self.maker) as db:
                if how == "cancelled":
                    job_repo.finish_cancelled(db, job, self.worker_id, now)
                    webhooks.queue_job_event(db, job_repo.get_job_any_tenant(db, job.id), now)
                else:
                    job_repo.release(db, job, self.worker_id, now)
                db.commit()
        except LeaseLost:
            return RunOutcome(job.id, "lease-lost")
        log.info("job %s", how, extra={"job_id": job.id})
        return RunOutcome(job.id, "cancelled" if how == "cancelled" else "queued")

    def _fail(self, run: _Run, exc: Exception) -> RunOutcome:
        job = run.job
        now = self.clock.now()
        decision = self.config.retry.decide(exc, attempts=job.attempts, max_attempts=job.max_attempts, now=now)
        error = problem_document(exc, attempts=job.attempts)
        if decision is None:
            log.warning("job failed: %s", error["detail"], extra={"job_id": job.id}, exc_info=exc)
        else:
            log.warning(
                "job attempt failed; retry in %.0f s", decision.delay_seconds, extra={"job_id": job.id}, exc_info=exc
            )
        try:
            with job_repo.write_session(self.maker) as db:
                status = job_repo.finish_failure(
                    db, job, self.worker_id, error, now, None if decision is None else decision.retry_at
                )
                if status == "failed":
                    webhooks.queue_job_event(db, job_repo.get_job_any_tenant(db, job.id), now)
                db.commit()
        except LeaseLost:
            return RunOutcome(job.id, "lease-lost")
        return RunOutcome(job.id, status, error)

    # -- housekeeping ----------------------------------------------------------

    def housekeep(self, *, purge: bool | None = None) -> None:
        """Requeue expired leases, fire due schedules, send due webhooks, purge when due."""
        now = self.clock.now()
        self.requeue_expired(now)
        schedules.fire_due(self.maker, now, max_attempts=self.config.max_attempts)
        self.deliver_webhooks()
        if purge is None:
            purge = time.monotonic() - self._last_purge >= self.config.purge_every_seconds
        if purge:
            self._last_purge = time.monotonic()
            self.purge(now)

    def requeue_expired(self, now: datetime) -> job_repo.ExpiredJobs | None:
        with self.maker() as db:
            any_expired = job_repo.any_lease_expired(db, now)
        if not any_expired:
            return None
        with job_repo.write_session(self.maker) as db:
            result = job_repo.requeue_expired(db, now, lost_error=worker_lost_error)
            for job in [*result.failed, *result.cancelled]:
                webhooks.queue_job_event(db, job, now)
            db.commit()
        if result.requeued or result.failed:
            log.warning(
                "expired leases",
                extra={"requeued": result.requeued, "failed": [j.id for j in result.failed]},
            )
        return result

    def deliver_webhooks(self) -> int:
        if self._http is None:
            self._http = httpx.Client(follow_redirects=False)
        return webhooks.deliver_due(self.maker, self._http, self.config.delivery, self.clock.now)

    def purge(self, now: datetime) -> int:
        cutoff = now - timedelta(days=self.config.retention_days)
        with job_repo.write_session(self.maker) as db:
            n = job_repo.purge(db, cutoff)
            webhook_repo.purge_deliveries(db, cutoff)
            db.commit()
        if n:
            log.info("retention purge", extra={"jobs": n, "cutoff": cutoff.isoformat()})
        return n

    def _housekeeping_loop(self) -> None:
        while not self._stop.wait(self.config.housekeeping_seconds):
            try:
                self.housekeep()
            except Exception:
                log.exception("housekeeping failed")
