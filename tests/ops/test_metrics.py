"""GET /metrics: who may read it, request metrics by route template, queue and worker figures."""

from __future__ import annotations

import asyncio
import dataclasses
from datetime import UTC, datetime, timedelta
from pathlib import Path

import pytest
from prometheus_client.parser import text_string_to_metric_families

from service.jobs.worker import Worker, WorkerConfig
from storage.repo import jobs as jr
from tests.ops.helpers import PROBLEM, bearer, make_key, secured_app

pytestmark = pytest.mark.anyio


def samples(text: str) -> dict[tuple[str, tuple[tuple[str, str], ...]], float]:
    out = {}
    for fam in text_string_to_metric_families(text):
        for s in fam.samples:
            out[(s.name, tuple(sorted(s.labels.items())))] = s.value
    return out


def value(text: str, name: str, **labels: str) -> float:
    return samples(text).get((name, tuple(sorted(labels.items()))), 0.0)


async def test_metrics_need_no_key_on_loopback_and_an_admin_key_elsewhere(sqlite_url: str, tmp_path: Path) -> None:
    reader = make_key(sqlite_url, "t1", ["read", "write"])
    admin = make_key(sqlite_url, "t1", ["admin"])
    async with secured_app(sqlite_url, tmp_path) as c:
        r = await c.get("/metrics")
        assert r.status_code == 200 and r.headers["content-type"].startswith("text/plain")
    async with secured_app(sqlite_url, tmp_path, client=("192.0.2.10", 5555)) as c:
        r = await c.get("/metrics")
        assert r.status_code == 401 and r.headers["content-type"] == PROBLEM
        r = await c.get("/metrics", headers=bearer(reader))
        assert r.status_code == 403 and r.json()["type"] == "/problems/forbidden"
        assert (await c.get("/metrics", headers=bearer(admin))).status_code == 200
    async with secured_app(sqlite_url, tmp_path, metrics_open_on_loopback=False) as c:
        assert (await c.get("/metrics")).status_code == 401


async def test_requests_are_counted_by_route_template_and_status(sqlite_url: str, tmp_path: Path) -> None:
    async with secured_app(sqlite_url, tmp_path, auth_disabled=True) as c:
        before = (await c.get("/metrics")).text
        gid = (await c.post("/v1/graphs", json={"name": "g", "directed": False})).json()["id"]
        for _ in range(3):
            assert (await c.get(f"/v1/graphs/{gid}")).status_code == 200
        assert (await c.get("/v1/graphs/g_missing")).status_code == 404
        assert (await c.get("/no/such/path")).status_code == 404
        after = (await c.get("/metrics")).text
    route = "/v1/graphs/{graph_id}"

    def delta(name: str, **labels: str) -> float:
        return value(after, name, **labels) - value(before, name, **labels)

    assert delta("bellwether_http_requests_total", method="GET", route=route, status="200") == 3
    assert delta("bellwether_http_requests_total", method="GET", route=route, status="404") == 1
    assert delta("bellwether_http_requests_total", method="POST", route="/v1/graphs", status="201") == 1
    # Unknown paths share one label value: no label per path an attacker invents.
    assert delta("bellwether_http_requests_total", method="GET", route="unmatched", status="404") == 1
    assert delta("bellwether_http_request_duration_seconds_count", method="GET", route=route, status="200") == 3
    assert f'graph_id="{gid}"' not in after and gid not in after


async def test_queue_and_worker_metrics(sqlite_url: str, tmp_path: Path) -> None:
    async with secured_app(sqlite_url, tmp_path, auth_disabled=True, job_kind_modules=["tests.jobs.kinds"]) as c:
        app = c.app  # type: ignore[attr-defined]
        now = datetime.now(UTC)
        with jr.write_session(app.state.sessionmaker) as db:
            for i in range(3):
                jr.add_job(db, tenant_id="default", graph_id=None, version=None, kind="test_sleep",
                           params={}, now=now - timedelta(seconds=30 * (i + 1)))
            jr.add_job(db, tenant_id="default", graph_id=None, version=None, kind="test_fail",
                       params={"error": "invalid"}, now=now + timedelta(hours=1))  # not due yet
            db.commit()
        text = (await c.get("/metrics")).text
        assert value(text, "bellwether_jobs", kind="test_sleep", status="queued") == 3
        assert value(text, "bellwether_jobs", kind="test_fail", status="queued") == 1
        assert value(text, "bellwether_queue_depth", kind="test_sleep") == 3
        assert value(text, "bellwether_queue_depth", kind="test_fail") == 0  # not due
        assert 85 <= value(text, "bellwether_queue_oldest_age_seconds") < 200  # Source: queued 90 s ago here.
        assert value(text, "bellwether_workers_busy") == 0

        cfg = dataclasses.replace(WorkerConfig.from_settings(app.state.settings), heartbeat_seconds=60.0)
        worker = Worker(app.state.sessionmaker, cfg)
        before = text
        for _ in range(3):
            outcome = await asyncio.to_thread(worker.run_once, heartbeat=False)
            assert outcome is not None and outcome.status == "succeeded"
        text = (await c.get("/metrics")).text
        assert value(text, "bellwether_jobs", kind="test_sleep", status="succeeded") == 3
        assert value(text, "bellwether_queue_depth", kind="test_sleep") == 0
        assert value(text, "bellwether_queue_oldest_age_seconds") == 0
        done = value(text, "bellwether_jobs_finished_total", kind="test_sleep", status="succeeded") - value(
            before, "bellwether_jobs_finished_total", kind="test_sleep", status="succeeded"
        )
        assert done == 3
        assert value(text, "bellwether_job_duration_seconds_count", kind="test_sleep", status="succeeded") >= 3
