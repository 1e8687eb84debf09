"""Every setting of the service, read once from ``BELLWETHER_*`` environment variables."""

from __future__ import annotations

import math
import os
from pathlib import Path
from typing import Literal

from pydantic import Field
from pydantic_settings import BaseSettings, SettingsConfigDict

__all__ = ["Settings", "machine_memory_bytes", "usable_cores", "cpu_quota"]

GiB = 1024**3
MiB = 1024**2


def machine_memory_bytes() -> int:
    """Memory this process may use: physical memory, or the cgroup (container) limit when lower."""
    try:
        total = os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
    except (ValueError, OSError, AttributeError):
        total = 8 * GiB
    for path in ("/sys/fs/cgroup/memory.max", "/sys/fs/cgroup/memory/memory.limit_in_bytes"):
        try:
            text = Path(path).read_text().strip()
        except OSError:
            continue
        if text.isdigit() and 0 < int(text) < total:
            total = int(text)
    return int(total)


def usable_cores(cgroup: Path = Path("/sys/fs/cgroup")) -> int:
    """Cores this process may run on: its CPU affinity, or the container's CPU quota
    (cgroup ``cpu.max``, or ``cpu.cfs_quota_us`` / ``cpu.cfs_period_us``) rounded up
    when lower; at least 1."""
    try:
        cores = len(os.sched_getaffinity(0))
    except (AttributeError, OSError):  # not Linux
        cores = os.cpu_count() or 1
    quota = cpu_quota(cgroup)
    if quota is not None:
        cores = min(cores, math.ceil(quota))
    return max(1, cores)


def cpu_quota(cgroup: Path = Path("/sys/fs/cgroup")) -> float | None:
    """CPUs the cgroup may use per period (cgroup v2, else v1), None without a quota."""
    try:
        fields = (cgroup / "cpu.max").read_text().split()
        if len(fields) == 2 and fields[0] != "max":
            return int(fields[0]) / int(fields[1])
        return None
    except (OSError, ValueError):
        pass
    for folder in (cgroup / "cpu", cgroup / "cpu,cpuacct"):
        try:
            quota = int((folder / "cpu.cfs_quota_us").read_text())
            period = int((folder / "cpu.cfs_period_us").read_text())
        except (OSError, ValueError):
            continue
        return quota / period if quota > 0 and period > 0 else None
    return None


