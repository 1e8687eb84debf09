"""Rankings, the node view and communities over the ASGI app, from ``scores`` jobs on karate.

Zachary's karate club (nx.karate_club_graph(): 34 members, 78 weighted ties,
the 'club' split as segments) is uploaded as CSV with ids chosen to test
string ordering, Unicode, an encoded slash and spreadsheet formulas; the
scores job runs in-process (``Worker.run_once``). Invented for these tests:
the consent flags and labels.
"""

from __future__ import annotations

import csv
import io
from collections.abc import AsyncIterator
from pathlib import Path
from typing import Any
from urllib.parse import quote

import httpx
import networkx as nx
import numpy as np
import pytest
from scipy.stats import percentileofscore

from service.usecases import _ranking_tables as R
from service.analytics.structure.centrality import MEASURES
from tests.conftest import make_settings
from tests.jobs.api_helpers import assert_problem, run_worker_once, worker_for

pytestmark = pytest.mark.anyio

TOL = 1e-6
# Answers carry four significant digits (the rounding rule of every answer): at most 5e-4 relative.
SIG4 = 5.0001e-4
SPECIAL = {0: '=HYPERLINK("http://evil.example","x")', 1: "-1+2", 2: "zoë/ø", 3: "@ops"}
IDS = [SPECIAL.get(i, f"m{i}") for i in range(34)]  # "m10" < "m4": string order, not numeric
RANKED = [m for m in MEASURES if m != "community"]


@pytest.fixture
async def sq_client(sqlite_url: str, tmp_path: Path) -> AsyncIterator[httpx.AsyncClient]:
    """The app on SQLite only, for checks that do not depend on the database."""
    from service.app import create_app
    from service.usecases.loading import clear_cache

    app = create_app(make_settings(sqlite_url, tmp_path))
    transport = httpx.ASGITransport(app=app)
    async with app.router.lifespan_context(app), httpx.AsyncClient(transport=transport, base_url="http://t") as c:
        c.app = app  # type: ignore[attr-defined]
        yield c
    clear_cache()
    R.clear_cache()


def karate() -> nx.Graph:
    G = nx.karate_club_graph()  # Zachary 1977; 'weight' = interaction counts 1..7
    for _, _, d in G.edges(data=True):
        d["dist"] = 1.0 / d["weight"]
        # Betweenness is unchanged by scaling lengths; integer lengths 420/w (420 = lcm 1..7)
        # keep NetworkX's exact float comparison of path sums from missing ties.
        d["idist"] = 420 // d["weight"]
    return G


def consent(i: int) -> bool:
    return i % 3 != 0


def _csv(rows: list[list[Any]]) -> str:
    buf = io.StringIO()
    csv.writer(buf, lineterminator="\n").writerows(rows)
    return buf.getvalue()


async def upload_karate(client: httpx.AsyncClient) -> str:
    G = karate()
    r = await client.post("/v1/graphs", json={"name": "karate", "directed": False})
    gid = str(r.json()["id"])
    edges = _csv([["source", "target", "weight"]] + [[IDS[u], IDS[v], d["weight"]] for u, v, d in G.edges(data=True)])
    r = await client.post(f"/v1/graphs/{gid}/versions", content=edges, params={"weight": "weight"},
                          headers={"Content-Type": "text/csv"})
    assert r.status_code == 201, r.text
    nodes = _csv([["id", "segment", "consent", "label"]]
                 + [[IDS[i], G.nodes[i]["club"], str(consent(i)).lower(), f"Member {i + 1}"] for i in G])
    r = await client.post(f"/v1/graphs/{gid}/versions", content=nodes, params={"part": "nodes", "mode": "append"},
                          headers={"Content-Type": "text/csv"})
    assert r.status_code == 201, r.text
    return gid


async def run_scores(client: httpx.AsyncClient, gid: str, **params: Any) -> str:
    r = await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "scores", "params": params})
    assert r.status_code == 202, r.text
    outcome = await run_worker_once(worker_for(client))
    assert outcome is not None and outcome.status == "succeeded", outcome
    return str(r.json()["id"])


