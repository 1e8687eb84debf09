"""Real worker processes on SQLite and PostgreSQL: exactly once, kill -9, SIGTERM, restarts.

Workers are started by :class:`service.cli.worker.Supervisor` exactly as
``bellwether serve --workers N`` does (``python -m service.cli.worker``),
with short leases. The test-only kinds reach them through
``job_kind_modules``; ``test_sleep`` appends ``start``/``done`` lines to a
log file so the test can count how often each job really ran.
"""

from __future__ import annotations

import os
import signal
import time
from collections import Counter
from pathlib import Path

import pytest
from sqlalchemy import func, select
from sqlalchemy.orm import Session, sessionmaker

from service.cli.worker import Supervisor
from service.settings import Settings
from storage.models import FINISHED_STATUSES, Job, JobResult
from storage.repo import jobs as jr

pytestmark = pytest.mark.slow

ROOT = Path(__file__).resolve().parents[2]


def settings_for(db_url: str, tmp_path: Path, **kw: object) -> Settings:
    base: dict[str, object] = dict(
        database_url=db_url,
        data_dir=tmp_path / "data",
        job_lease_seconds=5.0,
        job_heartbeat_seconds=0.3,
        job_poll_seconds=0.02,
        job_poll_max_seconds=0.1,
        job_housekeeping_seconds=0.2,
        job_progress_interval_seconds=0.1,
        job_kind_modules=["tests.jobs.kinds"],
        worker_restart_backoff_seconds=0.2,
        job_shutdown_grace_seconds=10.0,
    )
    base.update(kw)
    return Settings(**base)  # type: ignore[arg-type]


def queue_sleep(maker: sessionmaker[Session], n: int, marker_dir: Path, seconds: float = 0.0, steps: int = 1) -> list[str]:
    ids = []
    with jr.write_session(maker) as db:
        for _ in range(n):
            job, _ = jr.add_job(
                db, tenant_id="default", graph_id=None, version=None, kind="test_sleep",
                params={"seconds": seconds, "steps": steps, "marker_dir": str(marker_dir)},
                now=__import__("datetime").datetime.now(__import__("datetime").UTC), max_attempts=3,
            )
            ids.append(job.id)
        db.commit()
    return ids


def wait_until(cond, timeout: float, what: str) -> None:  # type: ignore[no-untyped-def]
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if cond():
            return
        time.sleep(0.1)
    raise AssertionError(f"timed out waiting for {what}")


def finished(maker: sessionmaker[Session]) -> int:
    with maker() as db:
        return int(db.execute(select(func.count()).select_from(Job).where(Job.status.in_(FINISHED_STATUSES))).scalar_one())


def log_lines(marker_dir: Path) -> list[tuple[str, str, int]]:
    path = marker_dir / "runs.log"
    if not path.exists():
        return []
    out = []
    for line in path.read_text().splitlines():
        what, job_id, pid = line.split()
        out.append((what, job_id, int(pid)))
    return out


@pytest.fixture(autouse=True)
def _quiet_workers(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("BELLWETHER_LOG_LEVEL", "ERROR")
    monkeypatch.chdir(ROOT)


def test_200_jobs_3_workers_each_done_exactly_once(
    jobs_db_url: str, maker: sessionmaker[Session], tmp_path: Path
) -> None:
    ids = queue_sleep(maker, 200, tmp_path)
    sup = Supervisor(settings_for(jobs_db_url, tmp_path), 3, cwd=str(ROOT)).start()
    try:
        wait_until(lambda: finished(maker) == 200, 60, "200 jobs")
    finally:
        sup.stop(timeout=10)
    with maker() as db:
        rows = db.execute(select(Job.status, Job.attempts)).all()
        results = db.execute(select(func.count()).select_from(JobResult)).scalar_one()
    assert Counter(s for s, _ in rows) == {"succeeded": 200}
    assert {a for _, a in rows} == {1} and results == 200
    lines = log_lines(tmp_path)
    done = Counter(j for what, j, _ in lines if what == "done")
    assert set(done) == set(ids) and set(done.values()) == {1}  # each ran to completion once
    assert len({pid for _, _, pid in lines}) >= 2  # the work was shared
    assert sup.restarts == 0


def test_kill_9_mid_job_is_taken_up_again_and_completes_once(
    jobs_db_url: str, maker: sessionmaker[Session], tmp_path: Path
) -> None:
    (jid,) = queue_sleep(maker, 1, tmp_path, seconds=3.0, steps=30)
    sup = Supervisor(settings_for(jobs_db_url, tmp_path, job_lease_seconds=1.5), 1, cwd=str(ROOT)).start()
    try:
        wait_until(lambda: any(w == "start" for w, _, _ in log_lines(tmp_path)), 30, "the job to start")
        victim = log_lines(tmp_path)[0][2]
        time.sleep(0.5)
        os.kill(victim, signal.SIGKILL)
        wait_until(lambda: finished(maker) == 1, 40, "the job to finish after the kill")
        assert sup.restarts >= 1 and victim not in sup.pids  # the supervisor replaced the dead worker
    finally:
        sup.stop(timeout=10)
    with maker() as db:
        job = jr.get_job(db, "default", jid)
        results = db.execute(select(func.count()).select_from(JobResult)).scalar_one()
    assert job.status == "succeeded" and job.attempts == 2 and results == 1
    lines = log_lines(tmp_path)
    assert [w for w, _, _ in lines] == ["start", "start", "done"]
    assert lines[0][2] == victim and lines[2][2] != victim


def test_sigterm_releases_a_long_job_after_the_grace_period(tmp_path: Path) -> None:
    from storage.db import make_engine, make_sessionmaker
    from storage.migrate import upgrade

    url = f"sqlite:///{tmp_path}/term.sqlite3"
    upgrade(url)
    eng = make_engine(url)
    maker = make_sessionmaker(eng)
    (jid,) = queue_sleep(maker, 1, tmp_path, seconds=20.0, steps=200)
    sup = Supervisor(settings_for(url, tmp_path, job_shutdown_grace_seconds=0.3), 1, cwd=str(ROOT)).start()
    try:
        wait_until(lambda: any(w == "start" for w, _, _ in log_lines(tmp_path)), 30, "the job to start")
        t = time.monotonic()
        sup.stop(timeout=10)
        stopped_in = time.monotonic() - t
    finally:
        sup.stop(timeout=1)
    with maker() as db:
        job = jr.get_job(db, "default", jid)
    assert (job.status, job.attempts, job.worker_id) == ("queued", 0, None)
    assert stopped_in < 5 and [p.returncode for p in sup.procs if p is not None] == [0]
    eng.dispose()
