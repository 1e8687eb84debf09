"""The ``shortlist`` job kind over the ASGI app, on SQLite and PostgreSQL: rules, guarantee, problems, plot.

Exact spreads come from enumerating every live-edge world of a 10-node graph
(Kempe, Kleinberg and Tardos 2003, Thm 4.5); the best set by trying them all.
IMM's shortlist must reach at least (1 - 1/e - epsilon) of it (Tang, Shi, Xiao
2015, published). Monte Carlo figures are compared with exact values within 4
standard errors, with fixed seeds.
"""

from __future__ import annotations

import itertools
import math
import xml.etree.ElementTree as ET
from typing import Any

import numpy as np
import pytest

from service.jobs.kinds import JobKind
from tests.jobs.api_helpers import assert_problem, run_worker_once, worker_for
from tests.jobs.test_shortlist_kind import assert_within, exact_spreads, random_graph

pytestmark = pytest.mark.anyio

POST_TIME_CHECKS = "precheck" in JobKind.__dataclass_fields__  # see shortlist.precheck
EXPLICIT = {"probability": {"scheme": "explicit"}}
SVG = "{http://www.w3.org/2000/svg}"


async def make_graph(
    client, arcs: list[tuple[int, int, float]], nodes_csv: str | None = None
) -> str:  # type: ignore[no-untyped-def]
    r = await client.post("/v1/graphs", json={"name": "campaign", "directed": True})
    assert r.status_code == 201, r.text
    gid = str(r.json()["id"])
    csv = "source,target,probability\n" + "".join(f"n{u},n{v},{p!r}\n" for u, v, p in arcs)
    r = await client.post(
        f"/v1/graphs/{gid}/versions",
        params={"part": "edges", "probability": "probability"},
        content=csv,
        headers={"Content-Type": "text/csv"},
    )
    assert r.status_code == 201, r.text
    if nodes_csv is not None:
        r = await client.post(
            f"/v1/graphs/{gid}/versions",
            params={"part": "nodes", "mode": "append"},
            content=nodes_csv,
            headers={"Content-Type": "text/csv"},
        )
        assert r.status_code == 201, r.text
    return gid


async def run_shortlist(client, gid: str, params: dict[str, Any]) -> dict[str, Any]:  # type: ignore[no-untyped-def]
    """POST the job, run it with an in-process worker; the job, with ``result`` when it succeeded."""
    r = await client.post(
        f"/v1/graphs/{gid}/jobs", json={"kind": "shortlist", "params": {**EXPLICIT, **params}}
    )
    assert r.status_code == 202, r.text
    assert r.headers["location"] == f"/v1/jobs/{r.json()['id']}"
    assert await run_worker_once(worker_for(client)) is not None
    job = dict((await client.get(f"/v1/jobs/{r.json()['id']}")).json())
    if job["status"] == "succeeded":
        res = await client.get(f"/v1/jobs/{job['id']}/result")
        assert res.status_code == 200
        job["result"] = res.json()
    return job


async def problem_of(client, gid: str, params: dict[str, Any], slug: str) -> dict[str, Any]:  # type: ignore[no-untyped-def]
    """The 422 problem of a rule that needs the version: at POST when wired, else the failed job's error."""
    r = await client.post(
        f"/v1/graphs/{gid}/jobs", json={"kind": "shortlist", "params": {**EXPLICIT, **params}}
    )
    if POST_TIME_CHECKS:
        return assert_problem(r, 422, slug)
    assert r.status_code == 202, r.text
    await run_worker_once(worker_for(client))
    job = (await client.get(f"/v1/jobs/{r.json()['id']}")).json()
    assert job["status"] == "failed" and job["attempts"] == 1, job
    assert job["error"]["type"] == f"/problems/{slug}" and job["error"]["detail"], job["error"]
    r = await client.get(f"/v1/jobs/{job['id']}/result")
    assert_problem(r, 404, "result-not-ready")  # no half-written result
    return dict(job["error"])


def ids_to_idx(ids: list[str]) -> list[int]:
    return [int(s[1:]) for s in ids]


