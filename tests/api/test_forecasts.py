"""The ``forecast`` job kind over the ASGI app (SQLite): exact spreads, comparisons, bad input.

Exact values come from enumerating every live-edge world of the tiny graphs
(Kempe, Kleinberg and Tardos 2003, Thms 4.5 and 4.6); Monte Carlo estimates
are compared with them within 4 standard errors, with a fixed random seed.
"""

from __future__ import annotations

import itertools
import math
from pathlib import Path
from typing import Any

import pytest

from service.jobs.kinds import JobKind
from service.usecases import forecasts as forecast_kind
from tests.conftest import make_settings
from tests.jobs.api_helpers import assert_problem, run_worker_once, upload_csv, worker_for

pytestmark = pytest.mark.anyio

DIAMOND = [("s", "a"), ("s", "b"), ("a", "t"), ("b", "t")]
POST_TIME_CHECKS = "precheck" in JobKind.__dataclass_fields__  # see forecast.precheck


@pytest.fixture
def db_url(sqlite_url: str) -> str:
    return sqlite_url


@pytest.fixture
def settings(db_url: str, tmp_path: Path):  # type: ignore[no-untyped-def]
    return make_settings(db_url, tmp_path, wait_max_seconds=5.0)


def exact_ic(arcs: list[tuple[str, str, float]], seeds: set[str]) -> tuple[float, dict[str, float], dict[int, float]]:
    """Expected reach, P(node reached) and the law of the reach, over all 2^m live-edge worlds."""
    nodes = sorted({u for u, _, _ in arcs} | {v for _, v, _ in arcs})
    sigma, reached, law = 0.0, dict.fromkeys(nodes, 0.0), {}
    for keep in itertools.product((False, True), repeat=len(arcs)):
        prob = math.prod(p if k else 1 - p for (_, _, p), k in zip(arcs, keep))
        live = [(u, v) for (u, v, _), k in zip(arcs, keep) if k]
        active, frontier = set(seeds), list(seeds)
        while frontier:
            u = frontier.pop()
            for a, b in live:
                if a == u and b not in active:
                    active.add(b)
                    frontier.append(b)
        sigma += prob * len(active)
        law[len(active)] = law.get(len(active), 0.0) + prob
        for v in active:
            reached[v] += prob
    return sigma, reached, law


async def diamond_graph(client, *, nodes_csv: str | None = None, probability: bool = False) -> str:  # type: ignore[no-untyped-def]
    r = await client.post("/v1/graphs", json={"name": "diamond", "directed": True})
    gid = str(r.json()["id"])
    if probability:
        csv = "source,target,probability\ns,a,0.4\ns,b,0.4\na,t,0.5\nb,t,0.5\n"
        r = await client.post(f"/v1/graphs/{gid}/versions", params={"part": "edges", "probability": "probability"},
                              content=csv, headers={"Content-Type": "text/csv"})
        assert r.status_code == 201, r.text
    else:
        await upload_csv(client, gid, "source,target\n" + "".join(f"{u},{v}\n" for u, v in DIAMOND))
    if nodes_csv is not None:
        r = await client.post(f"/v1/graphs/{gid}/versions", params={"part": "nodes", "mode": "append"},
                              content=nodes_csv, headers={"Content-Type": "text/csv"})
        assert r.status_code == 201, r.text
    return gid


async def run_forecast(client, gid: str, params: dict[str, Any]) -> dict[str, Any]:  # type: ignore[no-untyped-def]
    """POST the job, run it with an in-process worker, return the job (and result when it succeeded)."""
    r = await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "forecast", "params": params})
    assert r.status_code == 202, r.text
    outcome = await run_worker_once(worker_for(client))
    assert outcome is not None
    job = (await client.get(f"/v1/jobs/{r.json()['id']}", params={"wait": 5})).json()
    if job["status"] == "succeeded":
        res = await client.get(f"/v1/jobs/{job['id']}/result")
        assert res.status_code == 200
        job["result"] = res.json()
    return dict(job)


async def failed_problem(client, gid: str, params: dict[str, Any], status: int, slug: str) -> dict[str, Any]:  # type: ignore[no-untyped-def]
    """The problem of a version-dependent bad request: a 422 at POST when wired, else the failed job's error."""
    r = await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "forecast", "params": params})
    if POST_TIME_CHECKS:
        return assert_problem(r, status, slug)
    assert r.status_code == 202, r.text
    await run_worker_once(worker_for(client))
    job = (await client.get(f"/v1/jobs/{r.json()['id']}")).json()
    assert job["status"] == "failed" and job["attempts"] == 1, job
    assert job["error"]["type"] == f"/problems/{slug}", job["error"]
    return dict(job["error"])


UNIFORM_HALF = {"probability": {"scheme": "uniform", "p": 0.5}}


