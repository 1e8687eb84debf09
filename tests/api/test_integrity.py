"""Referral integrity over HTTP: both job kinds, their CSV and plot, and the 422s at job creation.

The outside truth is the planted structure (a ring of 10 people who all know each other and
share an address; a referrer with 25 invitees who do not know each other) on a
preferential-attachment graph from NetworkX.
"""

from __future__ import annotations

import asyncio
import csv
import html
import io
import json
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import networkx as nx
import pytest

from service.jobs.clock import FakeClock
from tests.conftest import make_settings
from tests.jobs.api_helpers import assert_problem, make_graph, run_worker_once, worker_for

pytestmark = pytest.mark.anyio

RING = [f"r{i}" for i in range(10)]


def edges_csv() -> str:
    G = nx.barabasi_albert_graph(200, 2, seed=9)
    rows = [(f"p{a}", f"p{b}") for a, b in G.edges()]
    rows += [(a, b) for i, a in enumerate(RING) for b in RING[i + 1:]]
    rows += [(RING[0], "p5"), (RING[3], "p17")]
    rows += [("p3", f"invitee{i}") for i in range(25)]
    return "source,target\n" + "".join(f"{a},{b}\n" for a, b in rows)


def nodes_csv() -> str:
    people = [f"p{i}" for i in range(200)] + RING
    return "id,address,signed_up\n" + "".join(
        f"{p},{'9 Quay Street' if p in RING else p + ' Road'},2024-02-0{1 + RING.index(p) % 3 if p in RING else 9}\n"
        for p in people)


@pytest.fixture
def db_url(sqlite_url: str) -> str:
    return sqlite_url


@pytest.fixture
def settings(db_url: str, tmp_path: Path):  # type: ignore[no-untyped-def]
    return make_settings(db_url, tmp_path, wait_max_seconds=5.0)


async def graph(client: Any) -> str:
    gid = await make_graph(client, edges_csv())
    r = await client.post(f"/v1/graphs/{gid}/versions", params={"part": "nodes", "mode": "append"},
                          content=nodes_csv(), headers={"Content-Type": "text/csv"})
    assert r.status_code == 201, r.text
    return gid


async def run(client: Any, gid: str, kind: str, params: dict[str, Any]) -> str:
    r = await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": kind, "params": params})
    assert r.status_code == 202, r.text
    await run_worker_once(worker_for(client, clock=getattr(client.app.state, "clock", None)))
    job = (await client.get(f"/v1/jobs/{r.json()['id']}")).json()
    assert job["status"] == "succeeded", job
    return str(job["id"])


async def test_odd_neighbourhoods_over_http(client: Any) -> None:
    gid = await graph(client)
    jid = await run(client, gid, "odd_neighbourhoods", {"top": 10})
    body = (await client.get(f"/v1/jobs/{jid}/result")).json()
    assert body["kind"] == "odd_neighbourhoods" and "not verdicts" in body["caution"]
    assert len({p["node_id"] for p in body["near_cliques"]} & set(RING)) >= 9
    assert body["near_stars"][0]["node_id"] == "p3"
    contacts = sum("p3" in line.split(",") for line in edges_csv().splitlines()[1:])
    assert body["near_stars"][0]["evidence"].startswith(f"{contacts} contacts with ")
    table = list(csv.reader(io.StringIO((await client.get(f"/v1/jobs/{jid}/result.csv")).text)))
    assert table[0][:3] == ["list", "rank", "node_id"] and len(table) == 21
    r = await client.get(f"/v1/jobs/{jid}/plots/neighbourhood_law.svg")
    assert r.status_code == 200 and r.headers["content-type"].startswith("image/svg+xml")
    assert "Neighbourhoods against the graph" in r.text


async def test_ring_score_is_chosen_over_http(client: Any) -> None:
    # Source: planted structure; the job echoes the ring score it used, and an unknown one is
    # refused naming the field. Two of the ring's members have a contact outside it (p5, p17),
    # which gives the ring its place under separate_circles in this graph without tight groups.
    gid = await graph(client)
    jid = await run(client, gid, "odd_neighbourhoods", {"top": 10, "ring_score": "separate_circles"})
    body = (await client.get(f"/v1/jobs/{jid}/result")).json()
    assert body["params"]["ring_score"] == "separate_circles"
    assert len({p["node_id"] for p in body["near_cliques"]} & set(RING)) >= 9
    r = await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "odd_neighbourhoods",
                                                         "params": {"ring_score": "circles"}})
    assert r.status_code == 422 and "ring_score" in r.text


