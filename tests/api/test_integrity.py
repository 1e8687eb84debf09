"""Referral integrity over HTTP: both job kinds, their CSV and plot, and the 422s at job creation.

The outside truth is the planted structure (a ring of 10 people who all know each other and
share an address; a referrer with 25 invitees who do not know each other) on a
preferential-attachment graph from NetworkX.
"""

from __future__ import annotations

import csv
import html
import io
import json
from pathlib import Path
from typing import Any

import networkx as nx
import pytest

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
    await run_worker_once(worker_for(client))
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
    drawn = {g["found_in"]: g for g in chart["groups"]}
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
    for job, words in ((elsewhere, "another graph"), (odd, "version 2"), ("j_nobody", "does not exist"),
                       (plain, "name an odd_neighbourhoods or dense_groups job")):
        for kind, params in (("shortlist", {"budget": 3}), ("referral_asks", {"adopters": ["p5"]})):
            r = await client.post(f"/v1/graphs/{gid}/jobs",
                                  json={"kind": kind, "params": {**params, "exclude_flagged": {"job": job}}})
            body = assert_problem(r, 422, "invalid-parameter")
            assert words in body["detail"] and body["field"] == "exclude_flagged", body
    r = await client.post(f"/v1/graphs/{gid}/next-contacts", json={"adopters": ["p5"], "exclude_flagged": {"job": odd}})
    body = assert_problem(r, 422, "invalid-parameter")
    assert "version 2" in body["detail"] and body["field"] == "exclude_flagged", body