async def test_diamond_forecast_matches_enumeration(client) -> None:  # type: ignore[no-untyped-def]
    gid = await diamond_graph(client)
    job = await run_forecast(client, gid, {"seeds": ["s"], **UNIFORM_HALF, "simulations": 20_000,
                                           "min_simulations": 20_000, "random_seed": 11})
    assert job["status"] == "succeeded", job
    res = job["result"]
    sigma, reached, law = exact_ic([(u, v, 0.5) for u, v in DIAMOND], {"s"})
    # Source: REFERENCES.md (derived): diamond, all p: 1 + 2p + 2p^2 - p^4 = 2.4375 at p = 0.5;
    # recomputed here by exact enumeration of all 2^4 live-edge worlds.
    assert sigma == pytest.approx(2.4375)
    er = res["expected_reach"]
    assert abs(er["mean"] - sigma) <= 4 * er["stderr"] + 0.05  # + 0.05: the answer rounds people to one decimal
    assert er["ci_low"] <= er["mean"] <= er["ci_high"] and er["confidence"] == 0.95  # equal once rounded
    # Source: closed form, normal interval of the mean: half-width = z_0.975 * stderr.
    assert er["ci_high"] - er["mean"] == pytest.approx(1.959964 * er["stderr"], abs=0.1)  # one decimal
    assert res["simulations"] == 20_000 and res["stopped_because"] == "simulation_cap"
    # Source: exact enumeration: P(reach = 1) = 0.25 and P(reach = 4) = 0.1875 (> 5%), so p5 = 1, p95 = 4.
    assert law[1] == pytest.approx(0.25) and law[4] == pytest.approx(0.1875)
    pct = res["percentiles"]
    assert list(pct) == ["p5", "p25", "p50", "p75", "p95"] and (pct["p5"], pct["p95"]) == (1.0, 4.0)
    assert list(pct.values()) == sorted(pct.values())
    rounds = res["by_round"]
    assert [b["round"] for b in rounds] == [0, 1, 2] and rounds[0]["cumulative_mean"] == 1.0
    # Source: closed form: round 1 activates each of a, b with probability p, so 2p = 1 new.
    assert abs(rounds[1]["new_mean"] - 1.0) <= 4 * math.sqrt(0.5 / 20_000) + 0.05  # one decimal
    assert rounds[-1]["cumulative_mean"] == pytest.approx(er["mean"])
    assert rounds[-1]["ci_low"] == pytest.approx(er["ci_low"])
    top = {t["node_id"]: t for t in res["top_nodes"]}
    assert set(top) == {"a", "b", "t"}  # seeds are left out by default
    for v, t in top.items():
        # Source: exact enumeration (reached[v] = P(v active)).
        assert abs(t["probability"] - reached[v]) <= 4 * max(t["stderr"], 1e-3), v
    assert res["graph_id"] == gid and res["version"] == 1 and res["random_seed"] == 11
    assert res["params"]["seeds"] == ["s"] and res["model"] == "ic"
    assert res["probability"] == {"scheme": "uniform", "p": 0.5, "q": None}
    assert res["warnings"] == [] and res["target"] is None and "comparison" not in res
    assert [f["name"] for f in res["forecasts"]] == ["seeds"]
    assert res["forecasts"][0]["expected_reach"] == er


async def test_linear_threshold_with_explicit_weights(client) -> None:  # type: ignore[no-untyped-def]
    gid = await diamond_graph(client, probability=True)
    job = await run_forecast(client, gid, {"seeds": ["s"], "model": "lt", "probability": {"scheme": "explicit"},
                                           "simulations": 20_000, "min_simulations": 20_000})
    er = job["result"]["expected_reach"]
    # Source: REFERENCES.md (derived): LT diamond with b(a<-s) = b(b<-s) = w and b(t<-a) = b(t<-b) = 0.5:
    # sigma({s}) = 1 + 3w; w = 0.4 gives 2.2.
    assert abs(er["mean"] - 2.2) <= 4 * er["stderr"]


