"""Introductions, next contacts and referral asks over the ASGI app, on SQLite and PostgreSQL."""

from __future__ import annotations

import math
from pathlib import Path
from urllib.parse import quote

import networkx as nx
import pytest

from tests.api.test_graphs import make_graph, upload
from tests.conftest import make_settings

pytestmark = pytest.mark.anyio

PROBLEM = "application/problem+json"
BODY_LIMIT = 64 * 1024
METHODS = [
    "adamic_adar", "resource_allocation", "jaccard", "common_neighbours",
    "preferential_attachment", "personalized_pagerank", "weighted_adamic_adar",
]
# Awkward ids on purpose: spaces, a slash (sent as %2F), non-ASCII, a leading '='.
SPECIAL = {0: "Mr Hi/0", 33: "Officer é", 5: "=member 05"}


@pytest.fixture
def settings(db_url: str, tmp_path: Path):  # type: ignore[no-untyped-def]
    return make_settings(db_url, tmp_path, max_body_bytes=BODY_LIMIT)


def name(i: int) -> str:
    return SPECIAL.get(i, f"member {i:02d}")


def path_of(gid: str, node: str) -> str:
    return f"/v1/graphs/{gid}/nodes/{quote(node, safe='')}/recommendations"


def assert_problem(r, status: int, slug: str) -> dict:  # type: ignore[no-untyped-def]
    assert r.status_code == status, r.text
    assert r.headers["content-type"] == PROBLEM
    body = r.json()
    assert body["type"] == f"/problems/{slug}" and body["status"] == status and body["detail"]
    return body


async def karate(client) -> tuple[str, nx.Graph]:  # type: ignore[no-untyped-def]
    g = nx.relabel_nodes(nx.karate_club_graph(), name)
    gid = await make_graph(client)
    csv = "source,target\n" + "".join(f'"{u}","{v}"\n' for u, v in g.edges())
    r = await upload(client, gid, csv)
    assert r.status_code == 201, r.text
    return gid, g


async def test_every_method_answers_with_non_neighbours_best_first(client) -> None:  # type: ignore[no-untyped-def]
    gid, g = await karate(client)
    person = "Mr Hi/0"
    for method in METHODS + ["tie_strength"]:
        r = await client.get(path_of(gid, person), params={"method": method, "limit": 5})
        assert r.status_code == 200, (method, r.text)
        body = r.json()
        assert body["node_id"] == person and body["version"] == 1 and body["graph_id"] == gid
        assert body["method"] == ("weighted_adamic_adar" if method == "tie_strength" else method)
        items = body["items"]
        assert 1 <= len(items) <= 5, method
        scores = [x["score"] for x in items]
        assert scores == sorted(scores, reverse=True)
        for x in items:
            assert x["node_id"] != person and not g.has_edge(person, x["node_id"])
    # Source: NetworkX's link-prediction functions on the same pairs, computed in this test.
    nx_fn = {
        "resource_allocation": nx.resource_allocation_index,
        "jaccard": nx.jaccard_coefficient,
        "preferential_attachment": nx.preferential_attachment,
    }
    for method, fn in nx_fn.items():
        items = (await client.get(path_of(gid, person), params={"method": method, "limit": 5})).json()["items"]
        expected = {v: s for _, v, s in fn(g, [(person, x["node_id"]) for x in items])}
        for x in items:
            assert x["score"] == pytest.approx(expected[x["node_id"]], rel=1e-3), method  # answers carry four significant digits
        best = max(s for _, _, s in fn(g, [(person, v) for v in nx.non_neighbors(g, person)]))
        assert items[0]["score"] == pytest.approx(best, rel=1e-3), method
    cn = (await client.get(path_of(gid, person), params={"method": "common_neighbours"})).json()["items"]
    for x in cn:
        assert x["score"] == len(list(nx.common_neighbors(g, person, x["node_id"])))


async def test_top_adamic_adar_equals_networkx_argmax(client) -> None:  # type: ignore[no-untyped-def]
    gid, g = await karate(client)
    for person in ["Mr Hi/0", "Officer é", "member 07", "member 24"]:
        items = (await client.get(path_of(gid, person), params={"limit": 10})).json()["items"]
        # Source: NetworkX nx.adamic_adar_index over the person's non-neighbours, computed here.
        ref = sorted(
            ((s, v) for _, v, s in nx.adamic_adar_index(g, [(person, v) for v in nx.non_neighbors(g, person)])
             if s > 0),
            key=lambda t: -t[0],
        )
        top = ref[0][0]
        assert items[0]["score"] == pytest.approx(top, rel=1e-3)  # answers carry four significant digits
        assert items[0]["node_id"] in {v for s, v in ref if math.isclose(s, top)}
        assert [x["score"] for x in items] == pytest.approx([s for s, _ in ref[: len(items)]], rel=1e-3)