async def test_dense_groups_over_http(client: Any) -> None:
    gid = await graph(client)
    jid = await run(client, gid, "dense_groups", {"attributes": ["address"], "time_column": "signed_up",
                                                  "window_hours": 72, "groups": 1})
    body = (await client.get(f"/v1/jobs/{jid}/result")).json()
    by = {g["found_in"]: g for g in body["groups"]}
    assert set(by["ties"]["members"]) == set(RING)
    assert by["ties"]["evidence"] == ("10 accounts, 45 of the 45 possible ties among them, all created within "
                                      "2 days, sharing 1 address")  # 1 to 3 February
    assert set(by["address"]["members"]) == set(RING) and by["address"]["shared_values"] == ["9 Quay Street"]
    table = list(csv.reader(io.StringIO((await client.get(f"/v1/jobs/{jid}/result.csv")).text)))
    assert table[0] == ["group", "found_in", "people", "density", "node_id", "label", "evidence"]
    assert len(table) - 1 == sum(g["people"] for g in body["groups"])
    # The whole table's share of possible ties: NetworkX's density of the same graph (nx.density).
    G = nx.parse_edgelist(edges_csv().splitlines()[1:], delimiter=",")
    share = {t["found_in"]: t["share_at_random"] for t in body["searched"]}
    assert share["ties"] == pytest.approx(nx.density(G), rel=1e-3)  # rounded in the answer
    # Addresses: 210 people, 201 distinct addresses, one each (nodes_csv): 210 links of 210 x 201.
    assert share["address"] == pytest.approx(210 / (210 * 201), rel=1e-3)
    r = await client.get(f"/v1/jobs/{jid}/plots/group_density.svg")
    assert r.status_code == 200 and r.headers["content-type"].startswith("image/svg+xml")
    chart = json.loads(html.unescape(r.text.split('<desc id="chart-data">')[1].split("</desc>")[0]))
    drawn = {g["found_in"]: g for g in chart["series"]}
    assert drawn.keys() == by.keys() and drawn["address"]["evidence_kind"] == "sharing address"
    assert drawn["ties"]["share_present"] == 1.0 and set(drawn["ties"]["members"]) == set(RING)
    for g in body["groups"]:  # every group is named on the picture
        assert f"group {g['rank']}: {g['people']} people" in r.text
    assert "Flags are leads for a person to review, not verdicts." in r.text


async def test_refusals_at_job_creation(client: Any) -> None:
    gid = await graph(client)
    cases = [
        ("dense_groups", {"attributes": ["device"]}, "no node column 'device'", "attributes"),
        ("dense_groups", {"time_column": "address"}, "'p0 Road' for 'p0'", "time_column"),
        ("dense_groups", {"ties": False}, "nothing to search", "ties"),
        ("odd_neighbourhoods", {"min_people": 500}, "lower min_people", "min_people"),
    ]
    for kind, params, words, field in cases:
        r = await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": kind, "params": params})
        body = assert_problem(r, 422, "invalid-parameter")
        assert words in body["detail"] and body["field"] == field, body
    r = await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "dense_groups", "params": {"groups": 0}})
    assert r.status_code == 422 and "groups" in r.text