async def test_seed_sets_comparison(client) -> None:  # type: ignore[no-untyped-def]
    gid = await diamond_graph(client)
    job = await run_forecast(client, gid, {"seed_sets": {"source": ["s"], "sink": ["t"], "middle": ["a"]},
                                           **UNIFORM_HALF, "simulations": 5000, "min_simulations": 5000})
    res = job["result"]
    assert [f["name"] for f in res["forecasts"]] == ["source", "sink", "middle"]
    assert "expected_reach" not in res  # several sets: read forecasts[] and comparison
    by = {f["name"]: f for f in res["forecasts"]}
    # Source: closed form: t has no out-arcs, so its reach is exactly 1; a reaches t with p: 1 + p = 1.5.
    assert by["sink"]["expected_reach"]["mean"] == 1.0 and by["sink"]["expected_reach"]["stderr"] == 0.0
    assert abs(by["middle"]["expected_reach"]["mean"] - 1.5) <= 4 * by["middle"]["expected_reach"]["stderr"]
    cmp = res["comparison"]
    assert cmp["measure"] == "expected_reach" and cmp["ranking"] == ["source", "middle", "sink"]
    pairs = {(p["seed_set"], p["versus"]): p for p in cmp["pairs"]}
    assert set(pairs) == {("source", "sink"), ("source", "middle"), ("sink", "middle")}
    ss = pairs[("source", "sink")]
    # Source: exact enumeration: 2.4375 - 1 = 1.4375. The sets share their campaigns and the
    # sink's reach is 1 in every one, so the paired standard error is the source's own.
    assert abs(ss["difference"] - 1.4375) <= 4 * ss["stderr"] + 0.05  # + 0.05: the answer rounds people to one decimal
    assert ss["stderr"] == pytest.approx(by["source"]["expected_reach"]["stderr"], rel=2e-3)
    assert ss["paired_campaigns"] == 5000 and ss["verdict"].startswith("'source' reaches 1 more people than 'sink'")
    assert ss["ci_low"] > 0 and ss["clearly_different"] is True
    assert pairs[("sink", "middle")]["difference"] < 0


async def test_unknown_and_duplicated_ids(client, monkeypatch) -> None:  # type: ignore[no-untyped-def]
    gid = await diamond_graph(client)
    body = await failed_problem(client, gid, {"seeds": ["s", "zed", "ghost", "zed"]}, 422, "unknown-node")
    assert body["unknown"] == ["zed", "ghost"] and body["unknown_count"] == 2 and body["field"] == "seeds"
    assert "'zed'" in body["detail"]
    body = await failed_problem(client, gid, {"seed_sets": {"ok": ["s"], "bad": ["nope"]}}, 422, "unknown-node")
    assert body["field"] == "seed_sets.bad" and body["unknown"] == ["nope"]
    # The worker checks too, for versions too large to check at creation.
    monkeypatch.setattr(forecast_kind, "PRECHECK_MAX_EDGES", 0)
    job = await run_forecast(client, gid, {"seeds": ["phantom"]})
    assert job["status"] == "failed" and job["error"]["type"] == "/problems/unknown-node"
    assert job["error"]["unknown"] == ["phantom"]
    job = await run_forecast(client, gid, {"seeds": ["s", "a", "s"], **UNIFORM_HALF, "simulations": 300})
    res = job["result"]
    assert res["seed_count"] == 2
    assert res["warnings"] == [{"code": "duplicate_seeds", "seed_set": "seeds", "node_ids": ["s"], "count": 1,
                                "message": "1 id(s) listed more than once; each counts once"}]


@pytest.mark.skipif(not POST_TIME_CHECKS, reason="JobKind.precheck not wired into job creation yet")
async def test_version_checks_answer_at_creation(client) -> None:  # type: ignore[no-untyped-def]
    gid = await diamond_graph(client)
    r = await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "forecast", "params": {"seeds": ["zed"]}})
    assert assert_problem(r, 422, "unknown-node")["unknown"] == ["zed"]
    assert (await client.get("/v1/jobs")).json()["items"] == []  # nothing queued


async def test_seeds_without_consent_warn_or_fail_when_strict(client) -> None:  # type: ignore[no-untyped-def]
    gid = await diamond_graph(client, nodes_csv="id,consent\ns,false\na,true\nb,true\nt,true\n")
    job = await run_forecast(client, gid, {"seeds": ["s", "a"], **UNIFORM_HALF, "simulations": 300})
    assert job["status"] == "succeeded"
    (w,) = job["result"]["warnings"]
    assert (w["code"], w["node_ids"], w["count"]) == ("seeds_without_consent", ["s"], 1)
    body = await failed_problem(client, gid, {"seeds": ["s", "a"], "strict": True}, 422, "infeasible-request")
    assert body["barred"] == ["s"] and body["barred_count"] == 1 and body["field"] == "seeds"


@pytest.mark.parametrize(
    ("params", "loc"),
    [
        ({"seeds": ["s"], "probability": {"scheme": "bogus"}}, ["params", "probability", "scheme"]),
        ({"seeds": ["s"], "probability": {"scheme": "uniform", "p": 1.5}}, ["params", "probability", "p"]),
        ({"seeds": ["s"], "probability": {"scheme": "uniform"}}, ["params", "probability"]),
        ({"seeds": ["s"], "probability": {"scheme": "per_interaction", "p": 0.1}}, ["params", "probability"]),
        ({"seeds": ["s"], "seed_sets": {"x": ["a"]}}, ["params"]),
        ({}, ["params"]),
        ({"seeds": []}, ["params", "seeds"]),
        ({"seeds": ["s"], "simulations": 10**7}, ["params", "simulations"]),
        ({"seeds": ["s"], "confidence": 1.0}, ["params", "confidence"]),
        ({"seeds": ["s"], "model": "sir"}, ["params", "model"]),
        ({"seeds": ["s"], "rounds": 0}, ["params", "rounds"]),
    ],
)
async def test_bad_params_are_422_before_queueing(client, params, loc) -> None:  # type: ignore[no-untyped-def]
    gid = await diamond_graph(client)
    r = await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "forecast", "params": params})
    body = assert_problem(r, 422, "invalid-parameter")
    assert any(e["loc"][: len(loc)] == loc for e in body["errors"]), body["errors"]
    assert (await client.get("/v1/jobs")).json()["items"] == []