async def test_imm_shortlist_against_brute_force_with_baselines_and_plot(client) -> None:  # type: ignore[no-untyped-def]
    arcs = random_graph(np.random.default_rng(42), 10, 12, hubs=3)
    gid = await make_graph(client, arcs)
    job = await run_shortlist(client, gid, {"budget": 2, "random_seed": 3, "forecast_runs": 20_000})
    assert job["status"] == "succeeded", job.get("error")
    res = job["result"]
    assert (res["kind"], res["graph_id"], res["version"], res["random_seed"]) == (
        "shortlist",
        gid,
        1,
        3,
    )
    assert res["params"]["budget"] == 2 and res["method"] == "imm" and res["model"] == "ic"
    chosen = ids_to_idx([s["node_id"] for s in res["seeds"]])
    # Source: exact enumeration of all 2^12 live-edge worlds; brute force over all C(10, 2) pairs.
    every = exact_spreads(10, arcs, itertools.combinations(range(10), 2))
    assert assert_within(
        every[frozenset(chosen)], every, 1 - 1 / math.e - 0.1
    )  # and the check could fail here
    er = res["expected_reach"]
    assert abs(er["mean"] - every[frozenset(chosen)]) <= 4 * er["stderr"] + 0.05  # + 0.05: the answer rounds people to one decimal
    assert er["method"] == "forward_monte_carlo" and er["ci_low"] <= er["mean"] <= er["ci_high"]
    assert [s["rank"] for s in res["seeds"]] == [1, 2]
    assert all(
        set(s)
        >= {"node_id", "marginal_gain", "cumulative_reach", "reason", "segment", "cost", "required"}
        for s in res["seeds"]
    )
    curve = res["reach_curve"]
    assert len(curve) == 2 and curve[0] <= curve[1] and res["reach_curve_source"]
    g = res["guarantee"]
    assert g["approximation"] == pytest.approx(1 - 1 / math.e - 0.1, rel=1e-3) and "1 - 1/e" in g["summary"]
    assert res["theta"] > 0 and res["samples"] >= res["theta"] and "total" in res["timings"]
    assert set(res["baselines"]) == {"degree_discount", "top_degree", "top_pagerank"}
    for name, b in res["baselines"].items():
        assert len(b["seeds"]) == 2 and len(b["reach_curve"]) == 2, name
        sigma = every[frozenset(ids_to_idx(b["seeds"]))]
        assert abs(b["expected_reach"]["mean"] - sigma) <= 4 * b["expected_reach"]["stderr"] + 0.05, name
    gain = res["gain_over_best_baseline"]
    assert gain["baseline"] in res["baselines"] and gain["difference"] == pytest.approx(
        er["mean"] - res["baselines"][gain["baseline"]]["expected_reach"]["mean"], abs=0.1
    )  # each figure rounded to one decimal
    r = await client.get(f"/v1/jobs/{job['id']}/plots/reach_curve.svg")
    assert r.status_code == 200 and r.headers["content-type"].startswith("image/svg+xml")
    texts = [t.text for t in ET.fromstring(r.text).iter(SVG + "text")]
    # Plain words, not method names (see service.usecases.plots.nice_name).
    assert "best-connected people" in texts and "best-connected, skipping close neighbours" in texts
    assert "top_degree" not in texts


async def test_contact_rules_over_http(client) -> None:  # type: ignore[no-untyped-def]
    arcs = random_graph(np.random.default_rng(8), 10, 12, hubs=4)
    segment = ["east", "east", "east", "west", "west", "west", "north", "north", "north", "north"]
    consent = ["true", "true", "false", "true", "true", "true", "false", "true", "true", "true"]
    cost = ["3", "1", "2", "1.5", "4", "1", "2.5", "", "2", "1"]
    nodes = "id,segment,consent,cost\n" + "".join(
        f"n{i},{s},{c},{k}\n" for i, (s, c, k) in enumerate(zip(segment, consent, cost))
    )
    gid = await make_graph(client, arcs, nodes)
    job = await run_shortlist(
        client,
        gid,
        {
            "budget": 4,
            "must_include": ["n4"],
            "exclude": ["n9"],
            "max_per_segment": {"west": 1, "east": 2},
            "forecast_runs": 200,
        },
    )
    assert job["status"] == "succeeded", job.get("error")
    res = job["result"]
    for seeds in [[s["node_id"] for s in res["seeds"]]] + [
        b["seeds"] for b in res["baselines"].values()
    ]:
        idx = ids_to_idx(seeds)
        assert idx[0] == 4 and len(idx) == 4  # must include, first
        assert all(consent[x] == "true" and x != 9 for x in idx)  # consent and exclusions
        assert (
            sum(segment[x] == "west" for x in idx) <= 1
            and sum(segment[x] == "east" for x in idx) <= 2
        )
    assert res["seeds"][0]["required"] is True and res["seeds"][0]["segment"] == "west"
    assert res["guarantee"]["approximation_formula"] == "1/2 - epsilon"
    assert res["eligible"] == 7 and [w["code"] for w in res["warnings"]] == ["not_contactable"]
    job = await run_shortlist(client, gid, {"cost_budget": 4.0, "forecast_runs": 200})
    assert job["status"] == "succeeded", job.get("error")
    res = job["result"]
    spent = [float(cost[x]) for x in ids_to_idx([s["node_id"] for s in res["seeds"]])]
    assert sum(spent) <= 4.0 and res["total_cost"] == pytest.approx(sum(spent))
    assert [s["cost"] for s in res["seeds"]] == spent
    assert res["guarantee"]["approximation_formula"] == "0.405 - epsilon"
    assert {w["code"] for w in res["warnings"]} == {"not_contactable", "nodes_without_cost"}


