"""Over HTTP, a shortlist and a forecast give the same answer whatever the worker's thread
count (1, 2 or 4): item ``i`` of every sample (RR set, simulated campaign) is drawn from a
stream keyed only on ``(random_seed, i)`` and the parts are merged in index order. The
answers state the thread count. The reference is the one-thread answer; its figures are
checked against exact enumeration in test_shortlists.py and test_forecasts.py.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pytest

from service.analytics.seeding import _rr_parts
from tests.jobs.api_helpers import run_worker_once, worker_for

pytestmark = pytest.mark.anyio


async def random_graph(client) -> str:  # type: ignore[no-untyped-def]
    rng = np.random.default_rng(17)
    n, m = 400, 3000
    src, dst = rng.integers(0, n, m), rng.integers(0, n, m)
    keep = src != dst
    r = await client.post("/v1/graphs", json={"name": "campaign", "directed": True})
    gid = str(r.json()["id"])
    csv = "source,target\n" + "".join(f"p{u},p{v}\n" for u, v in zip(src[keep], dst[keep]))
    r = await client.post(f"/v1/graphs/{gid}/versions", params={"part": "edges"}, content=csv,
                          headers={"Content-Type": "text/csv"})
    assert r.status_code == 201, r.text
    return gid


async def run(client, gid: str, kind: str, params: dict[str, Any], threads: int) -> dict[str, Any]:  # type: ignore[no-untyped-def]
    r = await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": kind, "params": params})
    assert r.status_code == 202, r.text
    assert await run_worker_once(worker_for(client, threads=threads)) is not None
    job = (await client.get(f"/v1/jobs/{r.json()['id']}")).json()
    assert job["status"] == "succeeded", job
    res = await client.get(f"/v1/jobs/{job['id']}/result")
    assert res.status_code == 200
    return dict(res.json())


@pytest.mark.parametrize("kind, params", [
    ("shortlist", {"budget": 5, "method": "imm", "epsilon": 0.2, "random_seed": 5,
                   "forecast_runs": 3000}),
    ("shortlist", {"budget": 5, "method": "opim", "epsilon": 0.2, "random_seed": 6,
                   "forecast_runs": 2000}),
    ("forecast", {"seeds": ["p1", "p2", "p3"], "simulations": 5000, "min_simulations": 500,
                  "relative_precision": 0.005, "random_seed": 7}),
], ids=["imm", "opim", "forecast"])
async def test_answers_are_identical_across_thread_counts(client, monkeypatch, kind, params) -> None:  # type: ignore[no-untyped-def]
    monkeypatch.setattr(_rr_parts, "PARALLEL_MIN_SETS", 1)  # split even small batches of RR sets
    gid = await random_graph(client)
    answers = {t: await run(client, gid, kind, {"probability": {"scheme": "weighted_cascade"},
                                                **params}, t)
               for t in (1, 2, 4)}
    for t, doc in answers.items():
        assert doc["threads"] == t
    same = {t: figures(doc) for t, doc in answers.items()}
    assert same[2] == same[1]
    assert same[4] == same[1]


# What differs between two runs of one job for reasons other than its figures.
RUN_FIELDS = {"threads", "timings", "job_id", "created_at", "started_at", "finished_at"}


def figures(doc: Any) -> Any:
    """The document without the run's own fields and wall-clock seconds."""
    if isinstance(doc, dict):
        return {k: figures(v) for k, v in doc.items()
                if k not in RUN_FIELDS and not k.endswith("_seconds")}
    if isinstance(doc, list):
        return [figures(v) for v in doc]
    return doc
