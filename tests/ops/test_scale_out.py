"""Scale-out on PostgreSQL: 2 API processes, 3 worker processes, 200 jobs from 2 tenants at once.

The topology of docker/compose.yaml as plain processes on loopback: every
process gets the same ``BELLWETHER_DATABASE_URL``; auth is on, with keys
made by ``bellwether keys create``. The jobs are submitted concurrently
through both API processes (some twice, with one Idempotency-Key, through
both). Checked: every job finished once (one result, one attempt, one
creation per idempotency key), work shared by the workers, no tenant sees
the other's graphs, jobs or results (404), no 5xx anywhere, and the queue
metrics of either API process agree with the database.
"""

from __future__ import annotations

import asyncio
import random
import time
from collections import Counter
from pathlib import Path
from typing import Any

import httpx
import pytest
from sqlalchemy import func, select

from storage.db import make_engine, make_sessionmaker
from storage.migrate import upgrade
from storage.models import Job, JobResult
from tests.conftest import _reset_pg
from tests.live import free_port
from tests.ops.helpers import (
    child_env,
    cli,
    running,
    start_api,
    start_worker,
    wait_healthy,
)

pytestmark = [pytest.mark.postgres, pytest.mark.slow]

N_JOBS = 200
EDGES = "source,target,weight\n" + "".join(
    f"p{i},p{j},{1 + (i * j) % 3}\n" for i in range(12) for j in range(i + 1, 12) if (i + j) % 3 == 0
)
#: Kinds of the mix: cheap on a 12-node graph.
MIX: list[dict[str, Any]] = [
    {"kind": "profile", "params": {"bootstrap": 0}},
    {"kind": "scores", "params": {"measures": ["degree", "pagerank"]}},
    {"kind": "recommendations", "params": {"limit": 3}},
]


class Calls:
    """Every answer seen, for the no-5xx check."""

    def __init__(self) -> None:
        self.statuses: Counter[int] = Counter()
        self.server_errors: list[str] = []

    async def call(self, c: httpx.AsyncClient, method: str, url: str, **kw: Any) -> httpx.Response:
        r = await c.request(method, url, **kw)
        self.statuses[r.status_code] += 1
        if r.status_code >= 500:
            self.server_errors.append(f"{method} {url}: {r.status_code} {r.text[:300]}")
        return r