async def ranking(client: httpx.AsyncClient, gid: str, **params: Any) -> dict[str, Any]:
    r = await client.get(f"/v1/graphs/{gid}/rankings", params={"limit": 1000, **params})
    assert r.status_code == 200, r.text
    return dict(r.json())


def by_id(values: dict[int, float]) -> dict[str, float]:
    return {IDS[i]: float(v) for i, v in values.items()}


def expected_scores(G: nx.Graph) -> dict[str, dict[str, float]]:
    """Source: NetworkX on nx.karate_club_graph(), computed here; normalisations as the result states."""
    hub, auth = nx.hits(G, max_iter=100000, tol=1e-14)  # reads 'weight'; each sums to 1
    deg = dict(G.degree())
    strength = dict(G.degree(weight="weight"))
    return {
        "degree": deg, "in_degree": deg, "out_degree": deg,  # raw counts
        "strength": strength, "in_strength": strength, "out_strength": strength,  # sums of weights
        "pagerank": nx.pagerank(G, alpha=0.85, weight="weight", tol=1e-12),  # sums to 1
        "eigenvector": nx.eigenvector_centrality_numpy(G, weight="weight"),  # unit Euclidean norm
        "hub": hub, "authority": auth,
        # normalized=True: over (n-1)(n-2)/2 pairs; lengths 1/w (scaled, see karate()).
        "betweenness": nx.betweenness_centrality(G, normalized=True, weight="idist"),
        "harmonic": nx.harmonic_centrality(G, distance="dist"),  # sum of 1/d, d in 1/w units
        "coreness": nx.core_number(G),
        "clustering": nx.clustering(G),  # unweighted
        "constraint": nx.constraint(G, weight="weight"),
    }


async def test_scores_job_end_to_end_matches_networkx(client) -> None:  # type: ignore[no-untyped-def]
    gid = await upload_karate(client)
    jid = await run_scores(client, gid, measures=list(MEASURES))
    result = (await client.get(f"/v1/jobs/{jid}/result")).json()
    assert list(result["measures"]) == list(MEASURES) and result["nodes"] == 34 and result["edges"] == 78
    assert result["measures"]["betweenness"]["method"] == "exact"
    assert result["measures"]["constraint"]["ranking"] == "lowest first"
    assert result["arrays"]["order.pagerank"] == {"dtype": "<i4", "length": 34}
    G = karate()
    expect = expected_scores(G)
    for m in RANKED:
        page = await ranking(client, gid, measure=m)
        assert page["job_id"] == jid and page["total"] == 34 and page["next_cursor"] is None
        assert "normalization" in page["meta"]
        got = {it["node_id"]: it["score"] for it in page["items"]}
        want = by_id(expect[m])
        assert got == pytest.approx(want, rel=SIG4, abs=TOL), m
        # Best first (lowest first for constraint): the shown scores never go the wrong way.
        sign = 1.0 if m == "constraint" else -1.0
        shown = [sign * -it["score"] for it in page["items"]]
        assert shown == sorted(shown, reverse=True), m
        # Source: scipy.stats.percentileofscore(kind="mean"), the mid-rank percentile, of
        # NetworkX's values (to 9 digits, so float noise between equal scores is not a rank).
        values = {s: round(sign * -v, 9) for s, v in want.items()}
        for it in page["items"]:
            p = percentileofscore(list(values.values()), values[it["node_id"]], kind="mean")
            assert it["percentile"] == pytest.approx(p, rel=SIG4, abs=1e-3), m
    # Communities: Leiden's modularity equals NetworkX's on the returned partition.
    comm = (await client.get(f"/v1/graphs/{gid}/communities", params={"top": 3})).json()
    partition = []
    for c in comm["items"]:
        members = (await ranking(client, gid, measure="degree", community=c["community"]))["items"]
        assert len(members) == c["size"]
        partition.append({IDS.index(it["node_id"]) for it in members})
    assert sorted(map(len, partition), reverse=True) == [c["size"] for c in comm["items"]]
    assert set().union(*partition) == set(G)
    # Source: nx.community.modularity (Newman 2006) of the same partition, with the weights.
    assert comm["modularity"] == pytest.approx(nx.community.modularity(G, partition, weight="weight"), abs=1e-9)
    assert comm["modularity"] >= 0.40  # best known partition of karate is about 0.42 (from memory)
    # The job result's figures carry four significant digits.
    assert result["communities"] == {"count": len(partition), "modularity": pytest.approx(comm["modularity"], rel=1e-3)}
    for c, part in zip(comm["items"], partition):
        sub = G.subgraph(part)
        # Source: nx.density of the community's subgraph.
        assert c["internal_edges"] == sub.number_of_edges()
        assert c["density"] == pytest.approx(nx.density(sub), rel=SIG4)
        top = sorted(part, key=lambda i: (-G.degree(i), IDS[i]))[:3]
        assert [t["node_id"] for t in c["top_members"]] == [IDS[i] for i in top]
        assert [t["label"] for t in c["top_members"]] == [f"Member {i + 1}" for i in top]


