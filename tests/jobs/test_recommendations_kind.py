"""The ``recommendations``, ``referral_asks`` and ``link_evaluation`` job kinds end to end: API, worker, CSV."""

from __future__ import annotations

import csv
import io
from urllib.parse import quote

import networkx as nx
import pytest

from tests.jobs.api_helpers import (
    assert_problem,
    make_graph,
    run_worker_once,
    upload_csv,
    worker_for,
)

pytestmark = pytest.mark.anyio

# Ids a spreadsheet would run as formulas, and ordinary ones.
FORMULAS = {0: "=HYPERLINK(\"x\")", 1: "+1", 2: "-2", 3: "@SUM(A1)", 4: "\tx", 5: "\ry"}


def name(i: int) -> str:
    return FORMULAS.get(i, f"m{i:02d}")


def quoted(s: str) -> str:
    return '"' + s.replace('"', '""') + '"'


async def karate(client) -> tuple[str, nx.Graph]:  # type: ignore[no-untyped-def]
    g = nx.relabel_nodes(nx.karate_club_graph(), name)
    gid = await make_graph(client, csv=None)
    await upload_csv(client, gid, "source,target\n" + "".join(f"{quoted(u)},{quoted(v)}\n" for u, v in g.edges()))
    return gid, g


async def run_job(client, gid: str, kind: str, params: dict) -> dict:  # type: ignore[no-untyped-def]
    r = await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": kind, "params": params})
    assert r.status_code == 202, r.text
    outcome = await run_worker_once(worker_for(client))
    assert outcome is not None and outcome.job_id == r.json()["id"]
    return dict((await client.get(f"/v1/jobs/{outcome.job_id}")).json())


def read_csv(text: str) -> list[list[str]]:
    return list(csv.reader(io.StringIO(text, newline="")))


async def test_recommendations_job_exports_csv_matching_the_live_answer(client) -> None:  # type: ignore[no-untyped-def]
    gid, g = await karate(client)
    job = await run_job(client, gid, "recommendations", {"method": "adamic_adar", "limit": 4})
    assert job["status"] == "succeeded", job["error"]
    result = (await client.get(f"/v1/jobs/{job['id']}/result")).json()
    assert (result["kind"], result["version"], result["people"]) == ("recommendations", 1, 34)
    r = await client.get(f"/v1/jobs/{job['id']}/result.csv")
    assert r.status_code == 200 and r.headers["content-type"].startswith("text/csv")
    assert "attachment" in r.headers["content-disposition"]
    rows = read_csv(r.text)
    header, body = rows[0], rows[1:]
    assert header == result["columns"] and header[:5] == ["node_id", "rank", "candidate_id", "score", "common"]
    assert len(body) == result["rows"] > 0
    unescape = {("'" + v): v for v in FORMULAS.values()}
    # Every cell that would start a formula carries a leading apostrophe, and only those.
    for row in body:
        for cell in (row[0], row[2], *row[5::3]):
            assert not cell.startswith(("=", "+", "-", "@", "\t", "\r"))
            assert not cell.startswith("'") or cell in unescape
    people = {unescape.get(row[0], row[0]) for row in body}
    assert people == set(g.nodes())  # karate is connected: everyone gets someone
    # The batch gives the same answer as the synchronous route.
    person = FORMULAS[0]
    live = (await client.get(f"/v1/graphs/{gid}/nodes/{quote(person, safe='')}/recommendations",
                             params={"limit": 4})).json()["items"]
    mine = [row for row in body if unescape.get(row[0], row[0]) == person]
    assert [unescape.get(row[2], row[2]) for row in mine] == [x["node_id"] for x in live]
    assert [float(row[3]) for row in mine] == pytest.approx([x["score"] for x in live])
    assert [int(row[1]) for row in mine] == list(range(1, len(live) + 1))
    shared = [unescape.get(c, c) for c in mine[0][5::3] if c]
    assert shared == [c["node_id"] for c in live[0]["shared_contacts"]]
    # Source: NetworkX nx.adamic_adar_index, computed here: the CSV scores are the index.
    for row in body[:20]:
        u, v = unescape.get(row[0], row[0]), unescape.get(row[2], row[2])
        assert float(row[3]) == pytest.approx(next(nx.adamic_adar_index(g, [(u, v)]))[2], rel=1e-3)  # 4 digits
    again = await client.get(f"/v1/jobs/{job['id']}/result.csv", headers={"If-None-Match": r.headers["etag"]})
    assert again.status_code == 304


