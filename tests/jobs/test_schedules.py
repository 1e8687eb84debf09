"""Schedules: cron validation and arithmetic in a time zone; firing with a fake clock."""

from __future__ import annotations

import threading
from datetime import UTC, datetime, timedelta

import pytest
from sqlalchemy import select
from sqlalchemy.orm import Session, sessionmaker

import tests.jobs.kinds  # noqa: F401  registers the test_graph kind the schedules fire
from service.jobs.clock import FakeClock
from service.jobs.errors import InvalidSchedule
from service.jobs.schedules import check_schedule, fire_due, next_run_after
from service.jobs.worker import Worker, WorkerConfig
from storage.models import Job
from storage.repo import jobs as jr
from storage.repo import results as rr
from storage.repo import schedules as sr
from tests.jobs.dbs import add_tiny_graph


@pytest.mark.parametrize(
    "cron, zone, match",
    [
        ("0 2 * *", "UTC", "5 fields"),
        ("0 0 2 * * *", "UTC", "5 fields"),
        ("61 * * * *", "UTC", "not valid"),
        ("0 2 * * *", "Mars/Olympus", "IANA"),
        ("0 2 * * *", "../etc/passwd", "IANA"),
    ],
)
def test_invalid_schedules_are_refused(cron: str, zone: str, match: str) -> None:
    with pytest.raises(InvalidSchedule, match=match):
        check_schedule(cron, zone)


def test_next_run_follows_the_time_zone_across_dst() -> None:
    # Source: IANA tz database (zoneinfo): Paris is UTC+1 in winter, UTC+2 from 2030-03-31 01:00 UTC.
    before = datetime(2030, 3, 29, 12, 0, tzinfo=UTC)
    first = next_run_after("0 2 * * *", "Europe/Paris", before)
    assert first == datetime(2030, 3, 30, 1, 0, tzinfo=UTC)  # 02:00 CET
    after_change = next_run_after("0 4 * * *", "Europe/Paris", datetime(2030, 3, 31, 12, 0, tzinfo=UTC))
    assert after_change == datetime(2030, 4, 1, 2, 0, tzinfo=UTC)  # 04:00 CEST
    assert next_run_after("*/15 * * * *", "UTC", datetime(2030, 1, 1, 0, 15, tzinfo=UTC)) == datetime(
        2030, 1, 1, 0, 30, tzinfo=UTC
    )  # strictly after
    assert next_run_after("@daily", "UTC", datetime(2030, 1, 1, 0, 1, tzinfo=UTC)) == datetime(2030, 1, 2, tzinfo=UTC)


def make_schedule(maker: sessionmaker[Session], clock: FakeClock, cron: str = "0 * * * *") -> str:
    with maker() as db:
        graph, _ = add_tiny_graph(db)
        s = sr.add_schedule(
            db, tenant_id="default", graph_id=graph.id, cron=cron, timezone="UTC", kind="test_graph",
            params={}, version=None, next_run_at=next_run_after(cron, "UTC", clock.now()), now=clock.now(),
        )
        db.commit()
        return s.id


def test_schedule_fires_once_per_slot_and_collapses_missed_slots(maker: sessionmaker[Session]) -> None:
    clock = FakeClock(datetime(2030, 1, 1, 0, 30, tzinfo=UTC))
    sid = make_schedule(maker, clock)
    assert fire_due(maker, clock.now(), max_attempts=3) == []
    clock.set(datetime(2030, 1, 1, 1, 0, 5, tzinfo=UTC))
    first = fire_due(maker, clock.now(), max_attempts=3)
    assert len(first) == 1 and fire_due(maker, clock.now(), max_attempts=3) == []
    with maker() as db:
        s = sr.get_schedule(db, "default", sid)
        assert s.next_run_at == datetime(2030, 1, 1, 2, 0, tzinfo=UTC) and s.last_job_id == first[0]
        job = jr.get_job(db, "default", first[0])
        assert job.schedule_id == sid and job.scheduled_for == datetime(2030, 1, 1, 1, 0, tzinfo=UTC)
        assert job.version == 1 and job.kind == "test_graph"
    # Down from 01:00 to 05:30: the four missed slots run once, then the schedule moves on.
    clock.set(datetime(2030, 1, 1, 5, 30, tzinfo=UTC))
    assert len(fire_due(maker, clock.now(), max_attempts=3)) == 1
    with maker() as db:
        assert sr.get_schedule(db, "default", sid).next_run_at == datetime(2030, 1, 1, 6, 0, tzinfo=UTC)
        assert len(list(db.execute(select(Job.id).where(Job.schedule_id == sid)).scalars())) == 2


def test_racing_schedulers_create_one_job(maker: sessionmaker[Session]) -> None:
    clock = FakeClock(datetime(2030, 1, 1, 0, 30, tzinfo=UTC))
    sid = make_schedule(maker, clock, cron="*/5 * * * *")
    clock.set(datetime(2030, 1, 1, 0, 35, 1, tzinfo=UTC))
    made: list[str] = []
    barrier = threading.Barrier(4)

    def scheduler() -> None:
        barrier.wait()
        made.extend(fire_due(maker, clock.now(), max_attempts=3))

    threads = [threading.Thread(target=scheduler) for _ in range(4)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert len(made) == 1
    with maker() as db:
        assert list(db.execute(select(Job.id).where(Job.schedule_id == sid)).scalars()) == made


def test_worker_housekeeping_fires_schedule_and_latest_result_follows(maker: sessionmaker[Session]) -> None:
    clock = FakeClock(datetime(2030, 1, 1, 0, 30, tzinfo=UTC))
    sid = make_schedule(maker, clock)
    worker = Worker(maker, WorkerConfig(), clock=clock)
    clock.set(datetime(2030, 1, 1, 1, 0, 0, tzinfo=UTC))
    worker.housekeep(purge=False)
    assert worker.run_once() is not None
    with maker() as db:
        first = rr.latest_for_schedule(db, "default", sid)
    clock.set(datetime(2030, 1, 1, 2, 0, 0, tzinfo=UTC))
    worker.housekeep(purge=False)
    assert worker.run_once() is not None
    with maker() as db:
        second = rr.latest_for_schedule(db, "default", sid)
    assert first is not None and second is not None and first[0].id != second[0].id
    assert first[1].etag == second[1].etag  # same graph, same params: same result, same ETag
    clock.advance(60 * 86400)
    worker.purge(clock.now())
    with maker() as db:
        kept = rr.latest_for_schedule(db, "default", sid)
        assert kept is not None and kept[0].id == second[0].id
        assert db.execute(select(Job.id)).scalars().all() == [second[0].id]
    assert timedelta(0) <= clock.now() - second[0].finished_at  # type: ignore[operator]
