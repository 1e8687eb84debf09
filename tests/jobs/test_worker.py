"""Worker.run_once in-process with a fake clock: success, progress, cancel, retry, leases, shutdown."""

from __future__ import annotations

from datetime import timedelta

import numpy as np
import pytest
from sqlalchemy import func, select
from sqlalchemy.orm import Session, sessionmaker

import tests.jobs.kinds as test_kinds
from service.jobs.clock import FakeClock
from service.jobs.kinds import TaskContext
from service.jobs.retry import RetryPolicy
from service.jobs.worker import Worker, WorkerConfig, json_clean
from storage.models import JobResult, WebhookDelivery
from storage.repo import jobs as jr
from storage.repo import results as rr
from storage.repo import webhooks as wr
from tests.jobs.dbs import add_tiny_graph

CONFIG = WorkerConfig(
    lease_seconds=30, heartbeat_seconds=60, progress_interval_seconds=0.0,
    retry=RetryPolicy(base_seconds=5, factor=2, max_seconds=60),
)


def queue(maker: sessionmaker[Session], clock: FakeClock, kind: str, params: dict[str, object], **kw: object) -> str:
    with jr.write_session(maker) as db:
        job, _ = jr.add_job(
            db, tenant_id="default", graph_id=kw.pop("graph_id", None), version=kw.pop("version", None),  # type: ignore[arg-type]
            kind=kind, params=params, now=clock.now(), **kw,  # type: ignore[arg-type]
        )
        db.commit()
    return job.id


def read(maker: sessionmaker[Session], job_id: str):  # type: ignore[no-untyped-def]
    with maker() as db:
        return jr.get_job(db, "default", job_id)


def test_run_once_runs_a_graph_job_and_stores_result(maker: sessionmaker[Session]) -> None:
    clock = FakeClock()
    with maker() as db:
        graph, version = add_tiny_graph(db, edges=[(0, 1), (0, 2), (0, 3)])
        db.commit()
    with jr.write_session(maker) as db:
        wr.add_webhook(db, tenant_id="default", url="https://example.com/h", events=["job.succeeded"], secret="x" * 20, now=clock.now())
        db.commit()
    jid = queue(maker, clock, "test_graph", {}, graph_id=graph.id, version=1)
    worker = Worker(maker, CONFIG, worker_id="w-test", clock=clock)
    assert worker.run_once() is not None
    assert worker.run_once() is None  # queue empty
    job = read(maker, jid)
    assert (job.status, job.attempts, job.progress, job.version) == ("succeeded", 1, 1.0, 1)
    with maker() as db:
        result = rr.get_result(db, jid)
        # Source: closed form: the star K(1,3) has degrees 3, 1, 1, 1.
        assert result.data["n"] == 4 and result.data["m"] == 3 and result.data["max_degree"] == 3
        assert result.data["kind"] == "test_graph" and result.data["graph_id"] == graph.id
        assert result.data["version"] == 1 and result.data["random_seed"] == 0 and result.data["params"] == {"random_seed": 0}
        np.testing.assert_array_equal(rr.get_result_arrays(db, result)["degree"], [3, 1, 1, 1])
        deliveries = list(db.execute(select(WebhookDelivery)).scalars())
        assert [(d.event, d.job_id) for d in deliveries] == [("job.succeeded", jid)]
        assert deliveries[0].payload["data"]["job"]["result_url"] == f"/v1/jobs/{jid}/result"


def test_job_without_version_uses_the_newest(maker: sessionmaker[Session]) -> None:
    clock = FakeClock()
    with maker() as db:
        graph, _ = add_tiny_graph(db)
        db.commit()
    jid = queue(maker, clock, "test_graph", {}, graph_id=graph.id)
    Worker(maker, CONFIG, clock=clock).run_once()
    assert read(maker, jid).version == 1


def test_cancel_running_job_at_next_progress_point(maker: sessionmaker[Session]) -> None:
    clock = FakeClock()
    seen: list[float] = []

    def hook(ctx: TaskContext) -> None:
        ctx.progress(0.25, "first quarter")
        seen.append(read(maker, ctx.job_id).progress)
        with jr.write_session(maker) as db:
            jr.cancel(db, "default", ctx.job_id, clock.now())
            db.commit()
        ctx.progress(0.5, "half")  # raises Cancelled
        raise AssertionError("progress did not raise after cancel")

    test_kinds.HOOKS["cancel"] = hook
    jid = queue(maker, clock, "test_hook", {"hook": "cancel"})
    out = Worker(maker, CONFIG, clock=clock).run_once()
    assert out is not None and out.status == "cancelled"
    job = read(maker, jid)
    assert job.status == "cancelled" and job.finished_at is not None and seen == [0.25]
    with maker() as db:
        assert db.execute(select(func.count()).select_from(JobResult)).scalar_one() == 0