async def test_shared_contacts_are_common_neighbours(client) -> None:  # type: ignore[no-untyped-def]
    gid, g = await karate(client)
    person = "Officer é"
    items = (await client.get(path_of(gid, person), params={"limit": 20, "explain": 5})).json()["items"]
    assert items
    for x in items:
        common = set(nx.common_neighbors(g, person, x["node_id"]))  # Source: NetworkX, computed here.
        assert x["common"] == len(common)
        shared = [c["node_id"] for c in x["shared_contacts"]]
        assert len(shared) == min(5, len(common)) and set(shared) <= common
        weakest = [min(c["tie_to_person"], c["tie_to_candidate"]) for c in x["shared_contacts"]]
        assert weakest == sorted(weakest, reverse=True)
        assert all(0 <= c["tie_to_person"] <= 1 and 0 <= c["tie_to_candidate"] <= 1 for c in x["shared_contacts"])
    none = (await client.get(path_of(gid, person), params={"explain": 0})).json()["items"]
    assert all(x["shared_contacts"] == [] for x in none)


async def test_contactable_filter_and_etag(client) -> None:  # type: ignore[no-untyped-def]
    gid, g = await karate(client)
    consent = "id,consent\n" + "".join(f'"{v}",{"true" if i % 2 == 0 else "false"}\n' for i, v in enumerate(g.nodes()))
    assert (await upload(client, gid, consent, part="nodes", mode="append")).status_code == 201
    yes = {v for i, v in enumerate(g.nodes()) if i % 2 == 0}
    person = "Mr Hi/0"
    everyone = (await client.get(path_of(gid, person), params={"limit": 30})).json()["items"]
    assert any(x["node_id"] not in yes for x in everyone)
    r = await client.get(path_of(gid, person), params={"limit": 30, "contactable": "true"})
    body = r.json()
    assert body["contactable"] is True and body["version"] == 2
    assert body["items"] and {x["node_id"] for x in body["items"]} <= yes
    assert [x["node_id"] for x in body["items"]] == [x["node_id"] for x in everyone if x["node_id"] in yes]
    # Immutable per version and parameters: the ETag revalidates; other parameters differ.
    etag = r.headers["etag"]
    again = await client.get(path_of(gid, person), params={"limit": 30, "contactable": "true"},
                             headers={"If-None-Match": etag})
    assert again.status_code == 304 and again.headers["etag"] == etag and again.content == b""
    v1 = await client.get(path_of(gid, person), params={"limit": 30, "contactable": "true", "version": 1},
                          headers={"If-None-Match": etag})
    assert v1.status_code == 200 and v1.headers["etag"] != etag


async def test_bad_requests_are_problems(client) -> None:  # type: ignore[no-untyped-def]
    gid, _ = await karate(client)
    body = assert_problem(await client.get(path_of(gid, "nobody here")), 404, "not-found")
    assert body["id"] == "nobody here" and "nobody here" in body["detail"]
    # An unencoded slash is two path segments, not part of the id.
    assert_problem(await client.get(f"/v1/graphs/{gid}/nodes/Mr Hi/0/recommendations"), 404, "not-found")
    assert_problem(await client.get(path_of(gid, "Mr Hi/0"), params={"method": "astrology"}), 422, "validation-error")
    assert_problem(await client.get(path_of(gid, "Mr Hi/0"), params={"limit": 0}), 422, "validation-error")
    assert_problem(await client.get(path_of(gid, "Mr Hi/0"), params={"version": "x"}), 422, "invalid-parameter")
    assert_problem(await client.get(path_of(gid, "Mr Hi/0"), params={"version": 7}), 404, "not-found")
    assert_problem(await client.get(path_of("g_nope", "Mr Hi/0")), 404, "not-found")


def tiny_graph() -> nx.Graph:
    """Adopters a, b; c touches both, d one, e one adopter and c; f only non-adopters."""
    return nx.Graph([("a", "c"), ("b", "c"), ("a", "d"), ("b", "e"), ("c", "e"), ("e", "f"), ("a", "b")])


