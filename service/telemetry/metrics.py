"""Prometheus metrics: the process's metric objects, the queue read at scrape time, the exposition.

Three sources end up in ``GET /metrics``:

- **HTTP** (API processes, :class:`ServiceMetrics`): requests by method,
  route template and status, their latency histogram, requests in flight.
- **Workers** (worker processes, the same class): jobs finished by kind
  and status, job run time, heartbeats. They reach an API's ``/metrics``
  when both share a ``PROMETHEUS_MULTIPROC_DIR`` (one host, for example
  ``bellwether serve --workers N``); a worker on another machine exposes
  its own with the setting ``worker_metrics_port``.
- **The queue** (:class:`QueueCollector`), read from the database at each
  scrape with a few ``COUNT ... GROUP BY`` statements, so it is right
  whatever the number of workers and machines: jobs by kind and status,
  queue depth, age of the oldest due job, busy workers, heartbeat age.

Multi-process mode is prometheus_client's own: set ``PROMETHEUS_MULTIPROC_DIR``
to an empty folder *before* the processes start (every API process and
worker on the host inherits it), and ``/metrics`` adds the files of all of
them up. Without it every process counts on its own and a scrape sees the
process that answered it.

Nothing is created at import time: :func:`service_metrics` builds the
metric objects on first use, once per process.
"""

from __future__ import annotations

import os
import threading
import time
from collections.abc import Callable, Iterable, Iterator
from datetime import UTC, datetime, timedelta
from typing import Any, Protocol

from prometheus_client import (
    CONTENT_TYPE_LATEST,
    CollectorRegistry,
    Counter,
    Gauge,
    Histogram,
    generate_latest,
    start_http_server,
)
from prometheus_client.core import GaugeMetricFamily
from prometheus_client.registry import Collector

__all__ = [
    "CONTENT_TYPE_LATEST",
    "QueueCollector",
    "ServiceMetrics",
    "exposition",
    "multiprocess_dir",
    "service_metrics",
    "start_worker_metrics_server",
]

HTTP_BUCKETS = (0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1.0, 2.5, 5.0, 10.0, 30.0, 60.0)
JOB_BUCKETS = (0.05, 0.1, 0.25, 0.5, 1.0, 2.5, 5.0, 10.0, 30.0, 60.0, 120.0, 300.0, 600.0, 1800.0, 3600.0, 14400.0)


def multiprocess_dir() -> str | None:
    """The prometheus_client multi-process folder, when this process was started with one."""
    path = os.environ.get("PROMETHEUS_MULTIPROC_DIR")
    return path if path and os.path.isdir(path) else None


class ServiceMetrics:
    """The metric objects of one process (API or worker), on their own registry."""

    def __init__(self) -> None:
        self.registry = CollectorRegistry(auto_describe=True)
        r = self.registry
        self.http_requests = Counter(
            "bellwether_http_requests",
            "HTTP requests answered, by method, route template and status.",
            ["method", "route", "status"],
            registry=r,
        )
        self.http_duration = Histogram(
            "bellwether_http_request_duration_seconds",
            "Time from the request's arrival to the end of its answer, by method, route template and status.",
            ["method", "route", "status"],
            buckets=HTTP_BUCKETS,
            registry=r,
        )
        self.http_in_flight = Gauge(
            "bellwether_http_requests_in_flight",
            "HTTP requests being answered now.",
            registry=r,
            multiprocess_mode="livesum",
        )
        self.jobs_finished = Counter(
            "bellwether_jobs_finished",
            "Job runs ended by this process's workers, by kind and outcome "
            "(succeeded, failed, queued for a retry or released, cancelled, lease-lost).",
            ["kind", "status"],
            registry=r,
        )
        self.job_duration = Histogram(
            "bellwether_job_duration_seconds",
            "Run time of one job attempt, from claim to end, by kind and outcome.",
            ["kind", "status"],
            buckets=JOB_BUCKETS,
            registry=r,
        )
        self.worker_heartbeats = Counter(
            "bellwether_worker_heartbeats",
            "Lease extensions sent by workers for their running jobs.",
            registry=r,
        )
        self.worker_last_seen = Gauge(
            "bellwether_worker_last_seen_timestamp_seconds",
            "Unix time a worker loop last ran (claimed, polled or heartbeat); newest of all workers.",
            registry=r,
            multiprocess_mode="max",
        )

    # -- called from the middleware and the worker ------------------------------

    def observe_request(self, method: str, route: str, status: int, seconds: float) -> None:
        labels = (method, route, str(status))
        self.http_requests.labels(*labels).inc()
        self.http_duration.labels(*labels).observe(seconds)

    def observe_job(self, kind: str, status: str, seconds: float) -> None:
        self.jobs_finished.labels(kind, status).inc()
        self.job_duration.labels(kind, status).observe(max(seconds, 0.0))
        self.worker_last_seen.set(time.time())

    def heartbeat(self) -> None:
        self.worker_heartbeats.inc()
        self.worker_last_seen.set(time.time())

    def worker_alive(self) -> None:
        self.worker_last_seen.set(time.time())