async def test_pagination_filters_etag_and_pinned_cursor(client) -> None:  # type: ignore[no-untyped-def]
    gid = await upload_karate(client)
    jid = await run_scores(client, gid, measures=["coreness", "pagerank", "community"])
    core = by_id(nx.core_number(karate()))  # Source: NetworkX core_number; many ties
    seen: list[dict[str, Any]] = []
    cursor = None
    etags = set()
    while True:
        r = await client.get(f"/v1/graphs/{gid}/rankings",
                             params={"measure": "coreness", "limit": 5, **({"cursor": cursor} if cursor else {})})
        assert r.status_code == 200 and r.json()["job_id"] == jid
        etags.add(r.headers["etag"])
        seen += r.json()["items"]
        cursor = r.json()["next_cursor"]
        if not cursor:
            break
    assert len(etags) == 7  # one per page
    assert [it["rank"] for it in seen] == list(range(1, 35))
    assert [it["node_id"] for it in seen] == sorted(IDS, key=lambda s: (-core[s], s))
    # Filters: segment and consent, vectorised, equal the full ranking filtered by hand.
    full = (await ranking(client, gid, measure="pagerank"))["items"]
    G = karate()
    club = {IDS[i]: G.nodes[i]["club"] for i in G}
    page = await ranking(client, gid, measure="pagerank", segment="Officer", contactable="true")
    want = [it["node_id"] for it in full if club[it["node_id"]] == "Officer" and consent(IDS.index(it["node_id"]))]
    assert [it["node_id"] for it in page["items"]] == want and page["total"] == len(want)
    assert [it["rank"] for it in page["items"]] == list(range(1, len(want) + 1))
    assert all(it["segment"] == "Officer" and it["contactable"] for it in page["items"])
    page = await ranking(client, gid, measure="pagerank", contactable="false")
    assert page["total"] == sum(not consent(i) for i in range(34))
    both = await ranking(client, gid, measure="pagerank", segment=["Officer", "Mr. Hi"])
    assert both["total"] == 34
    r = await client.get(f"/v1/graphs/{gid}/rankings", params={"measure": "pagerank", "segment": "Nobody"})
    assert "Mr. Hi" in assert_problem(r, 422, "invalid-parameter")["detail"]
    # ETag per result and query; If-None-Match -> 304 with no body.
    url, q = f"/v1/graphs/{gid}/rankings", {"measure": "pagerank", "limit": 3}
    first = await client.get(url, params=q)
    again = await client.get(url, params=q, headers={"If-None-Match": first.headers["etag"]})
    assert again.status_code == 304 and again.content == b"" and again.headers["etag"] == first.headers["etag"]
    other = await client.get(url, params={**q, "contactable": "true"})
    assert other.headers["etag"] != first.headers["etag"]
    # A newer scores job: new ETag; an old cursor keeps paging the result it came from.
    old_cursor = first.json()["next_cursor"]
    newer = await run_scores(client, gid, measures=["pagerank"], damping=0.5)
    latest = await client.get(url, params=q, headers={"If-None-Match": first.headers["etag"]})
    assert latest.status_code == 200 and latest.json()["job_id"] == newer
    cont = await client.get(url, params={**q, "cursor": old_cursor})
    assert cont.json()["job_id"] == jid and cont.json()["items"][0]["rank"] == 4
    assert [it["node_id"] for it in cont.json()["items"]] == [it["node_id"] for it in full[3:6]]
    # The newest result lacks coreness: coreness still comes from the older one.
    assert (await ranking(client, gid, measure="coreness"))["job_id"] == jid
    r = await client.get(url, params={"measure": "coreness", "cursor": old_cursor})
    assert "another query" in assert_problem(r, 422, "invalid-parameter")["detail"]