async def scenario(bases: list[str], keys: dict[str, str], calls: Calls) -> dict[str, Any]:
    limits = httpx.Limits(max_connections=40)
    async with httpx.AsyncClient(timeout=60, limits=limits) as c:
        auth = {t: {"Authorization": f"Bearer {k}"} for t, k in keys.items()}
        graphs: dict[str, list[str]] = {}
        for t_i, tenant in enumerate(keys):
            graphs[tenant] = []
            for g_i in range(2):
                base = bases[(t_i + g_i) % 2]
                r = await calls.call(c, "POST", f"{base}/v1/graphs", headers=auth[tenant],
                                     json={"name": f"{tenant}-{g_i}", "directed": False})
                assert r.status_code == 201, r.text
                gid = r.json()["id"]
                r = await calls.call(c, "POST", f"{base}/v1/graphs/{gid}/versions", content=EDGES,
                                     headers={**auth[tenant], "Content-Type": "text/csv"})
                assert r.status_code == 201, r.text
                graphs[tenant].append(gid)

        rng = random.Random(8)
        plan = []
        for i in range(N_JOBS):
            tenant = list(keys)[i % 2]
            spec = MIX[(i // 2) % len(MIX)]
            plan.append((tenant, rng.choice(graphs[tenant]), spec, f"idem-{i}" if i % 4 == 0 else None))

        async def submit(i: int, tenant: str, gid: str, spec: dict[str, Any], idem: str | None) -> str:
            headers = dict(auth[tenant])
            if idem:
                headers["Idempotency-Key"] = idem
            r = await calls.call(c, "POST", f"{bases[i % 2]}/v1/graphs/{gid}/jobs", json=spec, headers=headers)
            assert r.status_code == 202, r.text
            assert r.headers["location"] == f"/v1/jobs/{r.json()['id']}"
            if idem:  # the same request again, through the other process: the same job, not a new one
                again = await calls.call(c, "POST", f"{bases[(i + 1) % 2]}/v1/graphs/{gid}/jobs", json=spec,
                                         headers=headers)
                assert again.status_code == 200 and again.json()["id"] == r.json()["id"], again.text
            return str(r.json()["id"])

        t0 = time.monotonic()
        ids = await asyncio.gather(*(submit(i, *p) for i, p in enumerate(plan)))
        submitted = time.monotonic() - t0
        owner = {job: plan[i][0] for i, job in enumerate(ids)}

        async def finished(tenant: str, base: str) -> dict[str, dict[str, Any]]:
            r = await calls.call(c, "GET", f"{base}/v1/jobs", params={"limit": 1000}, headers=auth[tenant])
            assert r.status_code == 200
            return {j["id"]: j for j in r.json()["items"]}

        deadline = time.monotonic() + 60
        seen: dict[str, dict[str, Any]] = {}
        while time.monotonic() < deadline:
            seen = {}
            for t_i, tenant in enumerate(keys):
                seen.update(await finished(tenant, bases[t_i % 2]))
            if len(seen) == N_JOBS and all(j["status"] in ("succeeded", "failed", "cancelled") for j in seen.values()):
                break
            await asyncio.sleep(0.5)
        ran = time.monotonic() - t0

        # Isolation: the other tenant gets 404 on graphs, jobs and results, through either process.
        leaks = []
        for job in ids[:20]:
            mine, theirs = owner[job], next(t for t in keys if t != owner[job])
            for base in bases:
                for path in (f"/v1/jobs/{job}", f"/v1/jobs/{job}/result"):
                    r = await calls.call(c, "GET", base + path, headers=auth[theirs])
                    if r.status_code != 404:
                        leaks.append(f"{theirs} GET {path}: {r.status_code}")
                r = await calls.call(c, "GET", f"{base}/v1/jobs/{job}/result", headers=auth[mine])
                assert r.status_code == 200 and r.json()["job_id"] == job
        for tenant, gids in graphs.items():
            other = next(t for t in keys if t != tenant)
            for gid in gids:
                r = await calls.call(c, "GET", f"{bases[0]}/v1/graphs/{gid}", headers=auth[other])
                if r.status_code != 404:
                    leaks.append(f"{other} GET graph {gid}: {r.status_code}")
            listed = await finished(other, bases[1])
            assert not set(listed) & {j for j, t in owner.items() if t == tenant}
        metrics = [(await calls.call(c, "GET", f"{b}/metrics")).text for b in bases]
    return {"ids": ids, "owner": owner, "seen": seen, "leaks": leaks, "submitted": submitted, "ran": ran,
            "metrics": metrics}


def test_two_apis_three_workers_two_tenants_200_jobs(pg_url: str, tmp_path: Path) -> None:
    _reset_pg(pg_url)
    upgrade(pg_url)
    data = tmp_path / "data"
    data.mkdir()
    env = child_env(
        data, pg_url,
        BELLWETHER_RATE_LIMIT_PER_SECOND="2000", BELLWETHER_RATE_LIMIT_BURST="2000",
        BELLWETHER_JOB_POLL_SECONDS="0.02", BELLWETHER_JOB_POLL_MAX_SECONDS="0.2",
        BELLWETHER_JOB_HEARTBEAT_SECONDS="1", BELLWETHER_JOB_LEASE_SECONDS="20",
    )
    t0 = time.monotonic()
    apis = [start_api(data, env, port=free_port()) for _ in range(2)]
    workers = [start_worker(data, env, str(i)) for i in range(3)]
    with running(*(p for p, _ in apis), *workers):
        keys = {}
        for tenant in ("acme", "globex"):  # while the processes start
            done = cli(["keys", "create", "--tenant", tenant, "--scopes", "read,write"], env)
            assert done.returncode == 0, done.stderr
            keys[tenant] = done.stdout.strip().splitlines()[-1]
        for proc, base in apis:
            wait_healthy(proc, base)
        print(f"\nscale-out: keys made and 5 processes up in {time.monotonic() - t0:.1f} s")
        result = asyncio.run(scenario([b for _, b in apis], keys, calls := Calls()))
        assert all(w.alive() for w in workers), "\n".join(w.tail() for w in workers)

    print(f"scale-out: {N_JOBS} jobs submitted in {result['submitted']:.1f} s, all finished "
          f"{result['ran']:.1f} s after the first submission; answers {dict(calls.statuses)}")
    assert not calls.server_errors, calls.server_errors[:5]
    assert not result["leaks"], result["leaks"]
    seen = result["seen"]
    assert len(seen) == N_JOBS and Counter(j["status"] for j in seen.values()) == {"succeeded": N_JOBS}, Counter(
        (j["kind"], j["status"], (j["error"] or {}).get("detail")) for j in seen.values() if j["status"] != "succeeded"
    )
    assert Counter(j["kind"] for j in seen.values()) == Counter(
        MIX[(i // 2) % len(MIX)]["kind"] for i in range(N_JOBS)
    )

    engine = make_engine(pg_url)
    with make_sessionmaker(engine)() as db:
        rows = db.execute(select(Job.id, Job.tenant_id, Job.attempts, Job.worker_id)).all()
        results = db.execute(select(func.count()).select_from(JobResult)).scalar_one()
    engine.dispose()
    # Exactly once: 200 jobs (idempotent resubmissions made none), one claim each, one result each.
    assert len(rows) == N_JOBS and results == N_JOBS
    assert {a for _, _, a, _ in rows} == {1}
    assert {t for _, t, _, _ in rows} == {"acme", "globex"}
    assert {r[0] for r in rows if r[1] == "acme"} == {j for j, t in result["owner"].items() if t == "acme"}
    assert len({w for _, _, _, w in rows}) >= 2  # shared by the workers
    # Either API process reports the same queue figures, read from the database.
    for text in result["metrics"]:
        done = sum(
            float(line.rsplit(" ", 1)[1]) for line in text.splitlines()
            if line.startswith("bellwether_jobs{") and 'status="succeeded"' in line
        )
        assert done == N_JOBS