class Settings(BaseSettings):
    model_config = SettingsConfigDict(env_prefix="BELLWETHER_", extra="ignore")

    data_dir: Path = Field(default=Path("./bellwether-data"), description="Embedded data folder.")
    database_url: str | None = Field(
        default=None, description="SQLAlchemy URL; default sqlite file under data_dir."
    )
    host: str = "127.0.0.1"
    port: int = 8000

    # Limits
    max_upload_bytes: int = Field(default=2 * GiB, description="Upload body limit (413 past it).")
    max_body_bytes: int = Field(default=8 * MiB, description="Body limit of non-upload routes.")
    upload_max_id_chars: int = Field(
        default=256, ge=1, description="Longest node id an upload may carry, in characters (422 past it)."
    )
    upload_max_label_chars: int = Field(
        default=512, ge=1, description="Longest segment, region, label or column name in an upload (422 past it)."
    )
    upload_max_value_chars: int = Field(
        default=1024, ge=1, description="Longest other node value (a free attribute) in an upload (422 past it)."
    )
    page_limit_max: int = 1000
    page_limit_default: int = 50

    # Auth: keys are required unless disabled, which is allowed only on loopback.
    auth_disabled: bool = False
    default_tenant: str = "default"
    console_secret: str | None = Field(
        default=None,
        description="Signs the console's session cookies; unset: a random secret kept in the data folder "
        "(set the same value on every API replica).",
    )
    console_session_minutes: int = Field(default=60, ge=1, le=24 * 60, description="Console sign-in lifetime.")

    # Jobs
    job_lease_seconds: float = 30.0
    job_heartbeat_seconds: float = 5.0
    job_poll_seconds: float = Field(default=0.05, description="Idle polling starts at this interval.")
    job_poll_max_seconds: float = Field(
        default=0.25, description="Idle polling backs off up to this: the longest a new job waits for an idle worker."
    )
    job_max_attempts: int = 3
    job_max_queued_per_tenant: int = 1000
    job_progress_interval_seconds: float = Field(default=0.5, description="Progress writes at most this often.")
    job_housekeeping_seconds: float = Field(
        default=1.0, description="Workers requeue expired leases, fire schedules, send webhooks this often."
    )
    job_shutdown_grace_seconds: float = Field(
        default=10.0, description="On SIGTERM a running job may finish this long, then it is given back."
    )
    job_retry_base_seconds: float = Field(default=5.0, description="First retry delay of a transient failure.")
    job_retry_max_seconds: float = 600.0
    job_kind_modules: list[str] = Field(
        default_factory=list, description="Extra modules that register job kinds on import (JSON list)."
    )
    worker_restart_backoff_seconds: float = Field(
        default=1.0, description="serve --workers waits this long (doubling) before restarting a dead worker."
    )
    wait_max_seconds: float = 60.0
    retention_days: float = 30.0
    retention_purge_every_seconds: float = 3600.0

    # Webhooks
    webhook_allow_loopback: bool = False
    webhook_timeout_seconds: float = 10.0
    webhook_max_attempts: int = 6
    webhook_backoff_base_seconds: float = Field(default=10.0, description="First retry delay (doubling).")
    webhook_backoff_max_seconds: float = 3600.0
    webhook_secret_overlap_seconds: int = Field(
        default=86400, ge=0, description="After a secret rotation the old secret still signs for this long."
    )

    # Rate limit (token bucket per key)
    rate_limit_per_second: float = 50.0
    rate_limit_burst: int = 200

    # -- Operations: logs, metrics, job time limits ------------------------------------
    # See service/api/middleware/ and service/telemetry/metrics.py. The rate limit above is
    # per API process; 0 turns it off.
    log_level: str = Field(default="INFO", description="Level of the bellwether.* loggers.")
    log_format: Literal["json", "text"] = Field(
        default="json", description="json: one JSON object per line with the request id; text: plain lines."
    )
    metrics_open_on_loopback: bool = Field(
        default=True, description="GET /metrics needs no key from 127.0.0.1/::1 (else an admin key)."
    )
    worker_metrics_port: int | None = Field(
        default=None, description="A `bellwether worker` serves its own /metrics on this port (other hosts)."
    )
    worker_metrics_host: str = Field(default="127.0.0.1", description="Bind address of the worker's /metrics.")
    job_timeout_seconds: float = Field(
        default=6 * 3600.0, description="Longest run of one job attempt; past it the job fails (job-timeout)."
    )
    job_kind_timeouts: dict[str, float] = Field(
        default_factory=dict, description='Per-kind run time limits in seconds (JSON, e.g. {"profile": 600}).'
    )

    # -- Per-job memory limit ---------------------------------------------------------
    job_memory_limit_bytes: int | None = Field(
        default=None, ge=1,
        description="Largest estimated peak memory of one job; past it the POST is refused and a "
        "running job stops (too-expensive). Default: half the machine's memory (the smaller of "
        "physical memory and the cgroup limit) divided by the number of workers of `serve`.",
    )

    # -- Threads per job ---------------------------------------------------------------
    threads: int | None = Field(
        default=None, ge=1, le=256,
        description="Threads one job may run on (RR sampling, simulations, sampled betweenness); "
        "results are the same for any number. Default: the cores the worker may use (its CPU "
        "affinity, or the container's CPU quota when lower), divided among the workers of `serve`.",
    )

    def thread_count(self, workers: int = 1) -> int:
        """Threads per job: the setting, else the usable cores shared by ``workers``."""
        if self.threads is not None:
            return int(self.threads)
        return max(1, usable_cores() // max(1, workers))

    # -- Per-process caches (service/usecases/caches.py) ---------------------------------------
    cache_bytes: int = Field(
        default=2 * GiB, ge=0,
        description="Memory each process (the API, every worker) may keep for derived structures "
        "of graph versions and results (loaded graphs, recommendation indexes, diffusion arrays, "
        "ranking arrays), all caches together; least recently used go first. 0 keeps nothing.",
    )
    # Why 2 GiB: it holds every cached structure of a graph of about 25 million arcs, at about
    # 84 bytes an arc (16 for the loaded graph, 26 for one set of diffusion arrays, 42 for the
    # recommendation index, as measured by tests/bench/bench_memory.py on com-DBLP; see
    # service/jobs/admission.py), so repeat requests on a large version do not reload it, and
    # it leaves most of an 8 GiB machine to the jobs themselves. Lower it when many workers
    # share a small machine: each process has its own caches.

    def job_memory_limit(self, workers: int = 1) -> int:
        """The per-job memory limit in bytes: the setting, else the default rule above."""
        if self.job_memory_limit_bytes is not None:
            return int(self.job_memory_limit_bytes)
        return max(machine_memory_bytes() // 2 // max(1, workers), 64 * MiB)

    def resolved_database_url(self) -> str:
        if self.database_url:
            return self.database_url
        return f"sqlite:///{(self.data_dir / 'bellwether.sqlite3').resolve()}"

    def spool_dir(self) -> Path:
        return self.data_dir / "spool"
