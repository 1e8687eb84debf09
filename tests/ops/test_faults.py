"""Faults with real processes on loopback: the API killed mid-upload, a worker killed while a
schedule is due, database connections dropped under a running job, SQLite under concurrent writers.

(kill -9 of a worker mid-job is in tests/jobs/test_processes.py.)
"""

from __future__ import annotations

import socket
import sqlite3
import threading
import time
from collections import Counter
from datetime import UTC, datetime, timedelta
from pathlib import Path

import httpx
import psycopg
import pytest
from sqlalchemy import func, select

from storage.db import make_engine, make_sessionmaker
from storage.migrate import upgrade
from storage.models import Job, JobResult, Schedule
from storage.repo import jobs as jr
from storage.repo import schedules as schedule_repo
from tests.conftest import _reset_pg
from tests.jobs.dbs import add_tiny_graph
from tests.live import free_port
from tests.ops.helpers import child_env, running, start_api, start_worker, wait_healthy, wait_until

pytestmark = pytest.mark.slow

FAST_WORKER = {
    "BELLWETHER_JOB_POLL_SECONDS": "0.02",
    "BELLWETHER_JOB_POLL_MAX_SECONDS": "0.1",
    "BELLWETHER_JOB_HOUSEKEEPING_SECONDS": "0.2",
    "BELLWETHER_JOB_HEARTBEAT_SECONDS": "0.3",
    "BELLWETHER_JOB_LEASE_SECONDS": "2",
    "BELLWETHER_JOB_PROGRESS_INTERVAL_SECONDS": "0.1",
    "BELLWETHER_JOB_RETRY_BASE_SECONDS": "0.2",
    "BELLWETHER_JOB_KIND_MODULES": '["tests.jobs.kinds"]',
}


def edges_csv(n: int) -> bytes:
    return b"source,target\n" + b"".join(b"p%d,p%d\n" % (i, i + 1) for i in range(n))


def send_upload(base: str, gid: str, body: bytes, upto: int) -> socket.socket:
    """Start a POST upload over a raw socket and send ``upto`` bytes of its body."""
    host, port = base.removeprefix("http://").split(":")
    s = socket.create_connection((host, int(port)))
    head = (
        f"POST /v1/graphs/{gid}/versions HTTP/1.1\r\nHost: {host}\r\n"
        f"Content-Type: text/csv\r\nContent-Length: {len(body)}\r\n\r\n"
    ).encode()
    s.sendall(head + body[:upto])
    return s


