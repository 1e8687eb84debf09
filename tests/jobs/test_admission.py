"""Admission control over HTTP: jobs whose estimated peak memory passes the per-job limit are a 422
``/problems/too-expensive`` before anything is queued, a running job whose buffers pass it fails with
the same problem, and the floors on epsilon appear in the job-kinds schema."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest

from service.jobs import admission
from tests.conftest import make_settings
from tests.jobs.api_helpers import assert_problem, make_graph, run_worker_once, worker_for

pytestmark = pytest.mark.anyio

LIMIT = 256 << 20
N, M = 2000, 16_000


def _csv() -> str:
    rng = np.random.default_rng(5)
    src = rng.integers(0, N, M)
    dst = (src + 1 + rng.integers(0, N - 1, M)) % N
    return "source,target\n" + "".join(f"n{a},n{b}\n" for a, b in zip(src, dst))


@pytest.fixture
def db_url(sqlite_url: str) -> str:
    return sqlite_url


@pytest.fixture
def settings(db_url: str, tmp_path: Path):  # type: ignore[no-untyped-def]
    return make_settings(db_url, tmp_path, job_memory_limit_bytes=LIMIT)


async def test_shortlist_past_the_limit_is_refused_with_the_estimate(client) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client, _csv())
    params: dict[str, object] = {"budget": 10, "epsilon": 0.01, "max_samples": 200_000_000,
                                 "probability": {"scheme": "uniform", "p": 0.05}}
    r = await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "shortlist", "params": params})
    body = assert_problem(r, 422, "too-expensive")
    assert body["limit_bytes"] == LIMIT and body["estimated_bytes"] > LIMIT and body["mean_rr_set_size"] > 0
    advice = re.search(r"lower max_samples to at most ([\d,]+)", body["detail"])
    assert advice is not None and "MiB" in body["detail"], body["detail"]
    # Following the advice (with a margin: the pilot's mean set size varies a little) is queued.
    params["max_samples"] = int(int(advice.group(1).replace(",", "")) * 0.8)
    r = await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "shortlist", "params": params})
    assert r.status_code == 202, r.text
    assert len((await client.get("/v1/jobs")).json()["items"]) == 1  # the refused one was never queued
    # Sets so large that even the smallest max_samples cannot fit: the detail says what else to lower.
    params["probability"] = {"scheme": "uniform", "p": 0.3}
    r = await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "shortlist", "params": params})
    body = assert_problem(r, 422, "too-expensive")
    assert "lower evaluation_samples" in body["detail"]


async def test_forecast_at_the_largest_simulation_count_is_refused_under_a_small_limit(tmp_path, sqlite_url) -> None:  # type: ignore[no-untyped-def]
    import httpx

    from service.app import create_app

    app = create_app(make_settings(sqlite_url, tmp_path, job_memory_limit_bytes=16 << 20))
    async with app.router.lifespan_context(app):
        async with httpx.AsyncClient(transport=httpx.ASGITransport(app=app), base_url="http://t") as c:
            gid = await make_graph(c, _csv())
            r = await c.post(f"/v1/graphs/{gid}/jobs", json={"kind": "forecast", "params": {
                "seeds": ["n1"], "simulations": 1_000_000}})
            body = assert_problem(r, 422, "too-expensive")
            assert "lower simulations to at most" in body["detail"] and body["simulations"] == 1_000_000
            r = await c.post(f"/v1/graphs/{gid}/jobs", json={"kind": "forecast", "params": {"seeds": ["n1"]}})
            assert r.status_code == 202, r.text


async def test_a_job_whose_rr_store_outgrows_the_limit_fails_with_the_same_problem(client, monkeypatch) -> None:  # type: ignore[no-untyped-def]
    # Make the admission estimate blind to set sizes, so only the store's own check can stop it.
    monkeypatch.setattr(admission, "rr_mean_size", lambda *a, **k: 0.0)
    gid = await make_graph(client, _csv())
    params = {"budget": 10, "max_samples": 20_000_000, "probability": {"scheme": "uniform", "p": 0.3}}
    r = await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "shortlist", "params": params})
    assert r.status_code == 202, r.text
    outcome = await run_worker_once(worker_for(client))
    assert outcome is not None and outcome.status == "failed", outcome
    job = (await client.get(f"/v1/jobs/{r.json()['id']}")).json()
    error = job["error"]
    assert job["status"] == "failed" and error["type"] == "/problems/too-expensive"
    assert error["limit_bytes"] == LIMIT and error["estimated_bytes"] > LIMIT
    # IMM needs few sets here (its lower bound on reach is high); the 100,000 fresh sets of the
    # evaluation are the store that outgrows the limit, and the detail names their parameter.
    assert "lower evaluation_samples" in error["detail"]


async def test_the_worker_repeats_the_check_with_its_own_limit(client) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client, _csv())
    r = await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "forecast", "params": {
        "seeds": ["n1"], "simulations": 1_000_000}})
    assert r.status_code == 202, r.text
    outcome = await run_worker_once(worker_for(client, memory_limit_bytes=8 << 20))
    assert outcome is not None and outcome.status == "failed" and outcome.error is not None
    assert outcome.error["type"] == "/problems/too-expensive" and outcome.error["limit_bytes"] == 8 << 20


async def test_floors_are_in_the_job_kinds_schema_and_enforced(client) -> None:  # type: ignore[no-untyped-def]
    kinds = {k["name"]: k["params_schema"] for k in (await client.get("/v1/job-kinds")).json()["items"]}
    assert kinds["scores"]["properties"]["betweenness_epsilon"]["minimum"] == 0.001
    assert kinds["shortlist"]["properties"]["epsilon"]["minimum"] == 0.01
    assert kinds["scores"]["properties"]["betweenness_delta"]["minimum"] == 1e-6
    assert kinds["shortlist"]["properties"]["max_samples"]["maximum"] == 200_000_000
    gid = await make_graph(client)
    # The requests of the report: sampled betweenness at epsilon 1e-9 (it ignored cancel for 8
    # minutes), a shortlist at epsilon 1e-9 with 2e8 samples (4 GB in 28 s): refused at once.
    r = await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "scores", "params": {
        "betweenness": "sampled", "betweenness_epsilon": 1e-9}})
    body = assert_problem(r, 422, "invalid-parameter")
    assert "betweenness_epsilon" in body["detail"]
    r = await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "shortlist", "params": {
        "budget": 2, "epsilon": 1e-9, "max_samples": 200_000_000}})
    body = assert_problem(r, 422, "invalid-parameter")
    assert "epsilon" in body["detail"]


def test_estimates_count_what_the_params_ask_for() -> None:
    class P:
        simulations = 1_000_000

        @staticmethod
        def named_sets() -> dict[str, list[str]]:
            return {"a": ["x"]}

    est = admission.forecast_estimate(P(), lambda: None, nodes=1000, edges=5000)
    # 40 bytes per run kept (reach, weighted reach, depth, twice while merging), plus the graph.
    assert est.bytes == 1_000_000 * 40 + admission.graph_bytes(1000, 5000) + 16 * 1000
    with pytest.raises(Exception) as err:
        admission.admit(est, 10 << 20)
    assert err.value.data["estimated_bytes"] == est.bytes  # type: ignore[attr-defined]
    admission.admit(est, None)  # no limit: admitted
    # Every thread beyond the first keeps its own per-node buffers (marks, queue, counts).
    four = admission.forecast_estimate(P(), lambda: None, nodes=1000, edges=5000, threads=4)
    assert four.bytes - est.bytes == 3 * admission.THREAD_BYTES_PER_NODE * 1000


def test_threads_setting_defaults_to_the_usable_cores_shared_by_the_workers(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    import os

    monkeypatch.delenv("BELLWETHER_THREADS", raising=False)

    from service.settings import Settings, usable_cores

    # Source: the process's CPU affinity (os.sched_getaffinity), the cores it may run on,
    # and no CPU quota in an empty cgroup folder.
    cores = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count()
    assert usable_cores(tmp_path) == cores
    s = Settings(data_dir=tmp_path)
    assert s.threads is None
    assert s.thread_count() == usable_cores()  # the real cgroup: a CI container may set a quota
    assert s.thread_count(workers=cores * 2) == 1  # never below one
    assert Settings(data_dir=tmp_path, threads=3).thread_count(workers=4) == 3
    from service.jobs.worker import WorkerConfig
    assert WorkerConfig.from_settings(Settings(data_dir=tmp_path, threads=5)).threads == 5


def test_a_container_cpu_quota_caps_the_usable_cores(tmp_path: Path) -> None:
    from service.settings import cpu_quota, usable_cores

    # Source: the cgroup v2 cpu.max format ("quota period", or "max period" for none) and
    # the v1 cfs files (quota -1 for none), as documented by the Linux kernel.
    (tmp_path / "cpu.max").write_text("150000 100000\n")
    assert cpu_quota(tmp_path) == 1.5
    assert usable_cores(tmp_path) == min(2, usable_cores(tmp_path / "none"))  # 1.5 rounded up
    (tmp_path / "cpu.max").write_text("max 100000\n")
    assert cpu_quota(tmp_path) is None
    (tmp_path / "cpu.max").unlink()
    (tmp_path / "cpu").mkdir()
    (tmp_path / "cpu" / "cpu.cfs_quota_us").write_text("100000\n")
    (tmp_path / "cpu" / "cpu.cfs_period_us").write_text("100000\n")
    assert cpu_quota(tmp_path) == 1.0 and usable_cores(tmp_path) == 1
    (tmp_path / "cpu" / "cpu.cfs_quota_us").write_text("-1\n")
    assert cpu_quota(tmp_path) is None