async def upload_tiny(client, consent: str | None = None) -> str:  # type: ignore[no-untyped-def]
    gid = await make_graph(client)
    csv = "source,target\n" + "".join(f"{u},{v}\n" for u, v in tiny_graph().edges())
    assert (await upload(client, gid, csv)).status_code == 201
    if consent is not None:
        assert (await upload(client, gid, consent, part="nodes", mode="append")).status_code == 201
    return gid


async def test_next_contacts_exposure_is_the_ic_closed_form(client) -> None:  # type: ignore[no-untyped-def]
    gid = await upload_tiny(client)
    g, adopters, p = tiny_graph(), {"a", "b"}, 0.3
    r = await client.post(f"/v1/graphs/{gid}/next-contacts", json={
        "adopters": ["a", "b", "a"], "limit": None, "probability": {"scheme": "uniform", "p": p}})
    assert r.status_code == 200, r.text
    body = r.json()
    assert body["adopters"] == 2 and body["model"] == "ic" and body["unknown_adopters"] is None
    got = {x["node_id"]: x for x in body["items"]}
    for v in g.nodes():
        k = sum(1 for u in g.neighbors(v) if u in adopters)
        if v in adopters or k == 0:
            assert v not in got
            continue
        # Source: closed form of the Independent Cascade model (Kempe et al. 2003), uniform p:
        # 1 - prod over adopter neighbours (1 - p) = 1 - (1 - p)^k.
        assert got[v]["exposure"] == pytest.approx(1 - (1 - p) ** k)
        assert got[v]["adopter_contacts"] == k
        assert got[v]["ask"]["node_id"] in adopters and g.has_edge(got[v]["ask"]["node_id"], v)
        assert got[v]["ask"]["probability"] == pytest.approx(p)
        assert got[v]["reason"].startswith(f"{k} adopter")
    assert body["items"][0]["node_id"] == "c"  # two adopters in contact
    # Linear Threshold, normalised weights: exposure = adopters' share of v's incoming weight.
    r = await client.post(f"/v1/graphs/{gid}/next-contacts", json={
        "adopters": ["a", "b"], "model": "lt", "probability": {"scheme": "normalized"}, "limit": None})
    lt = {x["node_id"]: x["exposure"] for x in r.json()["items"]}
    for v, e in lt.items():
        # Source: closed form, LT with b_uv = 1 / deg(v) (unit weights): k / deg(v).
        assert e == pytest.approx(sum(1 for u in g.neighbors(v) if u in adopters) / g.degree(v), rel=1e-3)


async def test_referral_asks_assign_each_target_once(client) -> None:  # type: ignore[no-untyped-def]
    gid, g = await karate(client)
    adopters = ["Mr Hi/0", "Officer é", "member 01", "member 32", "member 02"]
    flat = (await client.post(f"/v1/graphs/{gid}/next-contacts", json={"adopters": adopters, "limit": None})).json()
    r = await client.post(f"/v1/graphs/{gid}/next-contacts", json={
        "adopters": adopters, "group_by": "adopter", "per_adopter": 3, "limit": None})
    assert r.status_code == 200, r.text
    groups = r.json()["groups"]
    assert groups and r.json()["group_by"] == "adopter"
    seen: list[str] = []
    asks = {x["node_id"]: x["ask"]["node_id"] for x in flat["items"]}
    for grp in groups:
        assert grp["adopter"] in adopters and 1 <= len(grp["targets"]) <= 3
        # People to one decimal, exposures to four significant digits.
        assert grp["expected_referrals"] == pytest.approx(sum(t["exposure"] for t in grp["targets"]), abs=0.06)
        for t in grp["targets"]:
            assert t["ask"]["node_id"] == grp["adopter"] == asks[t["node_id"]]
            assert g.has_edge(grp["adopter"], t["node_id"]) and t["node_id"] not in adopters
        seen += [t["node_id"] for t in grp["targets"]]
    assert len(seen) == len(set(seen))
    totals = [grp["expected_referrals"] for grp in groups]
    assert totals == sorted(totals, reverse=True)