async def test_version_dependent_bad_settings(client) -> None:  # type: ignore[no-untyped-def]
    gid = await diamond_graph(client)
    # t has two in-arcs: uniform p = 0.6 sums to 1.2 > 1, not a Linear Threshold weighting.
    body = await failed_problem(client, gid, {"seeds": ["s"], "model": "lt", **{"probability": {"scheme": "uniform",
                                "p": 0.6}}}, 422, "invalid-parameter")
    assert body["field"] == "probability" and "Linear Threshold" in body["detail"]
    body = await failed_problem(client, gid, {"seeds": ["s"], "probability": {"scheme": "explicit"}},
                                422, "invalid-parameter")
    assert body["field"] == "probability.scheme"
    body = await failed_problem(client, gid, {"seeds": ["s"], "target_segment": "vip"}, 422, "invalid-parameter")
    assert body["field"] == "target_segment"


async def test_target_segment_and_value_weights(client) -> None:  # type: ignore[no-untyped-def]
    gid = await diamond_graph(client, nodes_csv="id,segment,value\ns,core,1\na,core,2\nb,edge,0\nt,vip,10\n")
    params = {"seeds": ["s"], **UNIFORM_HALF, "simulations": 20_000, "min_simulations": 20_000}
    sigma, reached, _ = exact_ic([(u, v, 0.5) for u, v in DIAMOND], {"s"})
    res = (await run_forecast(client, gid, {**params, "target_segment": "vip"}))["result"]
    tr = res["target_reach"]
    assert res["target"] == {"segment": "vip", "weights": None, "members": 1}
    # Source: exact enumeration: the target reach of segment {t} is P(t reached) = 0.4375.
    assert reached["t"] == pytest.approx(0.4375) and abs(tr["mean"] - reached["t"]) <= 4 * tr["stderr"] + 0.05
    seg = {s["segment"]: s["expected"] for s in res["segment_reach"]}
    # Each figure is rounded to one decimal on the way out.
    assert seg["vip"] == pytest.approx(tr["mean"], abs=0.05)
    assert sum(seg.values()) == pytest.approx(res["expected_reach"]["mean"], abs=0.05 * (len(seg) + 1))
    res = (await run_forecast(client, gid, {**params, "weights": "value"}))["result"]
    exact_value = 1 + 2 * reached["a"] + 10 * reached["t"]  # Source: exact enumeration, linearity of expectation
    assert abs(res["target_reach"]["mean"] - exact_value) <= 4 * res["target_reach"]["stderr"]


async def test_same_random_seed_same_result(client) -> None:  # type: ignore[no-untyped-def]
    gid = await diamond_graph(client)
    params = {"seeds": ["s"], **UNIFORM_HALF, "simulations": 2000, "random_seed": 5}
    first = (await run_forecast(client, gid, params))["result"]
    again = (await run_forecast(client, gid, params))["result"]
    other = (await run_forecast(client, gid, {**params, "random_seed": 6}))["result"]
    volatile = ("job_id", "created_at")
    assert {k: v for k, v in first.items() if k not in volatile} == {k: v for k, v in again.items() if k not in volatile}
    # The mean is shown to one decimal, so two seeds can print the same mean; the standard
    # error (four significant digits) still tells the two runs apart.
    assert other["expected_reach"] != first["expected_reach"]


async def test_precision_stops_early_or_warns_at_the_cap(client) -> None:  # type: ignore[no-untyped-def]
    gid = await diamond_graph(client)
    res = (await run_forecast(client, gid, {"seeds": ["s"], **UNIFORM_HALF, "precision": 0.05,
                                            "simulations": 200_000}))["result"]
    assert res["stopped_because"] == "precision_reached" and res["half_width"] <= 0.05
    assert 200 <= res["simulations"] < 200_000 and res["warnings"] == []
    res = (await run_forecast(client, gid, {"seeds": ["s"], **UNIFORM_HALF, "relative_precision": 0.001,
                                            "simulations": 500}))["result"]
    assert res["stopped_because"] == "simulation_cap" and res["simulations"] == 500
    assert [w["code"] for w in res["warnings"]] == ["precision_not_reached"]