async def test_csv_export_neutralises_formulas(sq_client) -> None:  # type: ignore[no-untyped-def]
    client = sq_client
    gid = await upload_karate(client)
    await run_scores(client, gid, measures=["degree", "community"])
    r = await client.get(f"/v1/graphs/{gid}/rankings", params={"measure": "degree", "format": "csv"})
    assert r.status_code == 200 and r.headers["content-type"].startswith("text/csv")
    assert "attachment" in r.headers["content-disposition"] and r.headers["etag"]
    rows = list(csv.reader(io.StringIO(r.text)))
    assert rows[0] == ["rank", "node_id", "score", "percentile", "segment", "contactable", "label", "community"]
    assert len(rows) == 35
    cells = {row[1] for row in rows[1:]}
    # Source: OWASP "CSV Injection": prefix cells starting with = + - @ tab CR with an apostrophe.
    assert "'" + SPECIAL[0] in cells and "'-1+2" in cells and "'@ops" in cells and "zoë/ø" in cells
    assert not any(c.startswith(("=", "+", "-", "@")) for row in rows for c in row)
    deg = by_id(dict(karate().degree()))
    assert [float(row[2]) for row in rows[1:]] == sorted(deg.values(), reverse=True)
    json_page = await ranking(client, gid, measure="degree")
    assert [row[1].removeprefix("'") for row in rows[1:]] == [it["node_id"] for it in json_page["items"]]
    r2 = await client.get(f"/v1/graphs/{gid}/rankings", params={"measure": "degree", "format": "csv"},
                          headers={"If-None-Match": r.headers["etag"]})
    assert r2.status_code == 304
    filtered = await client.get(f"/v1/graphs/{gid}/rankings",
                                params={"measure": "degree", "format": "csv", "contactable": "true"})
    assert len(list(csv.reader(io.StringIO(filtered.text)))) == 1 + sum(consent(i) for i in range(34))


