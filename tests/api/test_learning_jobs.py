"""Learning probabilities from uploaded campaigns over HTTP, and using the model in forecasts.

Campaigns are simulated under Independent Cascade with a known uniform
probability (tests/jobs/campaign_helpers.py); the learned model must come back
near it, and forecasts with ``{"scheme": "learned"}`` must use it.
"""

from __future__ import annotations

from typing import Any

import httpx
import numpy as np
import pytest

from service.analytics.graph import arcs
from service.usecases.learned_models import learned_probabilities
from service.usecases.loading import load_version
from storage.repo import graphs as graph_repo
from tests.jobs.api_helpers import assert_problem, make_graph, run_worker_once, worker_for
from tests.jobs.campaign_helpers import upload_campaigns

pytestmark = pytest.mark.anyio

TRUE_P = 0.2
N, M = 120, 360


@pytest.fixture
def db_url(sqlite_url: str) -> str:
    return sqlite_url


def graph_csv(seed: int = 3) -> tuple[str, list[tuple[str, str]]]:
    rng = np.random.default_rng(seed)
    pairs = {(int(a), int(b)) for a, b in rng.integers(0, N, (M, 2)) if a != b}
    edges = sorted({(min(a, b), max(a, b)) for a, b in pairs})
    return "source,target\n" + "".join(f"n{a},n{b}\n" for a, b in edges), [(f"n{a}", f"n{b}") for a, b in edges]


async def run_job(client: httpx.AsyncClient, gid: str, kind: str, params: dict[str, Any],
                  **order: Any) -> dict[str, Any]:
    r = await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": kind, "params": params, **order})
    assert r.status_code == 202, r.text
    job = r.json()["id"]
    await run_worker_once(worker_for(client))
    r = await client.get(f"/v1/jobs/{job}")
    assert r.json()["status"] == "succeeded", r.json()
    out = (await client.get(f"/v1/jobs/{job}/result")).json()
    return dict(out)


async def test_learned_model_recovers_p_and_drives_forecasts(client: httpx.AsyncClient) -> None:
    csv, edges = graph_csv()
    gid = await make_graph(client, csv)
    await upload_campaigns(client, gid, edges, 30, p=TRUE_P)
    res = await run_job(client, gid, "learn_probabilities", {"methods": ["uniform", "weighted_cascade"]})
    model = res["model"]
    assert model["method"] == "uniform", model
    (p,) = model["parameters"]
    # The uniform EM estimate is the share of chances taken (Saito et al. 2008); its 95% interval
    # should hold the truth (this seed: checked once, not tuned).
    assert p["low"] <= TRUE_P <= p["high"] and abs(p["value"] - TRUE_P) < 0.05, p
    assert res["data"]["campaigns"] == 30 and res["readings"]
    mid = res["job_id"]
    # A forecast under the learned model equals one under uniform p at the learned value.
    seeds = ["n1", "n2"]
    learned = await run_job(client, gid, "forecast", {"seeds": seeds, "simulations": 400,
                                                      "probability": {"scheme": "learned", "model": mid}})
    assert learned["params"]["probability"] == {"scheme": "learned", "p": None, "q": None, "model": mid}
    same = await run_job(client, gid, "forecast", {"seeds": seeds, "simulations": 400,
                                                   "probability": {"scheme": "uniform", "p": p["value"]}})
    assert learned["expected_reach"]["mean"] == pytest.approx(same["expected_reach"]["mean"], rel=0.02)
    # Shortlists take the learned model too (the IMM memory estimate builds its graph the same way),
    # and Linear Threshold uses the counted weights (Goyal et al. 2010), each person's summing to <= 1.
    short = await run_job(client, gid, "shortlist", {"budget": 2, "probability": {"scheme": "learned", "model": mid}})
    assert len(short["seeds"]) == 2
    # Next contacts take it as well: each exposure equals the one under uniform p at the learned
    # value (1 - (1 - p)^k for k adopters in contact, Kempe et al. 2003).
    asked = {"adopters": seeds, "limit": 10}
    by_learned = await client.post(f"/v1/graphs/{gid}/next-contacts",
                                   json={**asked, "probability": {"scheme": "learned", "model": mid}})
    by_uniform = await client.post(f"/v1/graphs/{gid}/next-contacts",
                                   json={**asked, "probability": {"scheme": "uniform", "p": p["value"]}})
    assert by_learned.status_code == 200, by_learned.text
    exposures = {i["node_id"]: i["exposure"] for i in by_learned.json()["items"]}
    expected = {i["node_id"]: i["exposure"] for i in by_uniform.json()["items"]}
    assert exposures and exposures.keys() == expected.keys()
    assert all(exposures[k] == pytest.approx(expected[k], rel=2e-3) for k in exposures)
    lt = await run_job(client, gid, "forecast", {"seeds": seeds, "simulations": 200, "model": "lt",
                                                 "probability": {"scheme": "learned", "model": mid}})
    assert lt["expected_reach"]["mean"] >= 2
    # A later version: connections kept keep their probability, new ones get the uniform estimate.
    r = await client.post(f"/v1/graphs/{gid}/versions", params={"mode": "append"},
                          content="source,target\nn0,new1\n", headers={"Content-Type": "text/csv"})
    assert r.status_code == 201, r.text
    later = await run_job(client, gid, "forecast", {"seeds": seeds, "simulations": 400,
                                                    "probability": {"scheme": "learned", "model": mid}})
    assert later["version"] == 2 and later["expected_reach"]["mean"] > 0
    # A per-connection model carried to version 2: every kept arc keeps its own probability, the
    # new person's two arcs get the model's one-for-all estimate (checked through the use case).
    per_edge = await run_job(client, gid, "learn_probabilities", {"methods": ["per_edge"], "folds": 2}, version=1)
    assert per_edge["version"] == 1 and per_edge["model"]["method"] == "per_edge"
    maker = client.app.state.sessionmaker  # type: ignore[attr-defined]
    with maker() as db:
        g = graph_repo.get_graph(db, client.app.state.settings.default_tenant, gid)  # type: ignore[attr-defined]
        v1, v2 = (load_version(db, graph_repo.get_version(db, g, n)) for n in (1, 2))
    p1 = learned_probabilities(per_edge["job_id"], v1)
    p2 = learned_probabilities(per_edge["job_id"], v2)
    assert np.ptp(p1) > 0  # really one probability per connection
    a1, a2 = arcs(v1.graph), arcs(v2.graph)
    before = {(v1.ids[u], v1.ids[w]): q for u, w, q in zip(a1.src, a1.dst, p1)}
    for u, w, q in zip(a2.src, a2.dst, p2):
        key = (v2.ids[u], v2.ids[w])
        expect = before.get(key, per_edge["model"]["coefficients"]["uniform"][0])
        assert q == pytest.approx(expect, rel=1e-3), key  # the answer rounds to 4 digits


