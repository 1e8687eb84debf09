"""The job queue repository on SQLite and PostgreSQL: idempotency, tenancy, claiming,
leases, finishing, cancellation, retention; and the results, schedules and webhook repos."""

from __future__ import annotations

import threading
from datetime import UTC, datetime, timedelta

import numpy as np
import pytest
from sqlalchemy import func, select
from sqlalchemy.orm import Session, sessionmaker

from storage.errors import Conflict, LeaseLost, NotFound
from storage.models import Job, JobResult, ResultArray, Schedule
from storage.repo import jobs as jr
from storage.repo import results as rr
from storage.repo import schedules as sr
from storage.repo import webhooks as wr
from tests.jobs.dbs import add_tiny_graph

T0 = datetime(2030, 1, 1, 12, 0, tzinfo=UTC)


def add(db: Session, tenant: str = "t1", **kw: object) -> Job:
    args: dict[str, object] = dict(tenant_id=tenant, graph_id=None, version=None, kind="k", params={}, now=T0)
    args.update(kw)
    job, _ = jr.add_job(db, **args)  # type: ignore[arg-type]
    return job


def claim(maker: sessionmaker[Session], worker: str = "w1", now: datetime = T0, lease: float = 30) -> Job | None:
    with jr.write_session(maker) as db:
        job = jr.claim_next(db, worker, lease, now)
        db.commit()
    return job


def test_idempotency_key_same_body_returns_job_and_other_body_conflicts(maker: sessionmaker[Session]) -> None:
    with jr.write_session(maker) as db:
        first, created = jr.add_job(
            db, tenant_id="t1", graph_id=None, version=None, kind="k", params={"a": 1}, now=T0,
            idempotency_key="key-1", request_hash="h1",
        )
        db.commit()
    assert created
    with jr.write_session(maker) as db:
        again, created = jr.add_job(
            db, tenant_id="t1", graph_id=None, version=None, kind="k", params={"a": 1}, now=T0,
            idempotency_key="key-1", request_hash="h1",
        )
        assert (again.id, created) == (first.id, False)
        with pytest.raises(Conflict):
            jr.add_job(
                db, tenant_id="t1", graph_id=None, version=None, kind="k", params={"a": 2}, now=T0,
                idempotency_key="key-1", request_hash="h2",
            )
        # The key is per tenant: another tenant may use it.
        other, created = jr.add_job(
            db, tenant_id="t2", graph_id=None, version=None, kind="k", params={}, now=T0,
            idempotency_key="key-1", request_hash="h9",
        )
        assert created and other.id != first.id
        db.commit()
    with maker() as db:
        assert db.execute(select(func.count()).select_from(Job)).scalar_one() == 2


def test_get_job_is_tenant_scoped(maker: sessionmaker[Session]) -> None:
    with maker() as db:
        job = add(db, "t1")
        db.commit()
        assert jr.get_job(db, "t1", job.id).id == job.id
        with pytest.raises(NotFound):
            jr.get_job(db, "t2", job.id)
        with pytest.raises(NotFound):
            jr.get_job(db, "t1", "j_missing")


def test_list_jobs_filters_and_paginates(maker: sessionmaker[Session]) -> None:
    with maker() as db:
        graph, _ = add_tiny_graph(db, "t1")
        ids = [add(db, kind="a" if i % 2 else "b", now=T0 + timedelta(seconds=i), graph_id=graph.id).id for i in range(7)]
        add(db, "t2", kind="a")
        db.commit()
        seen, cursor = [], None
        while True:
            rows, cursor = jr.list_jobs(db, "t1", limit=3, cursor=cursor)
            seen += [j.id for j in rows]
            if cursor is None:
                break
        assert seen == ids[::-1]  # newest first, every job once, none of t2's
        rows, _ = jr.list_jobs(db, "t1", limit=50, kind="a")
        assert [j.id for j in rows] == [ids[i] for i in (5, 3, 1)]
        assert jr.list_jobs(db, "t1", limit=50, graph_id=graph.id)[0] and not jr.list_jobs(
            db, "t1", limit=50, graph_id="g_other"
        )[0]
        assert len(jr.list_jobs(db, "t1", limit=50, status="queued")[0]) == 7
        assert jr.list_jobs(db, "t1", limit=50, status="running")[0] == []
        with pytest.raises(ValueError):
            jr.list_jobs(db, "t1", limit=5, cursor="not-a-cursor")