async def test_composite_ranking_is_the_documented_formula(sq_client) -> None:  # type: ignore[no-untyped-def]
    client = sq_client
    gid = await upload_karate(client)
    await run_scores(client, gid, measures=["pagerank", "betweenness", "degree", "constraint"])
    weights = {"pagerank": 0.5, "betweenness": 0.3, "degree": 0.2}
    page = await ranking(client, gid, measure="composite", weights="pagerank:0.5,betweenness:0.3,degree:0.2")
    assert page["weights"] == weights and "formula" in page["meta"]
    G = karate()
    exp = expected_scores(G)
    # Hand computation: sum_m w_m p_m / sum_m w_m with p_m = percentileofscore(kind="mean")
    # of NetworkX's values (Source: NetworkX + SciPy, computed here).
    pct = {m: {IDS[i]: percentileofscore(list(exp[m].values()), exp[m][i], kind="mean") for i in G} for m in weights}
    comp = {s: sum(w * pct[m][s] for m, w in weights.items()) / sum(weights.values()) for s in IDS}
    got = {it["node_id"]: it["score"] for it in page["items"]}
    assert got == pytest.approx(comp, rel=SIG4, abs=1e-3)
    order = sorted(IDS, key=lambda s: (-round(comp[s], 6), s))
    assert [it["node_id"] for it in page["items"]] == order
    # constraint enters by its ranking direction: the lowest constraint has the top percentile.
    page = await ranking(client, gid, measure="composite", weights="constraint:1")
    low = min(exp["constraint"], key=lambda i: exp["constraint"][i])
    assert page["items"][0]["node_id"] == IDS[low]
    for bad in ["pagerank", "pagerank:0", "pagerank:x", "fame:1", "community:1", "pagerank:1,pagerank:2"]:
        r = await client.get(f"/v1/graphs/{gid}/rankings", params={"measure": "composite", "weights": bad})
        assert assert_problem(r, 422, "invalid-parameter")["field"] == "weights", bad
    r = await client.get(f"/v1/graphs/{gid}/rankings", params={"measure": "composite", "weights": "harmonic:1"})
    assert "harmonic" in assert_problem(r, 404, "result-not-ready")["detail"]


async def test_node_endpoint(client) -> None:  # type: ignore[no-untyped-def]
    gid = await upload_karate(client)
    r = await client.get(f"/v1/graphs/{gid}/nodes/m5")
    assert r.status_code == 200 and r.json()["scores"] == {} and r.json()["job_id"] is None
    jid = await run_scores(client, gid, measures=["degree", "pagerank", "constraint", "community"])
    G = karate()
    url = f"/v1/graphs/{gid}/nodes/" + quote(IDS[2], safe="")  # "zoë/ø" -> zo%C3%AB%2F%C3%B8
    assert "%2F" in url
    r = await client.get(url)
    assert r.status_code == 200, r.text
    node = r.json()
    assert node["node_id"] == "zoë/ø" and node["job_id"] == jid and node["version"] == 2
    assert node["attributes"] == {"segment": G.nodes[2]["club"], "region": None, "consent": consent(2),
                                  "contactable": consent(2), "cost": None, "value": None, "label": "Member 3",
                                  "extra": {}}
    assert node["degree"] == G.degree(2) and node["in_degree"] is None  # Source: NetworkX G.degree
    pr = nx.pagerank(G, alpha=0.85, weight="weight", tol=1e-12)  # Source: NetworkX
    assert node["scores"]["pagerank"]["score"] == pytest.approx(pr[2], rel=SIG4)
    full = (await ranking(client, gid, measure="pagerank"))["items"]
    mine = next(it for it in full if it["node_id"] == "zoë/ø")
    assert node["scores"]["pagerank"]["rank"] == mine["rank"]
    assert node["scores"]["pagerank"]["percentile"] == mine["percentile"]
    assert set(node["scores"]) == {"degree", "pagerank", "constraint"}
    members = (await ranking(client, gid, measure="degree", community=node["community"]["community"]))["items"]
    assert node["community"]["size"] == len(members) and "zoë/ø" in {it["node_id"] for it in members}
    r = await client.get(f"/v1/graphs/{gid}/nodes/" + quote(IDS[0], safe=""))
    assert r.status_code == 200 and r.json()["node_id"] == SPECIAL[0]
    r = await client.get(f"/v1/graphs/{gid}/nodes/m5", params={"version": 1})
    assert r.json()["version"] == 1 and r.json()["job_id"] is None  # scores ran on version 2
    assert "nobody" in assert_problem(await client.get(f"/v1/graphs/{gid}/nodes/nobody"), 404, "not-found")["detail"]
    assert_problem(await client.get(f"/v1/graphs/{gid}/nodes/zo%C3%AB/%C3%B8"), 404, "not-found")  # raw slash
    assert_problem(await client.get(f"/v1/graphs/{gid}/nodes/m5", params={"version": 7}), 404, "not-found")
    assert_problem(await client.get("/v1/graphs/g_none/nodes/m5"), 404, "not-found")