async def test_csv_body_and_options_as_query(client) -> None:  # type: ignore[no-untyped-def]
    gid, _ = await karate(client)
    adopters = ["Mr Hi/0", "Officer é", "=member 05"]
    want = (await client.post(f"/v1/graphs/{gid}/next-contacts", json={
        "adopters": adopters, "limit": 7, "follow_on": "pagerank", "probability": {"scheme": "uniform", "p": 0.2}}))
    csv = "name,id\r\n" + "".join(f'x,"{a}"\r\n' for a in adopters) + "\r\n"
    got = await client.post(f"/v1/graphs/{gid}/next-contacts", content=csv.encode(),
                            params={"limit": 7, "follow_on": "pagerank", "scheme": "uniform", "p": 0.2},
                            headers={"Content-Type": "text/csv"})
    assert got.status_code == 200, got.text
    assert got.json() == want.json() and len(got.json()["items"]) == 7
    assert got.json()["blend"] == 0.5 and "onward reach (pagerank)" in got.json()["items"][0]["reason"]
    renamed = await client.post(f"/v1/graphs/{gid}/next-contacts", content="who\nMr Hi/0\n",
                                params={"id": "who", "limit": "all"}, headers={"Content-Type": "text/csv"})
    assert renamed.status_code == 200 and len(renamed.json()["items"]) > 7
    r = await client.post(f"/v1/graphs/{gid}/next-contacts", content="person\nMr Hi/0\n",
                          headers={"Content-Type": "text/csv"})
    assert "'id'" in assert_problem(r, 422, "invalid-parameter")["detail"]
    r = await client.post(f"/v1/graphs/{gid}/next-contacts", content="id\n", headers={"Content-Type": "text/csv"})
    assert_problem(r, 422, "validation-error")
    r = await client.post(f"/v1/graphs/{gid}/next-contacts", json={"adopters": ["Mr Hi/0"]}, params={"limit": 3})
    assert_problem(r, 422, "invalid-parameter")
    r = await client.post(f"/v1/graphs/{gid}/next-contacts", content="<a/>", headers={"Content-Type": "application/xml"})
    assert_problem(r, 415, "unsupported-media-type")


async def test_unknown_empty_and_oversized_adopter_lists(client) -> None:  # type: ignore[no-untyped-def]
    gid, _ = await karate(client)
    url = f"/v1/graphs/{gid}/next-contacts"
    r = await client.post(url, json={"adopters": ["Mr Hi/0", "ghost 1", "ghost 2", "ghost 1"]})
    body = assert_problem(r, 422, "unknown-node")
    assert body["field"] == "adopters" and body["unknown"] == ["ghost 1", "ghost 2"] and body["unknown_count"] == 2
    assert "ghost 1" in body["detail"]
    r = await client.post(url, json={"adopters": ["Mr Hi/0", "ghost 1"], "strict": False})
    assert r.status_code == 200 and r.json()["unknown_adopters"] == {"count": 1, "examples": ["ghost 1"]}
    assert r.json()["adopters"] == 1
    body = assert_problem(await client.post(url, json={"adopters": []}), 422, "validation-error")
    assert body["errors"][0]["loc"] == ["body", "adopters"]
    assert_problem(await client.post(url, json={"adopters": ["Mr Hi/0"], "colour": 1}), 422, "validation-error")
    assert_problem(await client.post(url, json={"adopters": ["Mr Hi/0"], "probability": {"scheme": "uniform"}}),
                   422, "validation-error")
    r = await client.post(url, json={"adopters": ["Mr Hi/0"], "probability": {"scheme": "explicit"}})
    assert assert_problem(r, 422, "invalid-parameter")["field"] == "probability.scheme"
    big = {"adopters": [f"person {i:06d}" for i in range(BODY_LIMIT // 10)]}
    body = assert_problem(await client.post(url, json=big), 413, "payload-too-large")
    assert body["limit"] == BODY_LIMIT


async def test_consent_is_honoured_for_targets_and_askers(client) -> None:  # type: ignore[no-untyped-def]
    # d and f refuse; b (an adopter) refuses to be asked; unknown consent counts as no.
    gid = await upload_tiny(client, "id,consent\na,true\nb,false\nc,true\nd,false\ne,true\n")
    r = await client.post(f"/v1/graphs/{gid}/next-contacts", json={"adopters": ["a", "b"], "limit": None})
    items = {x["node_id"]: x for x in r.json()["items"]}
    assert set(items) == {"c", "e"}  # d said no, f unknown, and f is not exposed anyway
    assert items["c"]["ask"]["node_id"] == "a" and items["c"]["adopter_contacts"] == 2
    assert items["e"]["ask"] is None and "no adopter in contact may be asked" in items["e"]["reason"]
    r = await client.post(f"/v1/graphs/{gid}/next-contacts", json={"adopters": ["a", "b"], "group_by": "adopter"})
    groups = r.json()["groups"]
    assert [(g["adopter"], [t["node_id"] for t in g["targets"]]) for g in groups] == [("a", ["c"])]