def test_claim_order_priority_then_age_and_run_after(maker: sessionmaker[Session]) -> None:
    with maker() as db:
        old = add(db, now=T0)
        new_high = add(db, now=T0 + timedelta(seconds=1), priority=5)
        later = add(db, now=T0 + timedelta(seconds=2))
        db.execute(Job.__table__.update().where(Job.id == later.id).values(run_after=T0 + timedelta(hours=1)))
        db.commit()
    got = [claim(maker, now=T0 + timedelta(seconds=10)) for _ in range(3)]
    assert [j.id if j else None for j in got] == [new_high.id, old.id, None]
    j = claim(maker, now=T0 + timedelta(hours=2))
    assert j is not None and j.id == later.id
    assert j.status == "running" and j.attempts == 1 and j.worker_id == "w1"
    assert j.lease_until == T0 + timedelta(hours=2, seconds=30)


def test_concurrent_claims_never_share_a_job(maker: sessionmaker[Session]) -> None:
    with maker() as db:
        for i in range(40):
            add(db, now=T0 + timedelta(microseconds=i))
        db.commit()
    taken: list[str] = []
    lock = threading.Lock()

    def grab(name: str) -> None:
        while True:
            j = claim(maker, worker=name, now=T0 + timedelta(seconds=1))
            if j is None:
                return
            with lock:
                taken.append(j.id)

    threads = [threading.Thread(target=grab, args=(f"w{i}",)) for i in range(4)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert len(taken) == 40 and len(set(taken)) == 40


def test_heartbeat_extends_lease_and_detects_takeover(maker: sessionmaker[Session]) -> None:
    with maker() as db:
        add(db)
        db.commit()
    job = claim(maker, lease=10)
    assert job is not None
    with jr.write_session(maker) as db:
        assert jr.heartbeat(db, job, "w1", 10, T0 + timedelta(seconds=8)) is False
        db.commit()
        assert jr.get_job(db, "t1", job.id).lease_until == T0 + timedelta(seconds=18)
        with pytest.raises(LeaseLost):
            jr.heartbeat(db, job, "w2", 10, T0)


def lost(job: Job) -> dict[str, object]:
    """What the caller of requeue_expired stores for a job whose last lease ran out."""
    return {"problem": "lost", "attempts": job.attempts, "max_attempts": job.max_attempts}


def test_requeue_expired_then_fail_after_max_attempts(maker: sessionmaker[Session]) -> None:
    with maker() as db:
        add(db, max_attempts=2)
        db.commit()
    first = claim(maker, lease=5)
    assert first is not None
    with jr.write_session(maker) as db:
        assert jr.requeue_expired(db, T0 + timedelta(seconds=4), lost_error=lost).requeued == []
        out = jr.requeue_expired(db, T0 + timedelta(seconds=6), lost_error=lost)
        db.commit()
    assert out.requeued == [first.id]
    second = claim(maker, worker="w2", now=T0 + timedelta(seconds=7), lease=5)
    assert second is not None and second.attempts == 2
    # The first worker's run is over: it can neither beat nor finish.
    with jr.write_session(maker) as db:
        with pytest.raises(LeaseLost):
            jr.finish_success(db, first, "w1", {"x": 1}, {}, T0 + timedelta(seconds=8))
        db.rollback()
    with jr.write_session(maker) as db:
        out = jr.requeue_expired(db, T0 + timedelta(seconds=20), lost_error=lost)
        db.commit()
    assert out.requeued == [] and [j.id for j in out.failed] == [first.id]
    with maker() as db:
        job = jr.get_job(db, "t1", first.id)
        assert job.status == "failed" and job.error is not None
        # Storage stores the document the caller built for the job, as given.
        assert job.error == {"problem": "lost", "attempts": 2, "max_attempts": 2}
        assert db.execute(select(func.count()).select_from(JobResult)).scalar_one() == 0


def test_finish_success_writes_result_and_arrays_atomically(maker: sessionmaker[Session]) -> None:
    with maker() as db:
        add(db)
        db.commit()
    job = claim(maker)
    assert job is not None
    arrays = {"score": np.array([0.5, 0.25]), "rank": np.array([1, 2], dtype=np.int32)}
    with jr.write_session(maker) as db:
        etag = jr.finish_success(db, job, "w1", {"top": "n0"}, arrays, T0 + timedelta(seconds=3))
        db.commit()
    assert etag == rr.result_etag({"top": "n0"}, arrays)
    with maker() as db:
        stored = jr.get_job(db, "t1", job.id)
        assert (stored.status, stored.progress, stored.lease_until) == ("succeeded", 1.0, None)
        result = rr.get_result(db, job.id)
        assert result.data == {"top": "n0"} and result.etag == etag
        back = rr.get_result_arrays(db, result)
        np.testing.assert_array_equal(back["score"], arrays["score"])
        assert back["rank"].dtype == np.int32
    with jr.write_session(maker) as db:
        with pytest.raises(LeaseLost):  # a second completion of the same run is refused
            jr.finish_success(db, job, "w1", {"top": "n1"}, {}, T0)
        db.rollback()
    with maker() as db:
        assert db.execute(select(func.count()).select_from(JobResult)).scalar_one() == 1


def test_result_etag_depends_on_content_only() -> None:
    a = rr.result_etag({"x": 1, "y": [1, 2]}, {"v": np.arange(3)})
    assert a == rr.result_etag({"y": [1, 2], "x": 1}, {"v": np.arange(3)})
    assert a != rr.result_etag({"x": 1, "y": [1, 2]}, {"v": np.arange(3) + 1})
    assert a != rr.result_etag({"x": 2, "y": [1, 2]}, {"v": np.arange(3)})


def test_finish_failure_retries_then_fails(maker: sessionmaker[Session]) -> None:
    with maker() as db:
        add(db, max_attempts=2)
        db.commit()
    job = claim(maker)
    assert job is not None
    with jr.write_session(maker) as db:
        st = jr.finish_failure(db, job, "w1", {"type": "/problems/x", "detail": "boom"}, T0, T0 + timedelta(seconds=5))
        db.commit()
    assert st == "queued"
    assert claim(maker, now=T0 + timedelta(seconds=4)) is None
    job = claim(maker, now=T0 + timedelta(seconds=5))
    assert job is not None and job.attempts == 2
    with jr.write_session(maker) as db:
        st = jr.finish_failure(db, job, "w1", {"type": "/problems/x", "detail": "boom"}, T0, T0 + timedelta(seconds=9))
        db.commit()
        stored = jr.get_job(db, "t1", job.id)
    assert st == "failed" and stored.status == "failed" and stored.error == {"type": "/problems/x", "detail": "boom"}


def test_cancel_queued_running_finished(maker: sessionmaker[Session]) -> None:
    with maker() as db:
        queued = add(db, now=T0 + timedelta(seconds=1))
        running = add(db, now=T0)
        db.commit()
    assert claim(maker) is not None  # takes `running` (older)
    with jr.write_session(maker) as db:
        j, ended = jr.cancel(db, "t1", queued.id, T0)
        assert ended and j.status == "cancelled"
        j, ended = jr.cancel(db, "t1", running.id, T0)
        assert not ended and j.status == "running" and j.cancel_requested
        j, ended = jr.cancel(db, "t1", queued.id, T0)  # again: a no-op
        assert not ended and j.status == "cancelled"
        with pytest.raises(NotFound):
            jr.cancel(db, "t2", running.id, T0)
        db.commit()
    with jr.write_session(maker) as db:
        run = jr.get_job(db, "t1", running.id)
        assert jr.heartbeat(db, run, "w1", 30, T0) is True
        jr.finish_cancelled(db, run, "w1", T0)
        db.commit()
    with maker() as db:
        add(db, kind="done")
        db.commit()
    done = claim(maker)
    assert done is not None
    with jr.write_session(maker) as db:
        jr.finish_success(db, done, "w1", {}, {}, T0)
        db.commit()
        with pytest.raises(Conflict):
            jr.cancel(db, "t1", done.id, T0)


def test_requeue_expired_ends_cancel_requested_jobs_cancelled(maker: sessionmaker[Session]) -> None:
    with maker() as db:
        add(db)
        db.commit()
    job = claim(maker, lease=5)
    assert job is not None
    with jr.write_session(maker) as db:
        jr.cancel(db, "t1", job.id, T0)
        out = jr.requeue_expired(db, T0 + timedelta(seconds=6), lost_error=lost)
        db.commit()
    assert [j.id for j in out.cancelled] == [job.id] and out.requeued == []


def test_update_progress_and_release(maker: sessionmaker[Session]) -> None:
    with maker() as db:
        add(db)
        db.commit()
    job = claim(maker)
    assert job is not None
    with jr.write_session(maker) as db:
        assert jr.update_progress(db, job, "w1", 1.7, "x" * 300, lease_seconds=30, now=T0) is False
        db.commit()
        stored = jr.get_job(db, "t1", job.id)
        assert stored.progress == 1.0 and len(stored.progress_message or "") == 200
        jr.release(db, job, "w1", T0)
        db.commit()
        stored = jr.get_job(db, "t1", job.id)
        assert (stored.status, stored.attempts, stored.worker_id) == ("queued", 0, None)


def test_purge_keeps_newest_succeeded_per_schedule(maker: sessionmaker[Session]) -> None:
    old = T0 - timedelta(days=40)
    with maker() as db:
        graph, _ = add_tiny_graph(db, "t1")
        s = sr.add_schedule(
            db, tenant_id="t1", graph_id=graph.id, cron="0 2 * * *", timezone="UTC", kind="k", params={},
            version=None, next_run_at=T0, now=old,
        )
        db.commit()
    made = []
    for i, sched in enumerate([s.id, s.id, None, None]):
        with jr.write_session(maker) as db:
            add(db, now=old + timedelta(hours=i), schedule_id=sched, scheduled_for=old + timedelta(hours=i) if sched else None)
            db.commit()
        job = claim(maker, now=old + timedelta(hours=i, minutes=1))
        assert job is not None
        with jr.write_session(maker) as db:
            jr.finish_success(db, job, "w1", {"i": i}, {"a": np.arange(3)}, old + timedelta(hours=i, minutes=2))
            db.commit()
        made.append(job.id)
    with maker() as db:
        fresh = add(db, now=T0)  # queued, recent: never purged
        db.commit()
    with jr.write_session(maker) as db:
        n = jr.purge(db, T0 - timedelta(days=30))
        db.commit()
    assert n == 3
    with maker() as db:
        left = set(db.execute(select(Job.id)).scalars())
        assert left == {made[1], fresh.id}
        assert set(db.execute(select(JobResult.job_id)).scalars()) == {made[1]}
        assert set(db.execute(select(ResultArray.job_id)).scalars()) == {made[1]}
        found = rr.latest_for_schedule(db, "t1", s.id)
        assert found is not None and found[0].id == made[1]


def test_schedule_slot_is_taken_once(maker: sessionmaker[Session]) -> None:
    with maker() as db:
        graph, _ = add_tiny_graph(db, "t1")
        s = sr.add_schedule(
            db, tenant_id="t1", graph_id=graph.id, cron="* * * * *", timezone="UTC", kind="k", params={},
            version=None, next_run_at=T0, now=T0,
        )
        db.commit()
        assert [x.id for x in sr.list_due(db, T0)] == [s.id] and sr.list_due(db, T0 - timedelta(seconds=1)) == []
    with jr.write_session(maker) as db:
        assert sr.take_slot(db, s, due=T0, next_run_at=T0 + timedelta(minutes=1), job_id=None)
        assert not sr.take_slot(db, s, due=T0, next_run_at=T0 + timedelta(minutes=1), job_id=None)
        db.commit()
    with maker() as db:
        assert sr.get_schedule(db, "t1", s.id).next_run_at == T0 + timedelta(minutes=1)
        with pytest.raises(NotFound):
            sr.get_schedule(db, "t2", s.id)
        assert db.get(Schedule, s.id) is not None


def test_webhook_deliveries_claim_and_record(maker: sessionmaker[Session]) -> None:
    with jr.write_session(maker) as db:
        hook = wr.add_webhook(db, tenant_id="t1", url="https://example.com/h", events=["job.succeeded"], secret="s" * 20, now=T0)
        wr.add_webhook(db, tenant_id="t2", url="https://example.com/h", events=["job.succeeded"], secret="s" * 20, now=T0)
        made = wr.add_event(db, tenant_id="t1", event="job.succeeded", job_id="j_1", payload={"job": {}}, now=T0)
        assert len(made) == 1  # only t1's subscription
        assert wr.add_event(db, tenant_id="t1", event="job.failed", job_id="j_1", payload={}, now=T0) == []
        db.commit()
    with jr.write_session(maker) as db:
        claimed = wr.claim_delivery(db, T0, 40)
        db.commit()
    assert claimed is not None and claimed[1].id == hook.id and claimed[0].attempts == 1
    with jr.write_session(maker) as db:
        assert wr.claim_delivery(db, T0 + timedelta(seconds=10), 40) is None  # leased
        st = wr.record_attempt(db, claimed[0], now=T0, http_status=500, error="HTTP 500", retry_at=T0 + timedelta(seconds=20))
        db.commit()
    assert st == "pending"
    with jr.write_session(maker) as db:
        again = wr.claim_delivery(db, T0 + timedelta(seconds=20), 40)
        assert again is not None and again[0].attempts == 2
        assert wr.record_attempt(db, again[0], now=T0, http_status=204, error=None, retry_at=None) == "delivered"
        db.commit()
        rows, _ = wr.list_deliveries(db, hook, limit=10)
        assert [(d.status, d.attempts, d.last_status) for d in rows] == [("delivered", 2, 204)]