async def test_problems(sq_client) -> None:  # type: ignore[no-untyped-def]
    client = sq_client
    gid = await upload_karate(client)
    url = f"/v1/graphs/{gid}/rankings"
    body = assert_problem(await client.get(url, params={"measure": "pagerank"}), 404, "result-not-ready")
    assert "run one" in body["detail"] and '"kind": "scores"' in body["detail"]
    assert_problem(await client.get(f"/v1/graphs/{gid}/communities"), 404, "result-not-ready")
    r = await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "scores", "params": {"measures": ["fame"]}})
    assert "pagerank" in assert_problem(r, 422, "invalid-parameter")["detail"]
    for params in [{"damping": 1.0}, {"betweenness": "guess"}, {"personalization": {}},
                   {"personalization": {"nodes": ["m1"], "attribute": "value"}}, {"colour": 1}]:
        r = await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "scores", "params": params})
        assert_problem(r, 422, "invalid-parameter")
    assert (await client.get("/v1/jobs")).json()["items"] == []  # nothing queued
    await run_scores(client, gid, measures=["degree"])
    body = assert_problem(await client.get(url, params={"measure": "fame"}), 422, "invalid-parameter")
    assert body["field"] == "measure" and "pagerank" in body["detail"] and "composite" in body["expected"]
    assert "label" in assert_problem(await client.get(url, params={"measure": "community"}), 422,
                                     "invalid-parameter")["detail"]
    body = assert_problem(await client.get(url, params={"measure": "pagerank"}), 404, "result-not-ready")
    assert "pagerank" in body["detail"]
    assert_problem(await client.get(url, params={"measure": "degree", "community": 0}), 404, "result-not-ready")
    assert_problem(await client.get(url, params={"measure": "degree", "cursor": "garbage"}), 422,
                   "invalid-parameter")
    assert_problem(await client.get(url, params={"measure": "degree", "version": "x"}), 422, "invalid-parameter")
    assert_problem(await client.get(url, params={"measure": "degree", "version": 9}), 404, "not-found")
    assert_problem(await client.get(url, params={"measure": "degree", "limit": 0}), 422, "validation-error")
    assert_problem(await client.get(url, params={"measure": "degree", "weights": "degree:1"}), 422,
                   "invalid-parameter")
    assert_problem(await client.get("/v1/graphs/g_none/rankings"), 404, "not-found")
    # Unknown personalization ids are refused at creation, naming the id; nothing is queued.
    r = await client.post(f"/v1/graphs/{gid}/jobs",
                          json={"kind": "scores", "params": {"personalization": {"nodes": ["m5", "ghost"]}}})
    body = assert_problem(r, 422, "unknown-node")
    assert body["node_id"] == "ghost"
    assert all(j["params"].get("personalization") is None for j in (await client.get("/v1/jobs")).json()["items"])


# -- the pure helpers of the ranking tables ---------------------------------------------