async def test_shortlists_and_referral_asks_exclude_flagged_people(client: Any) -> None:
    gid = await graph(client)
    odd = await run(client, gid, "odd_neighbourhoods", {"top": 10})
    flagged = {p["node_id"] for k in ("near_cliques", "near_stars")
               for p in (await client.get(f"/v1/jobs/{odd}/result")).json()[k]}
    assert "p3" in flagged  # the planted referrer with 25 invitees, the best-connected person
    plain = await run(client, gid, "shortlist", {"budget": 3, "method": "top_degree", "baselines": [],
                                                 "forecast_runs": 100, "evaluation_samples": 1000})
    assert "p3" in {s["node_id"] for s in (await client.get(f"/v1/jobs/{plain}/result")).json()["seeds"]}
    rule = {"job": odd}
    sid = await run(client, gid, "shortlist", {"budget": 3, "method": "top_degree", "baselines": [],
                                               "forecast_runs": 100, "evaluation_samples": 1000,
                                               "exclude_flagged": rule})
    body = (await client.get(f"/v1/jobs/{sid}/result")).json()
    assert not {s["node_id"] for s in body["seeds"]} & flagged
    note = next(w for w in body["warnings"] if w["code"] == "excluded_flagged")
    assert note["count"] == len(flagged) and odd in note["message"]
    stored = body["params"]["exclude_flagged"]
    assert set(stored["node_ids"]) == flagged and stored["lists"] == ["near_cliques", "near_stars"]

    dense = await run(client, gid, "dense_groups", {"groups": 1})
    members = set((await client.get(f"/v1/jobs/{dense}/result")).json()["groups"][0]["members"])
    rid = await run(client, gid, "referral_asks", {"adopters": ["r0", "p5", "p17"], "strict": False,
                                                   "exclude_flagged": {"job": dense}})
    asks = list(csv.reader(io.StringIO((await client.get(f"/v1/jobs/{rid}/result.csv")).text)))[1:]
    assert asks and not ({row[0] for row in asks} | {row[3] for row in asks}) & members
    body = (await client.get(f"/v1/jobs/{rid}/result")).json()
    assert body["warnings"][0]["code"] == "excluded_flagged" and body["warnings"][0]["count"] == len(members)
    r = await client.post(f"/v1/graphs/{gid}/next-contacts", json={
        "adopters": ["r0", "p5", "p17"], "strict": False, "group_by": "adopter", "exclude_flagged": {"job": dense}})
    assert r.status_code == 200, r.text
    page = r.json()
    listed = {g["adopter"] for g in page["groups"]} | {t["node_id"] for g in page["groups"] for t in g["targets"]}
    assert listed and not listed & members and page["warnings"][0]["code"] == "excluded_flagged"

    other = await graph(client)
    elsewhere = await run(client, other, "odd_neighbourhoods", {})
    await client.post(f"/v1/graphs/{gid}/versions", params={"part": "edges", "mode": "append"},
                      content="source,target\np1,p2\n", headers={"Content-Type": "text/csv"})
    newer = await run(client, gid, "odd_neighbourhoods", {"top": 10})  # on version 2
    for job, words, version in ((elsewhere, "another graph", None), (newer, "newer than version 1", 1),
                                ("j_nobody", "does not exist", None),
                                (plain, "name an odd_neighbourhoods or dense_groups job", None)):
        for kind, params in (("shortlist", {"budget": 3}), ("referral_asks", {"adopters": ["p5"]})):
            r = await client.post(f"/v1/graphs/{gid}/jobs", json={
                "kind": kind, "version": version, "params": {**params, "exclude_flagged": {"job": job}}})
            body = assert_problem(r, 422, "invalid-parameter")
            assert words in body["detail"] and body["field"] == "exclude_flagged", body
    r = await client.post(f"/v1/graphs/{gid}/next-contacts",
                          json={"adopters": ["p5"], "version": 1, "exclude_flagged": {"job": newer}})
    body = assert_problem(r, 422, "invalid-parameter")
    assert "newer than version 1" in body["detail"] and body["field"] == "exclude_flagged", body
    # A job of an older version of the same graph is read: everyone it flagged is still in version 2.
    r = await client.post(f"/v1/graphs/{gid}/next-contacts", json={"adopters": ["p5"], "exclude_flagged": {"job": odd}})
    assert r.status_code == 200, r.text
    note = r.json()["warnings"][0]
    odd_version = (await client.get(f"/v1/jobs/{odd}")).json()["version"]
    assert odd_version == r.json()["version"] - 1  # the edge appended above made the newest version
    assert note["count"] == len(flagged) and note["flagged_version"] == odd_version and note["ignored"] == 0