_lock = threading.Lock()
_metrics: ServiceMetrics | None = None


def service_metrics() -> ServiceMetrics:
    """This process's metrics, created on first use."""
    global _metrics
    with _lock:
        if _metrics is None:
            _metrics = ServiceMetrics()
        return _metrics


class QueueFigures(Protocol):
    """The queue at one moment (``storage.repo.jobs.QueueFigures`` has this shape)."""

    @property
    def jobs(self) -> list[tuple[str, str, int]]: ...
    @property
    def due(self) -> list[tuple[str, int]]: ...
    @property
    def oldest_due(self) -> datetime | None: ...
    @property
    def busy_workers(self) -> int: ...
    @property
    def expired_leases(self) -> int: ...
    @property
    def oldest_lease(self) -> datetime | None: ...


class QueueCollector(Collector):
    """Queue figures read from the database at scrape time (true across all workers and hosts).

    ``read(now)`` returns the figures; the caller owns the database access.
    """

    def __init__(self, read: Callable[[datetime], QueueFigures], *, lease_seconds: float) -> None:
        self.read = read
        self.lease_seconds = lease_seconds

    def describe(self) -> Iterable[Any]:
        return []

    def collect(self) -> Iterator[GaugeMetricFamily]:
        now = datetime.now(UTC)
        jobs = GaugeMetricFamily(
            "bellwether_jobs", "Jobs in the database, by kind and status.", labels=["kind", "status"]
        )
        depth = GaugeMetricFamily(
            "bellwether_queue_depth", "Queued jobs whose run time has come, by kind.", labels=["kind"]
        )
        figures = self.read(now)
        for kind, status, n in figures.jobs:
            jobs.add_metric([kind, status], float(n))
        for kind, n in figures.due:
            depth.add_metric([kind], float(n))
        oldest, busy, expired, oldest_lease = (
            figures.oldest_due, figures.busy_workers, figures.expired_leases, figures.oldest_lease
        )
        yield jobs
        yield depth
        yield GaugeMetricFamily(
            "bellwether_queue_oldest_age_seconds",
            "How long the oldest due queued job has waited (0 when none waits).",
            value=_age(now, oldest),
        )
        yield GaugeMetricFamily(
            "bellwether_workers_busy", "Workers running a job now (distinct worker ids).", value=float(busy)
        )
        # A lease is extended by each heartbeat to now + lease_seconds, so the
        # heartbeat it came from is lease_until - lease_seconds.
        last_beat = None if oldest_lease is None else _aware(oldest_lease) - timedelta(seconds=self.lease_seconds)
        yield GaugeMetricFamily(
            "bellwether_worker_heartbeat_age_seconds",
            "Seconds since the stalest running job's last heartbeat (0 when nothing runs).",
            value=_age(now, last_beat),
        )
        yield GaugeMetricFamily(
            "bellwether_jobs_lease_expired",
            "Running jobs whose lease has run out (their worker is gone; they are requeued soon).",
            value=float(expired),
        )


def _aware(when: datetime) -> datetime:
    return when if when.tzinfo is not None else when.replace(tzinfo=UTC)


def _age(now: datetime, when: datetime | None) -> float:
    return 0.0 if when is None else max((now - _aware(when)).total_seconds(), 0.0)


def exposition(queue: QueueCollector | None = None) -> bytes:
    """The text exposition: this process's (or, multi-process, every process's) metrics, then the queue."""
    path = multiprocess_dir()
    if path is not None:
        from prometheus_client import multiprocess

        registry = CollectorRegistry()
        multiprocess.MultiProcessCollector(registry, path=path)  # type: ignore[no-untyped-call]
    else:
        registry = service_metrics().registry
    out = generate_latest(registry)
    if queue is not None:
        extra = CollectorRegistry(auto_describe=False)
        extra.register(queue)
        out += generate_latest(extra)
    return out


def start_worker_metrics_server(port: int, host: str = "127.0.0.1") -> None:
    """Serve this worker process's metrics at ``http://host:port/metrics`` (a daemon thread)."""
    start_http_server(port, addr=host, registry=service_metrics().registry)