def test_percentiles_orders_and_helpers() -> None:
    rng = np.random.default_rng(3)
    v = rng.integers(0, 6, 200).astype(float)
    v[[5, 17]] = np.nan
    ids = [f"n{i}" for i in range(200)]
    by = R.id_order(ids)
    assert [ids[i] for i in by] == sorted(ids)
    order = R.ranking_order(v, by)
    ok = ~np.isnan(v)
    want = sorted(np.flatnonzero(ok), key=lambda i: (-v[i], ids[i])) + sorted(np.flatnonzero(~ok), key=ids.__getitem__)
    assert order.tolist() == want
    pct = R.percentile_ranks(v, order)
    # Source: scipy.stats.percentileofscore(kind="mean") over the defined values.
    assert np.allclose(pct[ok], [percentileofscore(v[ok], x, kind="mean") for x in v[ok]], atol=1e-4)
    assert np.isnan(pct[~ok]).all()
    asc = R.ranking_order(v, by, ascending=True)
    assert v[asc[0]] == np.nanmin(v) and np.isnan(v[asc[-1]])
    assert R.safe_cell("=1+1") == "'=1+1" and R.safe_cell("\tx") == "'\tx" and R.safe_cell("\rx") == "'\rx"
    assert R.safe_cell("a=b") == "a=b" and R.safe_cell(None) is None
    c = R.encode_cursor("j_1", 40, "abc")
    assert R.decode_cursor(c) == ("j_1", 40, "abc", None)
    assert R.decode_cursor(R.encode_cursor("j_1", 40, "abc", "v_2")) == ("j_1", 40, "abc", "v_2")
    with pytest.raises(ValueError):
        R.decode_cursor("bm90IGpzb24")
    with pytest.raises(ValueError):
        R.parse_weights("pagerank:-1", ["pagerank"])


# -- scores reused after an attribute-only upload --------------------------------------


async def upload_nodes(client: httpx.AsyncClient, gid: str, body: str) -> dict[str, Any]:
    r = await client.post(f"/v1/graphs/{gid}/versions", content=body, params={"part": "nodes", "mode": "append"},
                          headers={"Content-Type": "text/csv"})
    assert r.status_code == 201, r.text
    return dict(r.json())


async def test_opt_out_keeps_rankings_filtered_by_the_new_consent(client) -> None:  # type: ignore[no-untyped-def]
    gid = await upload_karate(client)  # version 1 edges, version 2 attributes
    jid = await run_scores(client, gid, measures=["pagerank", "community"])
    before = await ranking(client, gid, measure="pagerank", contactable="true")
    assert (before["version"], before["scores_version"]) == (2, 2)
    out = "m4"
    assert consent(4) and out in {it["node_id"] for it in before["items"]}
    v3 = await upload_nodes(client, gid, f"id,consent\n{out},no\n")
    assert v3["number"] == 3 and v3["warnings"] == []
    # Source: the same result filtered by the new consent, so exactly the old list without m4.
    after = await ranking(client, gid, measure="pagerank", contactable="true")
    assert (after["version"], after["scores_version"], after["job_id"]) == (3, 2, jid)
    assert [it["node_id"] for it in after["items"]] == [it["node_id"] for it in before["items"] if it["node_id"] != out]
    assert after["total"] == before["total"] - 1
    full = await ranking(client, gid, measure="pagerank")
    m4 = next(it for it in full["items"] if it["node_id"] == out)
    assert m4["contactable"] is False
    # The version-2 view is unchanged, and the two views have different ETags.
    url, q = f"/v1/graphs/{gid}/rankings", {"measure": "pagerank", "contactable": "true", "limit": 5}
    assert (await ranking(client, gid, measure="pagerank", contactable="true", version=2))["items"] == before["items"]
    old = await client.get(url, params={**q, "version": 2})
    new = await client.get(url, params=q)
    assert new.headers["etag"] != old.headers["etag"]
    # Paging keeps showing version 3's people.
    seen, cursor = [], None
    while True:
        r = await client.get(url, params={**q, **({"cursor": cursor} if cursor else {})})
        assert r.status_code == 200 and r.json()["version"] == 3, r.text
        seen += [it["node_id"] for it in r.json()["items"]]
        cursor = r.json()["next_cursor"]
        if not cursor:
            break
    assert seen == [it["node_id"] for it in after["items"]]
    # The node view and the communities read the same result for version 3.
    node = (await client.get(f"/v1/graphs/{gid}/nodes/{out}")).json()
    assert (node["version"], node["scores_version"], node["job_id"]) == (3, 2, jid)
    assert node["attributes"]["contactable"] is False and node["scores"]["pagerank"]["rank"] == m4["rank"]
    comms = (await client.get(f"/v1/graphs/{gid}/communities")).json()
    assert (comms["version"], comms["scores_version"]) == (3, 2)
    # New edges: nothing to reuse, until scores run again.
    r = await client.post(f"/v1/graphs/{gid}/versions", content="source,target\nm4,m9\n", params={"mode": "append"},
                          headers={"Content-Type": "text/csv"})
    assert r.status_code == 201, r.text
    assert_problem(await client.get(url, params=q), 404, "result-not-ready")