async def test_schedules_read_the_flagging_job_each_time_they_fire(client: Any) -> None:
    """A scheduled shortlist with exclude_flagged reads the named job when it fires, on the newest version.

    The outside truth is the planted ring (RING): three of its members are removed in a new version,
    so a rule naming the older job leaves out the other seven and ignores those three.
    """
    clock = FakeClock(datetime(2030, 3, 1, 9, 0, tzinfo=UTC))
    client.app.state.clock = clock
    gid = await graph(client)
    worker = worker_for(client, clock=clock)
    dense = await run(client, gid, "dense_groups", {"groups": 1})  # version 1: the ring, found among ties
    ring = set((await client.get(f"/v1/jobs/{dense}/result")).json()["groups"][0]["members"])
    assert ring == set(RING)
    v = (await client.get(f"/v1/jobs/{dense}")).json()["version"]  # edges, then the nodes' columns
    shortlist = {"budget": 3, "method": "top_degree", "baselines": [], "forecast_runs": 100,
                 "evaluation_samples": 1000}

    async def schedule(params: dict[str, Any], version: int | None = None) -> str:
        r = await client.post("/v1/schedules", json={"graph_id": gid, "cron": "0 * * * *", "timezone": "UTC",
                                                     "job": {"kind": "shortlist", "params": params,
                                                             "version": version}})
        assert r.status_code == 201, r.text
        return str(r.json()["id"])

    # What can never become right is refused when the schedule is created.
    other = await graph(client)
    elsewhere = await run(client, other, "odd_neighbourhoods", {})
    for job, words in (("j_nobody", "does not exist"), (elsewhere, "another graph"),
                       (dense, "has no list 'near_stars'")):
        rule = {"job": job, **({"lists": ["near_stars"]} if job == dense else {})}
        r = await client.post("/v1/schedules", json={"graph_id": gid, "cron": "0 * * * *", "timezone": "UTC",
                                                     "job": {"kind": "shortlist",
                                                             "params": {**shortlist, "exclude_flagged": rule}}})
        body = assert_problem(r, 422, "invalid-parameter")
        assert words in body["detail"] and body["field"] == "exclude_flagged", body

    # A rule naming a job still queued: that firing's job fails with the problem; the next one reads it.
    r = await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "odd_neighbourhoods", "params": {"top": 10}})
    pending = r.json()["id"]
    waiting = await schedule({**shortlist, "exclude_flagged": {"job": pending}})
    following = await schedule({**shortlist, "exclude_flagged": {"job": dense}})
    r = await client.post("/v1/schedules", json={"graph_id": gid, "cron": "0 * * * *", "timezone": "UTC", "job": {
        "kind": "referral_asks", "params": {"adopters": ["r0", "p5", "p17"], "strict": False,
                                            "exclude_flagged": {"job": dense}}}})
    asking = r.json()["id"]
    clock.set(datetime(2030, 3, 1, 10, 0, 1, tzinfo=UTC))
    await asyncio.to_thread(worker.housekeep, purge=False)
    [failed] = (await client.get("/v1/jobs", params={"schedule_id": waiting})).json()["items"]
    failed = (await client.get(f"/v1/jobs/{failed['id']}")).json()
    assert failed["status"] == "failed" and failed["error"]["type"] == "/problems/invalid-parameter", failed
    assert "is queued; wait until it has succeeded" in failed["error"]["detail"]
    assert failed["error"]["field"] == "exclude_flagged"
    while (outcome := await run_worker_once(worker)) is not None:  # the odd_neighbourhoods job and a shortlist
        assert outcome.status == "succeeded"
    [first] = (await client.get("/v1/jobs", params={"schedule_id": following})).json()["items"]
    body = (await client.get(f"/v1/jobs/{first['id']}/result")).json()
    assert set(body["params"]["exclude_flagged"]["node_ids"]) == ring and body["version"] == v
    assert not {s["node_id"] for s in body["seeds"]} & ring
    [asks] = (await client.get("/v1/jobs", params={"schedule_id": asking})).json()["items"]
    assert asks["status"] == "succeeded"
    rows = list(csv.reader(io.StringIO((await client.get(f"/v1/jobs/{asks['id']}/result.csv")).text)))[1:]
    assert rows and not ({row[0] for row in rows} | {row[3] for row in rows}) & ring

    # The next version drops three ring members (and their ties); the schedules follow it.
    gone = RING[:3]
    r = await client.post(f"/v1/graphs/{gid}/versions", params={"part": "nodes", "mode": "remove"},
                          content="id\n" + "".join(f"{p}\n" for p in gone), headers={"Content-Type": "text/csv"})
    assert r.status_code == 201 and r.json()["number"] == v + 1, r.text
    pinned = await schedule({**shortlist, "exclude_flagged": {"job": pending}}, version=v)
    newer = await run(client, gid, "odd_neighbourhoods", {"top": 10})  # on the new version
    too_new = await schedule({**shortlist, "exclude_flagged": {"job": newer}}, version=v)
    clock.set(datetime(2030, 3, 1, 11, 0, 1, tzinfo=UTC))
    await asyncio.to_thread(worker.housekeep, purge=False)
    while (outcome := await run_worker_once(worker)) is not None:
        assert outcome.status == "succeeded"
    latest = (await client.get(f"/v1/schedules/{following}/latest")).json()
    assert latest["version"] == v + 1
    rule = latest["params"]["exclude_flagged"]
    assert set(rule["node_ids"]) == ring - set(gone) and rule["flagged_version"] == v and rule["ignored"] == 3
    note = next(w for w in latest["warnings"] if w["code"] == "excluded_flagged")
    assert note["count"] == 7 and note["ignored"] == 3
    assert f"made on version {v}; 3 people it flagged are no longer in this version and were ignored" in note["message"]
    assert not {s["node_id"] for s in latest["seeds"]} & ring
    assert (await client.get(f"/v1/schedules/{waiting}/latest")).json()["params"]["exclude_flagged"]["job"] == pending
    assert (await client.get(f"/v1/schedules/{pinned}/latest")).json()["version"] == v
    [refused] = (await client.get("/v1/jobs", params={"schedule_id": too_new})).json()["items"]
    refused = (await client.get(f"/v1/jobs/{refused['id']}")).json()
    assert refused["status"] == "failed" and f"newer than version {v} " in refused["error"]["detail"], refused
    # The scheduler went on: every schedule's next run is the following hour.
    for sid in (waiting, following, asking, pinned, too_new):
        assert (await client.get(f"/v1/schedules/{sid}")).json()["next_run_at"] == "2030-03-01T12:00:00Z"
