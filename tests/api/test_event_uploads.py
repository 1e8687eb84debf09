"""Event tables over HTTP: ``POST /v1/graphs/{id}/versions?part=events`` builds a version whose ties are the
table's projection (and backbone), small tables during the upload, large ones by a ``project_events`` job."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import networkx as nx
import numpy as np
import pytest
from networkx.algorithms import bipartite

from service.usecases import event_graphs
from service.usecases.loading import load_version
from storage.repo import graphs as graph_repo
from tests.conftest import make_settings
from tests.jobs.api_helpers import assert_problem, run_worker_once, worker_for

pytestmark = pytest.mark.anyio
CSV = {"Content-Type": "text/csv"}


@pytest.fixture
def db_url(sqlite_url: str) -> str:
    return sqlite_url


@pytest.fixture
def settings(db_url: str, tmp_path: Path):  # type: ignore[no-untyped-def]
    return make_settings(db_url, tmp_path, upload_max_id_chars=40)


def _davis_rows() -> list[tuple[str, str]]:
    g = nx.davis_southern_women_graph()
    return sorted((w, e) for w, e in g.edges() if g.nodes[w]["bipartite"] == 0)


def _csv(rows: list[tuple[str, str]], header: str = "person,event") -> str:
    return header + "\n" + "".join(f"{p},{e}\n" for p, e in rows)


async def _graph(client: Any, directed: bool = False) -> str:
    r = await client.post("/v1/graphs", json={"name": "tastings", "directed": directed})
    return str(r.json()["id"])


async def _upload(client: Any, gid: str, body: str, status: int = 201, ctype: str = "text/csv",
                  **params: Any) -> dict[str, Any]:
    r = await client.post(f"/v1/graphs/{gid}/versions", params={"part": "events", **params}, content=body,
                          headers={"Content-Type": ctype})
    assert r.status_code == status, r.text
    return dict(r.json())


def _edges(client: Any, gid: str, number: int | None = None) -> dict[tuple[str, str], float]:
    with client.app.state.sessionmaker() as db:
        g = graph_repo.get_graph(db, "default", gid)
        v = load_version(db, graph_repo.get_version(db, g, number))
    return {tuple(sorted((v.ids[a], v.ids[b]))): float(w)  # type: ignore[misc]
            for a, b, w in zip(v.graph.src, v.graph.dst, v.graph.weight)}


@pytest.mark.parametrize("projection", ["newman", "count"])
async def test_davis_upload_matches_networkx(client: Any, projection: str) -> None:
    gid = await _graph(client)
    body = await _upload(client, gid, _csv(_davis_rows()), projection=projection, max_event_size=0)
    g = nx.davis_southern_women_graph()
    women = [n for n, d in g.nodes(data=True) if d["bipartite"] == 0]
    # Source: NetworkX collaboration_weighted_projected_graph (Newman 2001) and weighted_projected_graph.
    ref = (bipartite.collaboration_weighted_projected_graph(g, women) if projection == "newman"
           else bipartite.weighted_projected_graph(g, women))
    want = {tuple(sorted((a, b))): d["weight"] for a, b, d in ref.edges(data=True)}
    got = _edges(client, gid)
    assert got.keys() == want.keys()
    assert all(abs(got[k] - want[k]) < 1e-12 for k in want)
    assert body["nodes"] == 18 and body["edges"] == len(want)
    proj = body["summary"]["projection"]
    assert (proj["method"], proj["rows"], proj["events"], proj["people_without_ties"]) == (projection, 89, 14, 0)


async def test_csv_ndjson_and_json_make_the_same_version(client: Any) -> None:
    rows = _davis_rows()
    ndjson = "".join(json.dumps({"who": p, "tasting": e}) + "\n" for p, e in rows)
    versions = []
    for ctype, text in (("text/csv", _csv(rows, "who,tasting")), ("application/x-ndjson", ndjson),
                        ("application/json", json.dumps({"events": [{"who": p, "tasting": e} for p, e in rows]}))):
        gid = await _graph(client)
        await _upload(client, gid, text, ctype=ctype, person="who", event="tasting", backbone="disparity_filter",
                      alpha=0.3)
        versions.append(_edges(client, gid))
    assert versions[0] == versions[1] == versions[2] and versions[0]


async def test_version_shows_settings_and_statistics_and_append_recomputes(client: Any) -> None:
    rows = _davis_rows()
    gid = await _graph(client)
    await _upload(client, gid, _csv(rows[:50]), backbone="disparity_filter", alpha=0.4, max_event_size=12,
                  oversized="downweight", single_events="skip")
    # Settings left out of the append keep the version's; the result equals one upload of every row.
    await _upload(client, gid, _csv(rows[50:]), mode="append")
    got = (await client.get(f"/v1/graphs/{gid}/versions/2")).json()
    assert got["origin"]["settings"] == {"projection": "newman", "half_life_days": None, "max_event_size": 12,
                                         "oversized": "downweight", "single_events": "skip",
                                         "backbone": "disparity_filter", "alpha": 0.4, "correction": "none"}
    proj, bb = got["summary"]["projection"], got["summary"]["backbone"]
    g = nx.davis_southern_women_graph()
    over = sum(1 for n, d in g.nodes(data=True) if d["bipartite"] == 1 and g.degree(n) > 12)
    assert proj["rows"] == 89 and proj["events_downweighted"] == over == 1 and proj["events_dropped"] == 0
    assert bb["method"] == "disparity_filter" and 0 < bb["edge_share_kept"] < 1 and 0 < bb["weight_share_kept"] <= 1
    assert bb["ties_kept"] == got["edges"] and bb["edge_share_kept"] == round(got["edges"] / bb["ties_tested"], 4)
    whole = await _graph(client)
    await _upload(client, whole, _csv(rows), backbone="disparity_filter", alpha=0.4, max_event_size=12,
                  oversized="downweight", single_events="skip")
    assert _edges(client, gid) == _edges(client, whole)


async def test_bad_input_is_a_422_and_nothing_is_stored(client: Any) -> None:
    gid = await _graph(client)
    ok = _csv([("ann", "t1"), ("bob", "t1")])
    cases = [
        (_csv([("ann", "t1")], "member,event"), {}, "invalid-upload", "person"),
        (_csv([("ann", "t1"), ("bob", "t1"), ("cy", "t2")]), {}, "invalid-parameter", "single_events"),
        (_csv([("x" * 41, "t1"), ("bob", "t1")]), {}, "invalid-upload", "person"),
        (ok, {"projection": "jaccard"}, "invalid-parameter", "projection"),
        (ok, {"mode": "remove"}, "invalid-parameter", "mode"),
        (ok, {"projection": "resource_allocation"}, "invalid-parameter", "projection"),
    ]
    for body, params, slug, where in cases:
        r = await client.post(f"/v1/graphs/{gid}/versions", params={"part": "events", **params}, content=body,
                              headers=CSV)
        problem = assert_problem(r, 422, slug)
        assert where in (problem.get("column"), problem.get("field")), problem
    # Every tie equally strong: none stands out, so the backbone would remove every tie.
    everyone = _csv([(p, f"t{e}") for e in range(4) for p in "abcdef"])
    r = await client.post(f"/v1/graphs/{gid}/versions", params={"part": "events", "backbone": "disparity_filter"},
                          content=everyone, headers=CSV)
    problem = assert_problem(r, 422, "empty-backbone")
    # Source: closed form (1 - 1/5)^(5 - 1) = 0.4096 for equal ties at degree 5 (Serrano et al. 2009).
    assert problem["ties_tested"] == 15 and problem["ties_kept"] == 0 and problem["smallest_p_value"] == 0.4096
    assert (await client.get(f"/v1/graphs/{gid}")).json()["latest_version"] is None
    # Nothing half-done either: the same graph takes a good table as its first version.
    assert (await _upload(client, gid, ok))["number"] == 1


async def test_large_table_runs_as_a_job_that_writes_the_next_version(client: Any,
                                                                      monkeypatch: pytest.MonkeyPatch) -> None:
    rows = _davis_rows()
    small = await _graph(client)
    await _upload(client, small, _csv(rows), backbone="sdsm", alpha=0.2)
    monkeypatch.setattr(event_graphs, "JOB_ROWS", 50)
    gid = await _graph(client)
    first = await _upload(client, gid, _csv(rows), backbone="sdsm", alpha=0.2)
    assert first["edges"] == 0 and first["nodes"] == 18
    job_id = first["summary"]["projection"]["job_id"]
    job = (await client.get(f"/v1/jobs/{job_id}")).json()
    assert job["kind"] == "project_events" and job["status"] == "queued" and job["version"] == 1
    outcome = await run_worker_once(worker_for(client))
    assert outcome is not None and outcome.status == "succeeded", outcome
    result = (await client.get(f"/v1/jobs/{job_id}/result")).json()
    assert result["version_created"] == 2 and result["backbone"]["method"] == "sdsm"
    second = (await client.get(f"/v1/graphs/{gid}/versions/2")).json()
    assert second["edges"] == result["edges"] > 0 and second["origin"]["events_version"] == 1
    assert _edges(client, gid) == _edges(client, small)
    # The projected version is an ordinary version: scores run on it unchanged.
    r = await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "scores", "params": {}})
    assert r.status_code == 202, r.text
    assert (await run_worker_once(worker_for(client))).status == "succeeded"  # type: ignore[union-attr]
    # Appending to the job's version reads the events kept with version 1.
    more = await _upload(client, gid, _csv([("Nora Fayette", "E1"), ("Zoe New", "E1")]), mode="append")
    assert more["number"] == 3 and more["summary"]["projection"]["rows"] == 91


async def test_a_queued_projection_can_be_cancelled(client: Any, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(event_graphs, "JOB_ROWS", 10)
    gid = await _graph(client)
    first = await _upload(client, gid, _csv(_davis_rows()))
    job_id = first["summary"]["projection"]["job_id"]
    r = await client.post(f"/v1/jobs/{job_id}/cancel")
    assert r.status_code in (200, 202), r.text
    assert (await client.get(f"/v1/jobs/{job_id}")).json()["status"] == "cancelled"
    assert (await client.get(f"/v1/graphs/{gid}")).json()["latest_version"] == 1


def _planted(seed: int) -> list[tuple[str, str]]:
    """Ten groups of five meet alone in twelve small events each; all fifty meet in three large ones."""
    rng = np.random.default_rng(seed)
    rows: list[tuple[str, str]] = []
    for g in range(10):
        members = [f"g{g}p{i}" for i in range(5)]
        for e in range(12):
            chosen = rng.choice(members, size=int(rng.integers(3, 6)), replace=False)
            rows += [(str(p), f"g{g}e{e}") for p in chosen]
    everyone = [f"g{g}p{i}" for g in range(10) for i in range(5)]
    rows += [(p, f"big{e}") for e in range(3) for p in everyone]
    return rows


# Newman's weighting with the disparity filter (the large events' ties weigh 1/49 each), and the
# stochastic degree sequence model, which tests the shared-event counts against both degree sequences.
@pytest.mark.parametrize(("backbone", "projection"), [("disparity_filter", "newman"), ("sdsm", "count")])
async def test_planted_groups_survive_and_huge_event_ties_do_not(client: Any, backbone: str,
                                                                 projection: str) -> None:
    gid = await _graph(client)
    body = await _upload(client, gid, _csv(_planted(5)), backbone=backbone, alpha=0.05, max_event_size=0,
                         projection=projection)
    ties = _edges(client, gid)
    same = {k for k in ties if k[0].split("p")[0] == k[1].split("p")[0]}
    # Each group's 10 ties (or most of them) are kept; no tie between groups (met only at the large events) is.
    assert same == set(ties) and len(same) >= 90, (len(same), len(ties))
    assert body["summary"]["projection"]["ties"] == 50 * 49 // 2
    assert body["summary"]["backbone"]["edge_share_kept"] <= 100 / 1225


async def test_large_file_reader_over_http_matches_networkx_and_refuses_like_the_exact_one(
        client: Any, monkeypatch: pytest.MonkeyPatch) -> None:
    # The Arrow reader takes files of FAST_BYTES or more; lowered here so the Davis table takes it.
    from service.intake import _arrow_csv

    monkeypatch.setattr(_arrow_csv, "FAST_BYTES", 0)
    calls: list[int] = []
    real = _arrow_csv.read_string_columns

    def spy(*args: Any, **kwargs: Any) -> Any:
        calls.append(1)
        return real(*args, **kwargs)

    monkeypatch.setattr(_arrow_csv, "read_string_columns", spy)
    gid = await _graph(client)
    await _upload(client, gid, _csv(_davis_rows()), projection="newman", max_event_size=0)
    assert calls  # read by the fast path
    g = nx.davis_southern_women_graph()
    women = [n for n, d in g.nodes(data=True) if d["bipartite"] == 0]
    # Source: NetworkX collaboration_weighted_projected_graph (Newman 2001).
    want = {tuple(sorted((a, b))): d["weight"]
            for a, b, d in bipartite.collaboration_weighted_projected_graph(g, women).edges(data=True)}
    got = _edges(client, gid)
    assert got.keys() == want.keys() and all(abs(got[k] - want[k]) < 1e-12 for k in want)
    # An empty person id on line 3: the fast path hands the file back, the exact reader names the line.
    r = await client.post(f"/v1/graphs/{gid}/versions", params={"part": "events"},
                          content="person,event\nann,t1\n,t1\n", headers=CSV)
    problem = assert_problem(r, 422, "invalid-upload")
    assert problem["line"] == 3 and problem["column"] == "person"
    with client.app.state.sessionmaker() as db:
        assert graph_repo.get_graph(db, "default", gid).latest_version == 1  # nothing stored
