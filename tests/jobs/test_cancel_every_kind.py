"""Every job kind, at the most expensive params its schema (and the memory limit) allows, stops
within 2 seconds of POST /cancel.

Each job is created over HTTP on a real SQLite file and run by a worker in a
thread; once the job has been running for a second the test posts cancel and
times how long until the job row says ``cancelled``. A kind that finishes on
its own before the cancel arrives (it needs no cancel point) must have
finished within those few seconds.
"""

from __future__ import annotations

import asyncio
import time
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from service.jobs.worker import RunOutcome
from tests.conftest import make_settings
from tests.jobs.api_helpers import make_graph, worker_for
from tests.jobs.campaign_helpers import upload_campaigns

pytestmark = [pytest.mark.anyio, pytest.mark.slow]

N, M = 3000, 24_000
ALL = [f"n{i}" for i in range(N)]

# The most expensive params each schema allows (lists at their longest where
# their length is the cost), with the memory limit below admitting them; shortlist
# also with celf at the most runs its work cap (candidates x runs) allows on this graph.
EXPENSIVE: dict[str, dict[str, Any]] = {
    "scores": {"betweenness": "sampled", "betweenness_epsilon": 0.001, "betweenness_delta": 1e-6},
    "scores:exact": {"betweenness": "exact", "measures": ["betweenness", "harmonic", "constraint", "community"]},
    "forecast": {"seed_sets": {f"s{i}": ALL[i * 100:(i + 1) * 100] for i in range(20)},
                 "simulations": 1_000_000, "min_simulations": 1_000_000,
                 "probability": {"scheme": "uniform", "p": 0.05}},
    "shortlist": {"budget": 200, "method": "imm", "epsilon": 0.01, "l": 10, "max_samples": 20_000_000,
                  "evaluation_samples": 5_000_000, "forecast_runs": 1_000_000,
                  "probability": {"scheme": "uniform", "p": 0.05}},
    "shortlist:celf": {"budget": 50, "method": "celf", "celf_runs": 6_000,
                       "probability": {"scheme": "uniform", "p": 0.05}},
    "profile": {"bfs_samples": 1_000_000, "bootstrap": 10_000},
    "link_evaluation": {"negatives_per_positive": 100, "max_positives": None, "k": 1_000_000,
                        "negatives": "two_hop"},
    "recommendations": {"limit": 1000, "explain": 10},
    "project_events": {"projection": "newman", "max_event_size": 0, "backbone": "sdsm", "alpha": 0.999},
    "referral_asks": {"adopters": ALL[:1000], "per_adopter": 1000,
                      "probability": {"scheme": "uniform", "p": 0.05}},
    "odd_neighbourhoods": {"top": 1000, "local_outlier": True, "min_contacts": 1},
    "dense_groups": {"groups": 50, "min_size": 2, "weighting": "uniform"},
    # DrL at this size runs in a child process, which the cancellation ends.
    "layout": {"method": "drl"},
    # These two learn from the graph's past campaigns (CAMPAIGNS, uploaded first).
    "learn_probabilities": {"folds": 20},
    "backtest": {"holdout": "each", "simulations": 100_000, "folds": 20},
}
CAMPAIGNS = 20  # simulated past campaigns uploaded for the kinds that learn from them


def _csv() -> str:
    rng = np.random.default_rng(13)
    src = rng.integers(0, N, M)
    dst = (src + 1 + rng.integers(0, N - 1, M)) % N  # no self-loops
    return "source,target\n" + "".join(f"n{a},n{b}\n" for a, b in zip(src, dst))


@pytest.fixture
def db_url(sqlite_url: str) -> str:
    return sqlite_url


@pytest.fixture
def settings(db_url: str, tmp_path: Path):  # type: ignore[no-untyped-def]
    return make_settings(db_url, tmp_path, job_memory_limit_bytes=6 << 30)


async def _status(client: Any, job_id: str) -> dict[str, Any]:
    return dict((await client.get(f"/v1/jobs/{job_id}")).json())


def test_every_kind_has_a_row() -> None:
    from service.jobs.registry import REGISTRY

    kinds = {case.split(":")[0] for case in EXPENSIVE}
    assert kinds == {k for k in REGISTRY if not k.startswith("test_")}  # a new kind needs a row here


@pytest.mark.parametrize("case", list(EXPENSIVE))
async def test_cancel_takes_effect_within_two_seconds(client, case: str) -> None:  # type: ignore[no-untyped-def]
    kind = case.split(":")[0]
    gid = await make_graph(client, _csv() if kind != "project_events" else None)
    if kind == "project_events":  # an event table: the graph's edges as the events' rows
        r = await client.post(f"/v1/graphs/{gid}/versions", params={"part": "events", "single_events": "skip"},
                              content=_csv().replace("source,target", "person,event"),
                              headers={"Content-Type": "text/csv"})
        assert r.status_code == 201, r.text
    if kind in ("learn_probabilities", "backtest"):
        lines = _csv().splitlines()[1:]
        await upload_campaigns(client, gid, [(a, b) for a, b in (x.split(",") for x in lines)], CAMPAIGNS, p=0.05)
    r = await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": kind, "params": EXPENSIVE[case]})
    assert r.status_code == 202, r.text
    job_id = r.json()["id"]
    worker = worker_for(client, progress_interval_seconds=0.2, heartbeat_seconds=0.5)
    task = asyncio.create_task(asyncio.to_thread(worker.run_once))
    deadline = time.monotonic() + 60
    while (await _status(client, job_id))["status"] == "queued":
        assert time.monotonic() < deadline
        await asyncio.sleep(0.05)
    started = time.monotonic()
    await asyncio.sleep(1.0)  # well inside the work
    r = await client.post(f"/v1/jobs/{job_id}/cancel")
    asked = time.monotonic()
    if r.status_code == 409:  # it finished on its own: a short job needs no cancel point
        outcome: RunOutcome | None = await task
        assert outcome is not None and outcome.status == "succeeded", outcome
        assert asked - started < 3.0
        print(f"{kind}: finished before the cancel")
        return
    assert r.status_code in (200, 202), r.text
    try:
        outcome = await asyncio.wait_for(asyncio.shield(task), timeout=2.0)
    except TimeoutError:
        outcome = None
    took = time.monotonic() - asked
    if outcome is None:  # let the worker end before the database goes away
        outcome = await asyncio.wait_for(task, timeout=600)
        took = time.monotonic() - asked
    assert outcome is not None and outcome.status == "cancelled", outcome
    assert (await _status(client, job_id))["status"] == "cancelled"
    print(f"{kind}: cancelled {took:.2f} s after the request")
    assert took <= 2.0, f"cancel took {took:.2f} s"