async def test_rules_that_cannot_be_met_are_422_problems_naming_the_rule(client) -> None:  # type: ignore[no-untyped-def]
    arcs = [(0, 1, 0.5), (1, 2, 0.5), (2, 3, 0.5), (3, 4, 0.5)]
    gid = await make_graph(
        client,
        arcs,
        "id,segment,consent\nn0,a,true\nn1,a,true\nn2,b,true\nn3,b,false\nn4,a,false\n",
    )
    body = await problem_of(client, gid, {"budget": 4}, "infeasible-request")
    assert body["field"] == "budget" and body["available"] == 3 and "consent" in body["detail"]
    body = await problem_of(client, gid, {"budget": 3, "max_per_segment": 1}, "infeasible-request")
    assert body["field"] == "max_per_segment" and body["available"] == 2
    body = await problem_of(
        client, gid, {"budget": 1, "max_per_segment": {"south": 1}}, "infeasible-request"
    )
    assert body["field"] == "max_per_segment" and body["unknown"] == ["south"]
    body = await problem_of(
        client, gid, {"budget": 2, "must_include": ["n3"]}, "infeasible-request"
    )
    assert body["field"] == "must_include" and body["node_ids"] == ["n3"]
    body = await problem_of(
        client, gid, {"budget": 2, "must_include": ["n0", "ghost"]}, "unknown-node"
    )
    assert (
        body["field"] == "must_include"
        and body["unknown"] == ["ghost"]
        and "'ghost'" in body["detail"]
    )
    body = await problem_of(client, gid, {"budget": 2, "exclude": ["nobody"]}, "unknown-node")
    assert body["field"] == "exclude" and body["unknown"] == ["nobody"]
    body = await problem_of(client, gid, {"cost_budget": 10.0}, "infeasible-request")
    assert body["field"] == "cost_budget" and "no" in body["detail"]
    body = await problem_of(
        client, gid, {"budget": 1, "target_segment": "vip"}, "infeasible-request"
    )
    assert body["field"] == "target_segment"


BAD_PARAMS = [
    ({}, ["params"]),
    ({"budget": 2, "cost_budget": 5.0}, ["params"]),
    ({"budget": 0}, ["params", "budget"]),
    ({"budget": 2, "epsilon": 1.5}, ["params", "epsilon"]),
    ({"budget": 2, "method": "guess"}, ["params", "method"]),
    ({"budget": 2, "time_limit": 5}, ["params"]),
    ({"budget": 2, "probability": {"scheme": "uniform"}}, ["params", "probability"]),
]


async def test_bad_params_are_422_before_queueing(client) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client, [(0, 1, 0.5)])
    for params, loc in BAD_PARAMS:
        r = await client.post(
            f"/v1/graphs/{gid}/jobs", json={"kind": "shortlist", "params": params}
        )
        body = assert_problem(r, 422, "invalid-parameter")
        assert any(e["loc"][: len(loc)] == loc for e in body["errors"]), (params, body["errors"])
    assert (await client.get("/v1/jobs")).json()["items"] == []


async def test_forecast_of_the_shortlist_agrees_with_it(client) -> None:  # type: ignore[no-untyped-def]
    rng = np.random.default_rng(44)
    arcs = random_graph(rng, 10, 14)
    gid = await make_graph(client, arcs)
    job = await run_shortlist(client, gid, {"budget": 2, "random_seed": 6, "forecast_runs": 400})
    assert job["status"] == "succeeded", job
    res = job["result"]
    ev = res["evaluation"]
    assert ev["random_seed"] == 6 and ev["simulations"] >= 400
    assert res["method_used"] == "imm" and res["method_note"] is None
    seeds = [s["node_id"] for s in res["seeds"]]
    # A forecast job of the same people, random_seed and number of simulations runs on the
    # same simulated campaigns: the same mean reach to the last digit.
    r = await client.post(
        f"/v1/graphs/{gid}/jobs",
        json={
            "kind": "forecast",
            "params": {
                **EXPLICIT,
                "seeds": list(reversed(seeds)),
                "random_seed": 6,
                "simulations": ev["simulations"],
                "min_simulations": ev["simulations"],
            },
        },
    )
    assert r.status_code == 202, r.text
    assert await run_worker_once(worker_for(client)) is not None
    fc = (await client.get(f"/v1/jobs/{r.json()['id']}/result")).json()
    assert fc["simulations"] == ev["simulations"]
    assert fc["expected_reach"]["mean"] == res["expected_reach"]["mean"]
    # Every baseline is compared on the same campaigns, with a verdict in whole people.
    assert {c["baseline"] for c in res["comparisons"]} == set(res["baselines"])
    for c in res["comparisons"]:
        d = c["difference"]
        assert d["ci_low"] <= d["mean"] <= d["ci_high"]
        assert c["verdict"].startswith(("The shortlist reaches", "No clear difference"))
        assert c["label"] in c["verdict"]
