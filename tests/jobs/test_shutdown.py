"""Stopping `bellwether serve` while a worker is deep in a compiled loop, and a worker outliving serve.

The job kind ``test_spin`` (tests/jobs/kinds.py) runs a numba loop that holds
the GIL and never reaches a progress point, so the worker's SIGTERM handler
cannot run: the service must still be gone within the grace period plus 5
seconds, with the job back in the queue; and a worker whose `serve` is killed
must not keep computing.
"""

from __future__ import annotations

import datetime as dt
import os
import signal
import time
from pathlib import Path

import pytest

from storage.db import make_engine, make_sessionmaker
from storage.migrate import upgrade
from storage.repo import jobs as jr
from tests.ops.helpers import child_env, start_api, wait_healthy, wait_until

pytestmark = pytest.mark.slow

GRACE = 2.0


def _group(pgid: int) -> list[int]:
    """Live (not zombie) processes in process group ``pgid``, read from /proc."""
    out = []
    for entry in os.listdir("/proc"):
        if not entry.isdigit():
            continue
        try:
            stat = Path(f"/proc/{entry}/stat").read_text()
        except OSError:
            continue
        fields = stat[stat.rindex(")") + 2:].split()
        if fields[0] != "Z" and int(fields[2]) == pgid:
            out.append(int(entry))
    return out


def _alive(pid: int) -> bool:
    try:
        stat = Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return False
    return stat[stat.rindex(")") + 2:].split()[0] != "Z"


def _start(tmp_path: Path) -> tuple[object, str, str, int, object]:
    url = f"sqlite:///{tmp_path}/serve.sqlite3"
    upgrade(url)
    maker = make_sessionmaker(make_engine(url))
    with jr.write_session(maker) as db:
        job, _ = jr.add_job(db, tenant_id="default", graph_id=None, version=None, kind="test_spin",
                            params={"marker_dir": str(tmp_path)}, now=dt.datetime.now(dt.UTC), max_attempts=3)
        db.commit()
    env = child_env(
        tmp_path / "data", url,
        BELLWETHER_AUTH_DISABLED="true",
        BELLWETHER_JOB_KIND_MODULES='["tests.jobs.kinds"]',
        BELLWETHER_JOB_SHUTDOWN_GRACE_SECONDS=str(GRACE),
        BELLWETHER_JOB_HEARTBEAT_SECONDS="0.5",
        BELLWETHER_JOB_POLL_MAX_SECONDS="0.1",
    )
    proc, base = start_api(tmp_path / "data", env, workers=1)
    wait_healthy(proc, base)
    log = tmp_path / "runs.log"
    line = wait_until(lambda: log.exists() and log.read_text().split(), 60, "the job to enter its kernel")
    worker_pid = int(line[2])
    time.sleep(0.5)  # deep in the loop now
    return proc, job.id, url, worker_pid, maker


def test_sigterm_to_serve_ends_every_process_within_grace_and_requeues_the_job(tmp_path: Path) -> None:
    proc, job_id, _, worker_pid, maker = _start(tmp_path)
    p = proc.popen  # type: ignore[attr-defined]
    try:
        assert os.getpgid(worker_pid) == p.pid and worker_pid in _group(p.pid)
        with maker() as db:  # type: ignore[attr-defined]
            assert jr.get_job(db, "default", job_id).status == "running"
        t0 = time.monotonic()
        os.kill(p.pid, signal.SIGTERM)  # to serve only, as a process manager does
        wait_until(lambda: p.poll() is not None and not _group(p.pid), GRACE + 5.0,
                   "serve and its workers to end")
        took = time.monotonic() - t0
    finally:
        proc.stop()  # type: ignore[attr-defined]
    with maker() as db:  # type: ignore[attr-defined]
        job = jr.get_job(db, "default", job_id)
    assert (job.status, job.worker_id, job.attempts) == ("queued", None, 0)
    assert took <= GRACE + 5.0 and not _alive(worker_pid)


def test_a_worker_ends_when_serve_is_killed(tmp_path: Path) -> None:
    proc, _, _, worker_pid, _ = _start(tmp_path)
    p = proc.popen  # type: ignore[attr-defined]
    try:
        os.kill(p.pid, signal.SIGKILL)  # serve gets no chance to stop its workers
        p.wait(10)
        wait_until(lambda: not _alive(worker_pid), 3.0, "the orphaned worker to end")
    finally:
        proc.stop()  # type: ignore[attr-defined]
        if _alive(worker_pid):
            os.kill(worker_pid, signal.SIGKILL)


def test_give_back_jobs_requeues_only_the_killed_workers_jobs(maker) -> None:  # type: ignore[no-untyped-def]
    import tests.jobs.kinds  # noqa: F401  (registers test_sleep)
    from service.jobs.worker import give_back_jobs

    now = dt.datetime.now(dt.UTC)
    with jr.write_session(maker) as db:
        for _ in range(3):
            jr.add_job(db, tenant_id="default", graph_id=None, version=None, kind="test_sleep",
                       params={}, now=now, max_attempts=3)
        db.commit()
    held = {}
    for worker_id in ("vm:4242:aa", "vm:42:bb", "vm:4242:cc"):  # 42 is a prefix of 4242, not the same pid
        with jr.write_session(maker) as db:
            held[worker_id] = jr.claim_next(db, worker_id, 30, now).id  # type: ignore[union-attr]
            db.commit()
    with jr.write_session(maker) as db:  # the third one had its cancellation asked
        jr.cancel(db, "default", held["vm:4242:cc"], now)
        db.commit()
    assert give_back_jobs(maker, ["vm:4242:"]) == 2
    with maker() as db:
        jobs = [jr.get_job(db, "default", held[w]) for w in ("vm:4242:aa", "vm:42:bb", "vm:4242:cc")]
    assert [(j.status, j.worker_id, j.attempts) for j in jobs] == [
        ("queued", None, 0), ("running", "vm:42:bb", 1), ("cancelled", None, 1)]
