"""Helpers for the API tests of jobs, schedules and webhooks (tests/api/test_{jobs,schedules,webhooks}.py)."""

from __future__ import annotations

import asyncio
import dataclasses
from typing import Any

import httpx

from service.jobs.clock import Clock
from service.jobs.worker import RunOutcome, Worker, WorkerConfig

__all__ = ["PROBLEM", "make_graph", "upload_csv", "worker_for", "run_worker_once", "assert_problem"]

PROBLEM = "application/problem+json"


async def make_graph(client: httpx.AsyncClient, csv: str | None = "source,target\na,b\nb,c\nc,a\nc,d\n") -> str:
    r = await client.post("/v1/graphs", json={"name": "jobs test", "directed": False})
    assert r.status_code == 201, r.text
    gid = str(r.json()["id"])
    if csv is not None:
        await upload_csv(client, gid, csv)
    return gid


async def upload_csv(client: httpx.AsyncClient, gid: str, csv: str) -> dict[str, Any]:
    r = await client.post(
        f"/v1/graphs/{gid}/versions", params={"part": "edges"}, content=csv, headers={"Content-Type": "text/csv"}
    )
    assert r.status_code == 201, r.text
    return dict(r.json())


def worker_for(client: httpx.AsyncClient, clock: Clock | None = None, **config: Any) -> Worker:
    """An in-process worker on the app's database, configured from the app's settings."""
    app = client.app  # type: ignore[attr-defined]
    base: dict[str, Any] = {"progress_interval_seconds": 0.0, "heartbeat_seconds": 60.0}
    base.update(config)
    cfg = dataclasses.replace(WorkerConfig.from_settings(app.state.settings), **base)
    return Worker(app.state.sessionmaker, cfg, clock=clock)


async def run_worker_once(worker: Worker) -> RunOutcome | None:
    return await asyncio.to_thread(worker.run_once)


def assert_problem(r: httpx.Response, status: int, slug: str) -> dict[str, Any]:
    assert r.status_code == status, r.text
    assert r.headers["content-type"] == PROBLEM
    body = dict(r.json())
    assert body["type"] == f"/problems/{slug}" and body["status"] == status and body["detail"], body
    return body