def test_transient_failure_retries_with_backoff_then_fails(maker: sessionmaker[Session]) -> None:
    clock = FakeClock()
    jid = queue(maker, clock, "test_fail", {"error": "transient"}, max_attempts=3)
    worker = Worker(maker, CONFIG, clock=clock)
    t0 = clock.now()
    assert worker.run_once().status == "queued"  # type: ignore[union-attr]
    job = read(maker, jid)
    # Source: RetryPolicy(base 5 s, factor 2): delays 5 s then 10 s.
    assert job.run_after == t0 + timedelta(seconds=5) and job.error["detail"] == "disk on fire"
    assert worker.run_once() is None  # not yet due
    clock.advance(5)
    assert worker.run_once().status == "queued"  # type: ignore[union-attr]
    assert read(maker, jid).run_after == clock.now() + timedelta(seconds=10)
    clock.advance(10)
    out = worker.run_once()
    assert out is not None and out.status == "failed"
    job = read(maker, jid)
    assert job.status == "failed" and job.attempts == 3
    assert job.error["type"] == "/problems/internal-error" and job.error["exception"] == "OSError"


def test_analytics_error_fails_at_once_with_its_problem(maker: sessionmaker[Session]) -> None:
    clock = FakeClock()
    jid = queue(maker, clock, "test_fail", {"error": "invalid"}, max_attempts=3)
    out = Worker(maker, CONFIG, clock=clock).run_once()
    assert out is not None and out.status == "failed"
    job = read(maker, jid)
    assert job.attempts == 1 and job.error == {
        "type": "/problems/invalid-parameter",
        "title": "Invalid parameter",
        "detail": "alpha must be in (0, 1)",
        "field": "alpha",
        "value": 2,
        "attempts": 1,
    }


def test_unknown_kind_and_bad_params_fail_permanently(maker: sessionmaker[Session]) -> None:
    clock = FakeClock()
    a = queue(maker, clock, "no_such_kind", {})
    b = queue(maker, clock, "test_sleep", {"seconds": -1})
    worker = Worker(maker, CONFIG, clock=clock)
    worker.run_once()
    worker.run_once()
    assert read(maker, a).error["type"] == "/problems/unknown-kind"
    err = read(maker, b).error
    assert err["type"] == "/problems/invalid-parameter" and err["errors"][0]["loc"] == ["params", "seconds"]


def test_lease_lost_run_cannot_complete(maker: sessionmaker[Session]) -> None:
    clock = FakeClock()
    slow = Worker(maker, CONFIG, worker_id="slow", clock=clock)
    other = Worker(maker, CONFIG, worker_id="other", clock=clock)

    def hook(ctx: TaskContext) -> None:
        # While this run is "stuck", its lease expires and another worker finishes the job.
        clock.advance(31)
        other.requeue_expired(clock.now())
        test_kinds.HOOKS["takeover"] = lambda ctx: None
        assert other.run_once().status == "succeeded"  # type: ignore[union-attr]

    test_kinds.HOOKS["takeover"] = hook
    jid = queue(maker, clock, "test_hook", {"hook": "takeover"})
    out = slow.run_once()
    assert out is not None and out.status == "lease-lost"
    job = read(maker, jid)
    assert job.status == "succeeded" and job.worker_id == "other" and job.attempts == 2
    with maker() as db:
        assert db.execute(select(func.count()).select_from(JobResult)).scalar_one() == 1


def test_shutdown_releases_running_job_at_progress_point(maker: sessionmaker[Session]) -> None:
    clock = FakeClock()
    worker = Worker(maker, WorkerConfig(shutdown_grace_seconds=0, progress_interval_seconds=0), clock=clock)

    def hook(ctx: TaskContext) -> None:
        worker.request_stop()
        ctx.progress(0.5)

    test_kinds.HOOKS["stop"] = hook
    jid = queue(maker, clock, "test_hook", {"hook": "stop"})
    out = worker.run_once()
    assert out is not None and out.status == "queued"
    job = read(maker, jid)
    assert (job.status, job.attempts, job.worker_id) == ("queued", 0, None)


def test_housekeeping_requeues_expired_and_fails_exhausted(maker: sessionmaker[Session]) -> None:
    clock = FakeClock()
    with jr.write_session(maker) as db:
        wr.add_webhook(db, tenant_id="default", url="https://example.com/h", events=["job.failed"], secret="x" * 20, now=clock.now())
        db.commit()
    jid = queue(maker, clock, "test_sleep", {}, max_attempts=1)
    with jr.write_session(maker) as db:
        jr.claim_next(db, "dead-worker", 30, clock.now())
        db.commit()
    worker = Worker(maker, CONFIG, clock=clock)
    clock.advance(29)
    assert worker.requeue_expired(clock.now()) is None
    clock.advance(2)
    out = worker.requeue_expired(clock.now())
    assert out is not None and [j.id for j in out.failed] == [jid]
    assert read(maker, jid).error == {
        "type": "/problems/worker-lost",
        "title": "Worker lost",
        "detail": "the worker running this job stopped answering 1 time(s) (max_attempts 1); "
        "the job was not retried again",
        "attempts": 1,
    }
    with maker() as db:
        assert [d.event for d in db.execute(select(WebhookDelivery)).scalars()] == ["job.failed"]


def test_json_clean_makes_task_output_storable() -> None:
    out = json_clean({"a": np.float64(1.5), "b": [np.int32(2), float("nan")], "c": np.arange(2), "d": (float("inf"),)})
    assert out == {"a": 1.5, "b": [2, None], "c": [0, 1], "d": [None]}


@pytest.fixture(autouse=True)
def _clear_hooks() -> None:
    test_kinds.HOOKS.clear()