async def test_recommendations_job_for_listed_people_and_consent(client) -> None:  # type: ignore[no-untyped-def]
    gid, g = await karate(client)
    consent = "id,consent\n" + "".join(f"{quoted(v)},{'true' if i < 17 else 'false'}\n" for i, v in enumerate(g.nodes()))
    r = await client.post(f"/v1/graphs/{gid}/versions", params={"part": "nodes", "mode": "append"},
                          content=consent, headers={"Content-Type": "text/csv"})
    assert r.status_code == 201, r.text
    ok = {v for i, v in enumerate(g.nodes()) if i < 17}
    job = await run_job(client, gid, "recommendations", {
        "nodes": ["m33", "m32", "m33"], "contactable": True, "method": "tie_strength", "explain": 0})
    assert job["status"] == "succeeded", job["error"]
    result = (await client.get(f"/v1/jobs/{job['id']}/result")).json()
    assert result["people"] == 2 and result["method"] == "weighted_adamic_adar"
    rows = read_csv((await client.get(f"/v1/jobs/{job['id']}/result.csv")).text)
    assert rows[0] == ["node_id", "rank", "candidate_id", "score", "common"]
    assert {r[0] for r in rows[1:]} == {"m32", "m33"}
    assert {r[2].removeprefix("'") for r in rows[1:]} <= ok
    failed = await run_job(client, gid, "recommendations", {"nodes": ["m07", "nobody"]})
    assert failed["status"] == "failed" and failed["error"]["type"] == "/problems/unknown-node"
    assert failed["error"]["unknown"] == ["nobody"]
    r = await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "recommendations", "params": {"method": "magic"}})
    assert assert_problem(r, 422, "invalid-parameter")["errors"][0]["loc"] == ["params", "method"]
    r = await client.get(f"/v1/jobs/{failed['id']}/result.csv")
    assert_problem(r, 404, "result-not-ready")


async def test_link_evaluation_job_reports_auc_per_method(client) -> None:  # type: ignore[no-untyped-def]
    gid, g = await karate(client)
    params = {"methods": ["adamic_adar", "preferential_attachment", "tie_strength"], "holdout": 0.2,
              "random_seed": 3, "k": 10}
    job = await run_job(client, gid, "link_evaluation", params)
    assert job["status"] == "succeeded", job["error"]
    r = await client.get(f"/v1/jobs/{job['id']}/result")
    result = r.json()
    assert set(result["methods"]) == {"adamic_adar", "preferential_attachment", "weighted_adamic_adar"}
    assert result["best"] in result["methods"] and result["holdout"] == 0.2 and result["random_seed"] == 3
    assert result["hidden"] == round(0.2 * g.number_of_edges())
    for m in result["methods"].values():
        assert 0 <= m["auc"] <= 1 and 0 <= m["precision_at_k"] <= 1
    # Reproducible: the same seed on the same version gives the same document (and ETag).
    twin = await run_job(client, gid, "link_evaluation", params)
    r2 = await client.get(f"/v1/jobs/{twin['id']}/result")
    assert r2.json()["methods"] == result["methods"] and r2.headers["etag"] == r.headers["etag"]
    rows = read_csv((await client.get(f"/v1/jobs/{job['id']}/result.csv")).text)
    assert rows[0] == ["method", "auc", "precision_at_k", "k"] and len(rows) == 4
    aucs = [float(x[1]) for x in rows[1:]]
    assert aucs == sorted(aucs, reverse=True)
    profile = await run_job(client, gid, "profile", {})
    assert_problem(await client.get(f"/v1/jobs/{profile['id']}/result.csv"), 406, "not-acceptable")
    assert_problem(await client.get("/v1/jobs/j_nope/result.csv"), 404, "not-found")


async def test_referral_asks_job_matches_the_grouped_answer(client) -> None:  # type: ignore[no-untyped-def]
    gid, _ = await karate(client)
    adopters = ["m33", "m32", FORMULAS[0], "m08", "m13"]
    settings = {"per_adopter": 2, "probability": {"scheme": "uniform", "p": 0.25}, "follow_on": "degree"}
    live = (await client.post(f"/v1/graphs/{gid}/next-contacts", json={
        "adopters": adopters, "group_by": "adopter", "limit": None, **settings})).json()["groups"]
    job = await run_job(client, gid, "referral_asks", {"adopters": adopters + ["ghost"], "strict": False, **settings})
    assert job["status"] == "succeeded", job["error"]
    result = (await client.get(f"/v1/jobs/{job['id']}/result")).json()
    assert (result["adopters"], result["unknown_adopters"], result["askers"]) == (5, 1, len(live))
    rows = read_csv((await client.get(f"/v1/jobs/{job['id']}/result.csv")).text)
    assert rows[0] == result["columns"] and len(rows) - 1 == result["targets"]
    col = {name: i for i, name in enumerate(rows[0])}
    want = [[grp["adopter"], str(i + 1), t["node_id"], t["reason"]]
            for grp in live for i, t in enumerate(grp["targets"])]
    got = [[r[col["adopter_id"]].removeprefix("'"), r[col["rank"]], r[col["target_id"]].removeprefix("'"),
            r[col["reason"]]] for r in rows[1:]]
    assert got == want
    for r, t in zip(rows[1:], (t for grp in live for t in grp["targets"])):
        assert float(r[col["exposure"]]) == t["exposure"]  # both rounded the same way
        assert float(r[col["tie_strength"]]) == t["ask"]["tie_strength"]
        # Source: closed form, IC with uniform p: 1 - (1 - p)^k over k adopter contacts
        # (four significant digits as sent).
        assert float(r[col["exposure"]]) == pytest.approx(1 - 0.75 ** int(r[col["adopter_contacts"]]), rel=1e-3)
    strict = await run_job(client, gid, "referral_asks", {"adopters": ["m33", "ghost"]})
    assert strict["status"] == "failed" and strict["error"]["unknown"] == ["ghost"]
