"""Every job kind's real result, as the API answers it, matches its model in the OpenAPI document exactly."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import networkx as nx
import pytest
from pydantic import BaseModel

from service.api.schemas.results import RESULT_MODELS, JobResult
from service.jobs.registry import REGISTRY
from tests.conftest import make_settings
from tests.jobs.api_helpers import make_graph, run_worker_once, worker_for
from tests.jobs.campaign_helpers import upload_campaigns

pytestmark = [pytest.mark.anyio, pytest.mark.slow]

# Zachary's karate club (NetworkX) with attributes, so segments, costs and consent all appear.
NODES_CSV = "id,segment,cost,consent\n" + "".join(
    f"{n},{'officer' if d['club'] == 'Officer' else 'hi'},{1 + n % 3},{'false' if n == 5 else 'true'}\n"
    for n, d in nx.karate_club_graph().nodes(data=True)
)
EDGES_CSV = "source,target\n" + "".join(f"{u},{v}\n" for u, v in nx.karate_club_graph().edges())

# Each kind with the params that make its result take each of its shapes.
RUNS: list[tuple[str, dict[str, Any]]] = [
    ("profile", {"bootstrap": 2, "bfs_samples": 10}),
    ("profile", {}),
    ("scores", {}),
    ("recommendations", {"limit": 3, "contactable": True}),
    ("link_evaluation", {"k": 5}),
    ("referral_asks", {"adopters": ["0", "33", "ghost"], "strict": False, "follow_on": "pagerank"}),
    ("forecast", {"seeds": ["0", "33"], "simulations": 200}),
    ("forecast", {"seed_sets": {"a": ["0"], "b": ["33", "2"]}, "simulations": 200, "target_segment": "hi"}),
    ("forecast", {"seeds": ["0", "0", "5"], "simulations": 100, "precision": 0.001}),
    ("shortlist", {"budget": 3}),
    ("shortlist", {"budget": 3, "method": "celf", "celf_runs": 50, "target_segment": "officer"}),
    ("shortlist", {"cost_budget": 4.0, "must_include": ["1"], "max_per_segment": 2}),
    ("layout", {}),
    ("odd_neighbourhoods", {"top": 5}),
    ("dense_groups", {"groups": 2}),
    ("project_events", {"backbone": "disparity_filter", "alpha": 0.5}),
    ("learn_probabilities", {}),
    ("backtest", {"latest": 2, "simulations": 100}),
    ("backtest", {"holdout": "each", "simulations": 50, "methods": ["uniform"]}),
]
# Kinds that run on a version built from an event table (karate club's edges as two-person events).
EVENTS_CSV = "person,event\n" + "".join(f"{u},e{i}\n{v},e{i}\n" for i, (u, v) in enumerate(nx.karate_club_graph().edges()))


@pytest.fixture
def db_url(sqlite_url: str) -> str:
    return sqlite_url


@pytest.fixture
def settings(db_url: str, tmp_path: Path):  # type: ignore[no-untyped-def]
    return make_settings(db_url, tmp_path, wait_max_seconds=5.0, job_max_queued_per_tenant=50)


def unlisted(model: BaseModel, where: str = "") -> list[str]:
    """Members of ``model`` (and every model inside it) that its class does not declare."""
    found = [f"{where}.{k}" for k in (model.model_extra or {})]
    for name in type(model).model_fields:
        found += _walk(getattr(model, name), f"{where}.{name}")
    return found


def _walk(value: object, where: str) -> list[str]:
    if isinstance(value, BaseModel):
        return unlisted(value, where)
    if isinstance(value, list):
        return [x for i, v in enumerate(value) for x in _walk(v, f"{where}[{i}]")]
    if isinstance(value, dict):
        return [x for k, v in value.items() for x in _walk(v, f"{where}.{k}")]
    return []


async def test_every_kind_result_matches_its_model(client: Any) -> None:
    assert set(RESULT_MODELS) <= set(REGISTRY) and {k for k, _ in RUNS} == set(RESULT_MODELS)
    gid = await make_graph(client, EDGES_CSV)
    r = await client.post(f"/v1/graphs/{gid}/versions", params={"part": "nodes", "mode": "append"},
                          content=NODES_CSV, headers={"Content-Type": "text/csv"})
    assert r.status_code == 201, r.text
    events_gid = await make_graph(client, None)
    r = await client.post(f"/v1/graphs/{events_gid}/versions", params={"part": "events"}, content=EVENTS_CSV,
                          headers={"Content-Type": "text/csv"})
    assert r.status_code == 201, r.text
    karate = [(str(u), str(v)) for u, v in nx.karate_club_graph().edges()]
    await upload_campaigns(client, gid, karate, 6, p=0.2)  # what learn_probabilities and backtest read
    for kind, params in RUNS:
        on = events_gid if kind == "project_events" else gid
        r = await client.post(f"/v1/graphs/{on}/jobs", json={"kind": kind, "params": params})
        assert r.status_code == 202, r.text
        await run_worker_once(worker_for(client))
        job = (await client.get(f"/v1/jobs/{r.json()['id']}")).json()
        assert job["status"] == "succeeded", (kind, params, job["error"])
        body = (await client.get(f"/v1/jobs/{job['id']}/result")).json()
        parsed = JobResult.model_validate(body).root
        assert type(parsed) is RESULT_MODELS[kind]
        assert unlisted(parsed) == [], f"{kind} {params}: members missing from its result model"
        # The check above can fail: a member the model lacks is found, however deep.
        planted = {**body, "surprise": 1, "params": body["params"]}
        if kind == "shortlist":
            planted["seeds"] = [{**body["seeds"][0], "new": True}]
        found = unlisted(JobResult.model_validate(planted).root)
        assert ".surprise" in found and (kind != "shortlist" or ".seeds[0].new" in found)


def test_document_declares_the_union_by_kind() -> None:
    from service.app import create_app

    doc = create_app(make_settings("sqlite://", Path("/nonexistent"))).openapi()
    ok = doc["paths"]["/v1/jobs/{job_id}/result"]["get"]["responses"]["200"]["content"]["application/json"]
    union = ok["schema"]
    union = doc["components"]["schemas"][union["$ref"].rsplit("/", 1)[1]] if "$ref" in union else union
    assert union["discriminator"]["propertyName"] == "kind"
    assert set(union["discriminator"]["mapping"]) == set(RESULT_MODELS)
    for name in ("ShortlistSeed", "SeedSetForecast", "Interval", "ForecastParams", "ShortlistParams"):
        assert name in doc["components"]["schemas"], name


def test_a_registered_kind_with_a_result_model_joins_the_union(monkeypatch: pytest.MonkeyPatch) -> None:
    from typing import Literal

    from pydantic import ConfigDict

    from service.app import create_app
    from service.jobs import registry
    from service.jobs.kinds import JobKind, TaskOutput

    class CountParams(BaseModel):
        model_config = ConfigDict(extra="forbid")

    class CountResult(BaseModel):
        kind: Literal["count_people"]
        people: int

    kind = JobKind(name="count_people", params=CountParams, run=lambda ctx, p: TaskOutput(data={}),
                   summary="Count", result_description="people", result=CountResult)
    monkeypatch.setitem(registry.REGISTRY, kind.name, kind)
    doc = create_app(make_settings("sqlite://", Path("/nonexistent"))).openapi()
    union = doc["components"]["schemas"]["JobResult"]
    assert union["discriminator"]["mapping"]["count_people"] == "#/components/schemas/CountResult"
    assert {"$ref": "#/components/schemas/CountResult"} in union["oneOf"]
    assert doc["components"]["schemas"]["CountResult"]["properties"]["people"]["type"] == "integer"
    assert set(RESULT_MODELS) < set(union["discriminator"]["mapping"])