async def test_new_person_or_attribute_based_scores_are_not_reused(client) -> None:  # type: ignore[no-untyped-def]
    gid = await upload_karate(client)
    await run_scores(client, gid, measures=["pagerank"])
    # A node file naming someone new adds a person: the node set changes, so do the scores.
    v3 = await upload_nodes(client, gid, "id,consent\nnewcomer,yes\n")
    assert v3["warnings"][0]["ids"] == ["newcomer"]
    r = await client.get(f"/v1/graphs/{gid}/rankings", params={"measure": "pagerank"})
    assert_problem(r, 404, "result-not-ready")
    # PageRank jumping by an attribute depends on the attributes: never reused.
    await upload_nodes(client, gid, "id,value\nm1,2\nm2,1\n")  # version 4
    r = await client.post(f"/v1/graphs/{gid}/jobs", json={
        "kind": "scores", "params": {"measures": ["pagerank"], "personalization": {"attribute": "value"}}})
    assert r.status_code == 202, r.text
    outcome = await run_worker_once(worker_for(client))
    assert outcome is not None and outcome.status == "succeeded"
    await upload_nodes(client, gid, "id,consent\nm1,no\n")  # version 5: same edges as version 4
    r = await client.get(f"/v1/graphs/{gid}/rankings", params={"measure": "pagerank"})
    assert_problem(r, 404, "result-not-ready")
    plain = await run_scores(client, gid, measures=["pagerank"])  # runs on version 5 itself
    assert (await ranking(client, gid, measure="pagerank"))["job_id"] == plain


async def test_first_opt_out_on_a_graph_without_consent_data(client) -> None:  # type: ignore[no-untyped-def]
    # Edges alone at first: everyone is contactable until consent data arrives;
    # from the first opt-out on, only an explicit yes counts, and the upload says so.
    G = karate()
    r = await client.post("/v1/graphs", json={"name": "karate", "directed": False})
    gid = str(r.json()["id"])
    edges = _csv([["source", "target", "weight"]] + [[IDS[u], IDS[v], d["weight"]] for u, v, d in G.edges(data=True)])
    r = await client.post(f"/v1/graphs/{gid}/versions", content=edges, headers={"Content-Type": "text/csv"})
    assert r.status_code == 201, r.text
    jid = await run_scores(client, gid, measures=["pagerank"])
    assert (await ranking(client, gid, measure="pagerank", contactable="true"))["total"] == 34
    v2 = await upload_nodes(client, gid, "id,consent\nm4,no\n")
    (warning,) = v2["warnings"]
    assert warning["code"] == "unknown_consent" and warning["count"] == 33 and len(warning["ids"]) == 20
    page = await ranking(client, gid, measure="pagerank", contactable="true")
    assert (page["version"], page["scores_version"], page["job_id"], page["total"]) == (2, 1, jid, 0)
    out = await ranking(client, gid, measure="pagerank", contactable="false")
    assert out["total"] == 34 and "m4" in {it["node_id"] for it in out["items"]}
    # Consent for everyone else: all but the opted-out person are contactable again, same scores.
    v3 = await upload_nodes(client, gid, _csv([["id", "consent"]] + [[i, "yes"] for i in IDS if i != "m4"]))
    assert v3["warnings"] == []
    page = await ranking(client, gid, measure="pagerank", contactable="true")
    assert (page["version"], page["scores_version"], page["total"]) == (3, 1, 33)
    assert "m4" not in {it["node_id"] for it in page["items"]}