def test_api_killed_during_uploads_leaves_no_partial_version(tmp_path: Path) -> None:
    data = tmp_path / "data"
    data.mkdir()
    env = child_env(data, None, BELLWETHER_AUTH_DISABLED="true")
    port = free_port()
    proc, base = start_api(data, env, port=port)
    rows = 300_000
    body = edges_csv(rows)
    with running(proc):
        wait_healthy(proc, base)
        half, whole = (httpx.post(f"{base}/v1/graphs", json={"name": n, "directed": False}, timeout=30).json()["id"]
                       for n in ("half", "whole"))
        s1 = send_upload(base, half, body, len(body) // 2)  # the body is still arriving
        s2 = send_upload(base, whole, body, len(body))  # complete: the server is building the version
        time.sleep(0.3)
        proc.kill()  # SIGKILL: no cleanup runs
        proc.popen.wait(10)
        s1.close()
        s2.close()
    # The database file is intact and holds no partial version.
    with sqlite3.connect(data / "bellwether.sqlite3") as conn:
        assert conn.execute("PRAGMA integrity_check").fetchone() == ("ok",)
    proc, base = start_api(data, env, port=port)
    with running(proc):
        wait_healthy(proc, base)
        assert httpx.get(f"{base}/v1/graphs/{half}/versions", timeout=30).json()["items"] == []
        assert httpx.get(f"{base}/v1/graphs/{half}", timeout=30).json()["latest_version"] is None
        # The complete body may or may not have been committed before the kill; if it was, all of it.
        versions = httpx.get(f"{base}/v1/graphs/{whole}/versions", timeout=30).json()["items"]
        assert [v["edges"] for v in versions] in ([], [rows])
        # The server takes the same uploads again, and numbers versions from 1.
        for gid in (half, whole):
            r = httpx.post(f"{base}/v1/graphs/{gid}/versions", content=body,
                           headers={"Content-Type": "text/csv"}, timeout=60)
            assert r.status_code == 201 and r.json()["edges"] == rows
            assert r.json()["number"] == (len(versions) + 1 if gid == whole else 1)


def test_worker_killed_while_a_schedule_is_due_fires_it_once(tmp_path: Path) -> None:
    data = tmp_path / "data"
    data.mkdir()
    url = f"sqlite:///{data / 'bellwether.sqlite3'}"
    upgrade(url)
    engine = make_engine(url)
    maker = make_sessionmaker(engine)
    now = datetime.now(UTC)
    with jr.write_session(maker) as db:
        graph, _ = add_tiny_graph(db)
        first, second = (
            schedule_repo.add_schedule(db, tenant_id="default", graph_id=graph.id, cron="0 0 1 1 *",
                                       timezone="UTC", kind="profile", params={}, version=None,
                                       next_run_at=now + timedelta(seconds=delay), now=now)
            for delay in (-1.0, 3600.0)
        )
        db.commit()
    env = child_env(data, url, **FAST_WORKER)

    def jobs_of(schedule_id: str) -> list[Job]:
        with maker() as db:
            return list(db.execute(select(Job).where(Job.schedule_id == schedule_id)).scalars())

    a = start_worker(data, env, "a")
    with running(a):
        # Kill -9 the worker the moment it has fired the due schedule (its job may be running).
        wait_until(lambda: jobs_of(first.id), 30, "the first worker to fire the schedule", every=0.02)
        a.kill()
        a.popen.wait(10)
    # While no worker runs, the second schedule falls due too; then two workers restart at once.
    with jr.write_session(maker) as db:
        db.get(Schedule, second.id).next_run_at = datetime.now(UTC) - timedelta(seconds=1)  # type: ignore[union-attr]
        db.commit()
    b, c = start_worker(data, env, "b"), start_worker(data, env, "c")
    with running(b, c):
        for sid in (first.id, second.id):
            wait_until(lambda sid=sid: [j for j in jobs_of(sid) if j.status == "succeeded"], 40, f"{sid} to run")
        time.sleep(1.0)  # several housekeeping rounds of both workers
    for sid in (first.id, second.id):
        jobs = jobs_of(sid)
        assert len(jobs) == 1 and jobs[0].status == "succeeded", [(j.status, j.attempts) for j in jobs]
    with maker() as db:
        for sid in (first.id, second.id):
            s = db.get(Schedule, sid)
            assert s is not None and s.next_run_at.replace(tzinfo=UTC) > datetime.now(UTC) + timedelta(days=1)
        assert db.execute(select(func.count()).select_from(JobResult)).scalar_one() == 2
    engine.dispose()


@pytest.mark.postgres
def test_database_connections_dropped_under_a_running_job(pg_url: str, tmp_path: Path) -> None:
    _reset_pg(pg_url)
    upgrade(pg_url)
    data = tmp_path / "data"
    data.mkdir()
    engine = make_engine(pg_url)
    maker = make_sessionmaker(engine)
    with jr.write_session(maker) as db:
        job, _ = jr.add_job(db, tenant_id="default", graph_id=None, version=None, kind="test_sleep",
                            params={"seconds": 3.0, "steps": 30, "marker_dir": str(tmp_path)},
                            now=datetime.now(UTC), max_attempts=5)
        db.commit()
    engine.dispose()
    env = child_env(data, pg_url, **FAST_WORKER)
    marker = tmp_path / "runs.log"
    worker = start_worker(data, env, "pg")
    terminated = 0
    dsn = pg_url.replace("postgresql+psycopg://", "postgresql://")
    with running(worker):
        wait_until(lambda: marker.exists() and "start" in marker.read_text(), 40, "the job to start")
        with psycopg.connect(dsn, autocommit=True) as admin:
            for _ in range(3):  # cut every connection of the worker, three times, while the job runs
                terminated += len(admin.execute(
                    "SELECT pg_terminate_backend(pid) FROM pg_stat_activity "
                    "WHERE datname = current_database() AND pid <> pg_backend_pid()"
                ).fetchall())
                time.sleep(0.4)
        engine = make_engine(pg_url)
        maker = make_sessionmaker(engine)

        def finished() -> Job | None:
            with maker() as db:
                j = jr.get_job(db, "default", job.id)
                return j if j.status in ("succeeded", "failed", "cancelled") else None

        done = wait_until(finished, 40, "the job to finish after the connections were cut")
        assert worker.alive(), worker.tail()
    with maker() as db:
        results = db.execute(select(func.count()).select_from(JobResult)).scalar_one()
    engine.dispose()
    lines = Counter(line.split()[0] for line in marker.read_text().splitlines())
    assert terminated >= 1  # the worker's connections really were cut
    # Not lost: succeeded, with one result; run to completion exactly once (retried if it had to be).
    assert done.status == "succeeded" and results == 1, (done.status, done.error)
    assert lines["done"] == 1 and lines["start"] == done.attempts


def test_sqlite_under_concurrent_writers_never_says_database_is_locked(tmp_path: Path) -> None:
    data = tmp_path / "data"
    data.mkdir()
    # A 2 s lease can lapse on a loaded machine and the job is then (rightly) run again;
    # this test is about failed writes, so its lease is long enough not to lapse.
    env = child_env(data, None, BELLWETHER_AUTH_DISABLED="true", BELLWETHER_RATE_LIMIT_PER_SECOND="0",
                    **{**FAST_WORKER, "BELLWETHER_JOB_LEASE_SECONDS": "15"})
    proc, base = start_api(data, env, workers=2)
    answers: list[tuple[str, int, str]] = []
    lock = threading.Lock()

    def record(what: str, r: httpx.Response) -> None:
        with lock:
            answers.append((what, r.status_code, r.text[:500]))

    with running(proc):
        wait_healthy(proc, base)
        gids = [httpx.post(f"{base}/v1/graphs", json={"name": f"g{i}", "directed": False}, timeout=30).json()["id"]
                for i in range(4)]
        job_ids: list[str] = []

        def uploader(i: int) -> None:
            with httpx.Client(base_url=base, timeout=60) as c:
                for k in range(6):
                    r = c.post(f"/v1/graphs/{gids[i]}/versions", params={"mode": "append" if k else "replace"},
                               content=edges_csv(20_000 + k), headers={"Content-Type": "text/csv"})
                    record("upload", r)

        def submitter(i: int) -> None:
            with httpx.Client(base_url=base, timeout=60) as c:
                for k in range(15):
                    r = c.post(f"/v1/graphs/{gids[0]}/jobs",
                               json={"kind": "test_sleep", "params": {"seconds": 0.05, "steps": 5}})
                    record("job", r)
                    if r.status_code == 202:
                        with lock:
                            job_ids.append(r.json()["id"])
                    record("poll", c.get(f"/v1/jobs/{job_ids[-1] if job_ids else 'none'}"))

        # One version first, so jobs have something to name.
        record("upload", httpx.post(f"{base}/v1/graphs/{gids[0]}/versions", content=edges_csv(100),
                                    headers={"Content-Type": "text/csv"}, timeout=30))
        threads = [threading.Thread(target=uploader, args=(i,)) for i in range(4)]
        threads += [threading.Thread(target=submitter, args=(i,)) for i in range(3)]
        for t in threads:
            t.start()
        for t in threads:
            t.join(90)

        def all_done() -> bool:
            r = httpx.get(f"{base}/v1/jobs", params={"limit": 1000}, timeout=30)
            return sum(j["status"] == "succeeded" for j in r.json()["items"]) == len(job_ids)

        wait_until(all_done, 60, "the jobs to finish", every=0.3)
        jobs = httpx.get(f"{base}/v1/jobs", params={"limit": 1000}, timeout=30).json()["items"]
    locked = [a for a in answers if "locked" in a[2].lower()]
    assert not locked, locked[:3]
    assert not [a for a in answers if a[1] >= 500], [a for a in answers if a[1] >= 500][:3]
    assert Counter(w for w, code, _ in answers if code in (201, 202)) == {"upload": 25, "job": 45}
    # The workers finished every job on its first attempt: no write of theirs failed either.
    assert len(jobs) == 45 and {(j["status"], j["attempts"]) for j in jobs} == {("succeeded", 1)}
    assert "database is locked" not in proc.log_path.read_text()