async def test_bad_models_and_no_campaigns_are_refused(client: httpx.AsyncClient) -> None:
    csv, edges = graph_csv()
    gid = await make_graph(client, csv)
    other = await make_graph(client, csv)
    r = await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "learn_probabilities", "params": {}})
    body = assert_problem(r, 422, "invalid-parameter")
    assert "at least one past campaign" in body["detail"]
    theirs = await upload_campaigns(client, other, edges, 6, p=TRUE_P)
    r = await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "learn_probabilities",
                                                          "params": {"campaigns": theirs[:2]}})
    assert "is not a campaign of this graph" in assert_problem(r, 422, "invalid-parameter")["detail"]
    res = await run_job(client, other, "learn_probabilities", {"methods": ["uniform"], "folds": 2})
    for model in (res["job_id"], "j_nope"):
        r = await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "forecast", "params": {
            "seeds": ["n1"], "probability": {"scheme": "learned", "model": model}}})
        body = assert_problem(r, 422, "invalid-parameter")
        assert body["field"] == "probability.model" and "not a learned model of this graph" in body["detail"]
    r = await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "forecast", "params": {
        "seeds": ["n1"], "probability": {"scheme": "learned"}}})
    assert r.status_code == 422 and "needs probability.model" in r.text


async def test_backtest_scores_every_scheme_with_csv_and_plot(client: httpx.AsyncClient, tmp_path: Any) -> None:
    csv, edges = graph_csv()
    gid = await make_graph(client, csv)
    # Truth p = 0.35, well above weighted cascade's 1/degree (about 0.17 here).
    await upload_campaigns(client, gid, edges, 12, p=0.35, seed=9)
    res = await run_job(client, gid, "backtest", {"latest": 4, "simulations": 200, "methods": ["uniform"]})
    summary = {s["scheme"]: s for s in res["summary"]}
    assert set(summary) == {"learned", "weighted_cascade", "uniform", "trivalency"}
    assert all(s["campaigns"] == 4 for s in summary.values())
    # The learned model (the truth's form) predicts who adopted better than the misspecified schemes.
    assert summary["learned"]["log_likelihood"] > summary["weighted_cascade"]["log_likelihood"]
    assert summary["learned"]["log_likelihood"] > summary["trivalency"]["log_likelihood"]
    assert summary["learned"]["mean_rel_error"] < summary["weighted_cascade"]["mean_rel_error"]
    assert res["verdict"].startswith("The learned model's forecasts were off by")
    assert len(res["campaigns"]) == 4 and len(res["campaigns"][0]["forecasts"]) == 4
    r = await client.get(f"/v1/jobs/{res['job_id']}/result.csv")
    assert r.status_code == 200 and r.text.splitlines()[0].startswith("campaign,name,scheme,actual,expected")
    assert len(r.text.strip().splitlines()) == 1 + 16
    r = await client.get(f"/v1/jobs/{res['job_id']}/plots/forecast_vs_actual.svg")
    assert r.status_code == 200 and "<svg" in r.text and "actual reach" in r.text
    (tmp_path / "backtest.svg").write_text(r.text)
    # Holding out every campaign leaves nothing to learn from: refused before queueing.
    r = await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "backtest", "params": {"latest": 12}})
    assert assert_problem(r, 422, "invalid-parameter")["field"] == "latest"
