"""The introductions, next-contacts and link-evaluation use cases, called directly on a real SQLite file."""

from __future__ import annotations

import math
from collections.abc import Iterator

import networkx as nx
import numpy as np
import pytest
from sqlalchemy.orm import Session, sessionmaker

from service.analytics.errors import InvalidParameter, UnknownNode
from service.analytics.graph import GraphArrays, NodeAttributes
from service.usecases.diffusion_settings import ProbabilitySettings
from service.usecases.loading import LoadedVersion, clear_cache, load_version, version_arrays
from service.usecases import link_evaluation as evaluation
from service.usecases import next_contacts as contacts
from service.usecases import recommendations as introductions
from storage.db import make_engine, make_sessionmaker
from storage.errors import NotFound
from storage.repo import graphs as graph_repo

TENANT = "t1"


@pytest.fixture
def maker(sqlite_url: str) -> Iterator[sessionmaker[Session]]:
    engine = make_engine(sqlite_url)
    yield make_sessionmaker(engine)
    engine.dispose()
    clear_cache()


def store(maker: sessionmaker[Session], g: nx.Graph, consent: dict[str, int] | None = None) -> str:
    """Store ``g`` (string node ids) as one version, the way the intake does; the graph id."""
    ids = [str(v) for v in g.nodes()]
    at = {v: i for i, v in enumerate(ids)}
    edges = [(at[str(u)], at[str(v)]) for u, v in g.edges()]
    arrays = GraphArrays(
        n=len(ids), directed=False,
        src=np.array([u for u, _ in edges], dtype=np.int32), dst=np.array([v for _, v in edges], dtype=np.int32),
        weight=np.ones(len(edges)),
    )
    attrs = NodeAttributes.empty(len(ids))
    if consent is not None:
        attrs.consent[:] = [consent.get(v, -1) for v in ids]
        attrs = NodeAttributes(**{**vars(attrs), "has_consent_data": True})
    stored, extra = version_arrays(arrays, ids, attrs)
    with maker.begin() as db:
        graph = graph_repo.add_graph(db, tenant_id=TENANT, name="test", directed=False)
        graph_repo.add_version(db, graph, based_on=0, arrays=stored, manifest_extra=extra, summary={},
                               origin={"test": True}, nodes=len(ids), edges=len(edges))
        return graph.id


def loaded(maker: sessionmaker[Session], graph_id: str) -> LoadedVersion:
    with maker() as db:
        return load_version(db, graph_repo.get_version(db, graph_repo.get_graph(db, TENANT, graph_id)))


def karate() -> nx.Graph:
    return nx.relabel_nodes(nx.karate_club_graph(), lambda i: f"m{i:02d}")


def no_progress(fraction: float, message: str | None) -> None:
    assert 0.0 <= fraction <= 1.0


# -- a person's introductions ------------------------------------------------------------


def test_one_persons_adamic_adar_matches_networkx(maker: sessionmaker[Session]) -> None:
    g = karate()
    gid = store(maker, g)
    person = "m00"
    answer = introductions.recommend_for_person(
        maker, TENANT, introductions.PersonQuery(gid, person, method="adamic_adar", limit=6, explain=3))
    doc = answer.document
    assert doc is not None and doc["graph_id"] == gid and doc["version"] == 1 and doc["method"] == "adamic_adar"
    # Source: NetworkX nx.adamic_adar_index over every pair (person, non-neighbour), computed in this test.
    expected = {v: s for _, v, s in nx.adamic_adar_index(g, [(person, v) for v in nx.non_neighbors(g, person)])}
    items = doc["items"]
    assert len(items) == 6
    for x in items:
        assert x["score"] == pytest.approx(expected[x["node_id"]], rel=1e-9), x["node_id"]
        common = set(g[person]) & set(g[x["node_id"]])
        assert x["common"] == len(common)
        assert {s["node_id"] for s in x["shared_contacts"]} <= common and len(x["shared_contacts"]) <= 3
    # The best six by NetworkX's score: nobody left out scores above the lowest one listed.
    listed = {x["node_id"] for x in items}
    lowest = min(x["score"] for x in items)
    assert all(s <= lowest + 1e-12 for v, s in expected.items() if v not in listed)
    assert [x["score"] for x in items] == sorted((x["score"] for x in items), reverse=True)


def test_etag_follows_the_query_and_a_current_copy_skips_the_work(maker: sessionmaker[Session]) -> None:
    gid = store(maker, karate())
    query = introductions.PersonQuery(gid, "m05", limit=3)
    first = introductions.recommend_for_person(maker, TENANT, query)
    seen: list[str] = []
    again = introductions.recommend_for_person(maker, TENANT, query, is_current=lambda e: seen.append(e) or True)
    assert again.document is None and again.etag == first.etag == seen[0]
    # An alias names the same ranking, so the same ETag; another method another one.
    alias = introductions.recommend_for_person(
        maker, TENANT, introductions.PersonQuery(gid, "m05", method="tie_strength", limit=3))
    weighted = introductions.recommend_for_person(
        maker, TENANT, introductions.PersonQuery(gid, "m05", method="weighted_adamic_adar", limit=3))
    assert alias.etag == weighted.etag != first.etag
    assert alias.document is not None and alias.document["method"] == "weighted_adamic_adar"


def test_unknown_person_graph_and_version_are_not_found(maker: sessionmaker[Session]) -> None:
    gid = store(maker, karate())
    with pytest.raises(NotFound) as err:
        introductions.recommend_for_person(maker, TENANT, introductions.PersonQuery(gid, "nobody"))
    assert err.value.data == {"resource": "node", "id": "nobody"}
    assert "not in version 1" in err.value.reason
    with pytest.raises(NotFound):
        introductions.recommend_for_person(maker, TENANT, introductions.PersonQuery(gid, "m00", version=2))
    with pytest.raises(NotFound):
        introductions.recommend_for_person(maker, "other-tenant", introductions.PersonQuery(gid, "m00"))


def test_batch_rows_agree_with_the_one_person_answer(maker: sessionmaker[Session]) -> None:
    gid = store(maker, karate())
    v = loaded(maker, gid)
    params = introductions.RecommendationsParams(nodes=["m00", "m33", "m00"], limit=4, explain=2)
    out = introductions.recommend_everyone(v, params, progress=no_progress)
    assert out.data["people"] == 2 and out.data["rows"] == 8 and out.arrays["person"].shape == (8,)
    header, rows = introductions.recommendations_table(v, out.data, out.arrays)
    assert header == out.data["columns"] == [
        "node_id", "rank", "candidate_id", "score", "common",
        "shared_contact_1", "tie_to_person_1", "tie_to_candidate_1",
        "shared_contact_2", "tie_to_person_2", "tie_to_candidate_2",
    ]
    table = list(rows)
    for person in ("m00", "m33"):
        one = introductions.recommend_for_person(
            maker, TENANT, introductions.PersonQuery(gid, person, limit=4, explain=2)).document
        assert one is not None
        mine = [r for r in table if r[0] == person]
        assert [r[2] for r in mine] == [x["node_id"] for x in one["items"]]
        assert [r[3] for r in mine] == pytest.approx([x["score"] for x in one["items"]])
        assert [r[1] for r in mine] == [1, 2, 3, 4]


def test_batch_names_unknown_people(maker: sessionmaker[Session]) -> None:
    v = loaded(maker, store(maker, karate()))
    with pytest.raises(UnknownNode) as err:
        introductions.recommend_everyone(v, introductions.RecommendationsParams(nodes=["m00", "x", "y"]),
                                         progress=no_progress)
    assert err.value.data["field"] == "nodes" and err.value.data["unknown"] == ["x", "y"]
    assert err.value.reason == "2 ids in nodes are not in this version: 'x', 'y'"


# -- next contacts ---------------------------------------------------------------------------


def campaign() -> nx.Graph:
    """Adopters a and b. c knows both, d knows a, e knows d only, f knows b and has no consent."""
    return nx.Graph([("a", "c"), ("b", "c"), ("a", "d"), ("d", "e"), ("b", "f")])


CONSENT = {"a": 1, "b": 1, "c": 1, "d": 1, "e": 1, "f": 0}
HALF = ProbabilitySettings(scheme="uniform", p=0.5)


def test_next_contacts_exposure_by_hand(maker: sessionmaker[Session]) -> None:
    gid = store(maker, campaign(), CONSENT)
    doc = contacts.next_contacts_for(maker, TENANT, contacts.AdopterQuery(gid, ("a", "b", "a"), probability=HALF))
    # Source: hand count. Independent Cascade, every arc 0.5: exposure = 1 - 0.5^(adopters in contact).
    # c has two adopters in contact (0.75), d one (0.5); e has none (not exposed); f may not be contacted.
    got = {x["node_id"]: (x["exposure"], x["adopter_contacts"]) for x in doc["items"]}
    assert got == {"c": (pytest.approx(0.75), 2), "d": (pytest.approx(0.5), 1)}
    assert [x["node_id"] for x in doc["items"]] == ["c", "d"]
    assert doc["items"][1]["ask"]["node_id"] == "a"  # d's only adopter in contact
    assert doc["items"][0]["ask"]["node_id"] in ("a", "b")
    assert doc["adopters"] == 2 and doc["unknown_adopters"] is None and doc["blend"] == 0.0
    assert doc["items"][1]["reason"].startswith("1 adopter in contact (chance 0.50 of being won over next round)")
    assert doc["exposure_explained"] == contacts.exposure_explained("ic", "uniform")


def test_next_contacts_weighted_cascade_closed_form(maker: sessionmaker[Session]) -> None:
    gid = store(maker, campaign(), CONSENT)
    doc = contacts.next_contacts_for(maker, TENANT, contacts.AdopterQuery(gid, ("a", "b")))
    # Source: closed form. Weighted cascade gives the arc u->v the chance 1/deg(v), and IC exposure is
    # 1 - prod(1 - p): c (degree 2, both ties to adopters) 1 - (1 - 1/2)^2; d (degree 2, one) 1/2.
    got = {x["node_id"]: x["exposure"] for x in doc["items"]}
    assert got == {"c": pytest.approx(1 - (1 - 1 / 2) ** 2), "d": pytest.approx(1 / 2)}


def test_grouped_by_adopter_assigns_each_target_once(maker: sessionmaker[Session]) -> None:
    gid = store(maker, campaign(), CONSENT)
    doc = contacts.next_contacts_for(
        maker, TENANT, contacts.AdopterQuery(gid, ("a", "b"), probability=HALF, group_by="adopter"))
    targets = [t["node_id"] for grp in doc["groups"] for t in grp["targets"]]
    assert sorted(targets) == ["c", "d"] and "items" not in doc
    for grp in doc["groups"]:
        assert grp["expected_referrals"] == pytest.approx(sum(t["exposure"] for t in grp["targets"]))


def test_unknown_adopters_strict_or_counted(maker: sessionmaker[Session]) -> None:
    gid = store(maker, campaign(), CONSENT)
    with pytest.raises(UnknownNode) as err:
        contacts.next_contacts_for(maker, TENANT, contacts.AdopterQuery(gid, ("a", "zz", "yy", "zz")))
    assert err.value.data == {"field": "adopters", "unknown": ["zz", "yy"], "unknown_count": 2}
    assert err.value.reason == "2 adopter ids are not in version 1 of this graph: 'zz', 'yy'"
    doc = contacts.next_contacts_for(maker, TENANT, contacts.AdopterQuery(gid, ("a", "zz"), strict=False))
    assert doc["unknown_adopters"] == {"count": 1, "examples": ["zz"]} and doc["adopters"] == 1


def test_referral_asks_job_matches_the_grouped_answer(maker: sessionmaker[Session]) -> None:
    gid = store(maker, campaign(), CONSENT)
    v = loaded(maker, gid)
    params = contacts.ReferralAsksParams(adopters=["a", "b"], probability=HALF)
    out = contacts.ask_for_referrals(v, params, progress=no_progress)
    grouped = contacts.next_contacts_for(
        maker, TENANT, contacts.AdopterQuery(gid, ("a", "b"), probability=HALF, group_by="adopter", limit=None))
    header, rows = contacts.referral_asks_table(v, {**out.data, "params": params.model_dump()}, out.arrays)
    table = [dict(zip(header, r)) for r in rows]
    want = [(g["adopter"], t["node_id"], t["exposure"]) for g in grouped["groups"] for t in g["targets"]]
    assert [(r["adopter_id"], r["target_id"], r["exposure"]) for r in table] == want
    assert out.data["targets"] == 2 and out.data["expected_referrals"] == pytest.approx(0.75 + 0.5)


def test_adopter_ids_from_csv() -> None:
    assert contacts.read_adopter_ids(b"\xef\xbb\xbfname,id\nx,a\n\n,\"b, c\"\n", "id") == ["a", "b, c"]
    cases = [
        (b"\xff", "id", "the CSV body is not UTF-8", None),
        (b"", "id", "the CSV body is empty; send a header row with an 'id' column", None),
        (b"who\nx\n", "id", "the CSV header has no 'id' column (columns: who)", 1),
        (b"x,id\nonly\n", "id", "line 2 has no 'id' value", 2),
    ]
    for raw, column, reason, line in cases:
        with pytest.raises(InvalidParameter) as err:
            contacts.read_adopter_ids(raw, column)
        assert err.value.reason == reason
        assert err.value.data == ({"field": "body"} if line is None else {"field": "body", "line": line})


def test_csv_errors_keep_the_problem_document_of_the_http_layer() -> None:
    # The route raised the HTTP layer's InvalidParams before; the use case raises the engine's
    # InvalidParameter: both must give the same document and status.
    from service.api.errors import InvalidParams
    from service.api.problems import PROBLEM_STATUS
    from service.jobs.errors import problem_document

    old = InvalidParams("line 2 has no 'id' value", field="body", line=2)
    new = InvalidParameter("line 2 has no 'id' value", field="body", line=2)
    assert problem_document(new) == problem_document(old)
    assert PROBLEM_STATUS[InvalidParameter] == PROBLEM_STATUS[InvalidParams] == 422


# -- link evaluation ------------------------------------------------------------------------


def test_link_evaluation_reports_every_method_and_its_table_is_by_auc(maker: sessionmaker[Session]) -> None:
    v = loaded(maker, store(maker, karate()))
    params = evaluation.LinkEvaluationParams(methods=["adamic_adar", "tie_strength", "jaccard"], k=10)
    fractions: list[float] = []
    out = evaluation.evaluate_links(v, params, progress=lambda f, m: fractions.append(f))
    scores = out.data["methods"]
    assert set(scores) == {"adamic_adar", "weighted_adamic_adar", "jaccard"}  # the alias resolved
    assert out.data["best"] == max(scores, key=lambda m: scores[m]["auc"])
    assert all(0.0 <= scores[m]["auc"] <= 1.0 for m in scores) and fractions
    header, rows = evaluation.link_evaluation_table(v, out.data, out.arrays)
    table = list(rows)
    assert header == ["method", "auc", "precision_at_k", "k"] and table[0][0] == out.data["best"]
    assert [r[1] for r in table] == sorted((r[1] for r in table), reverse=True)
    assert all(r[3] == 10 for r in table) and not math.isnan(table[0][1])


# -- imports ---------------------------------------------------------------------------------


@pytest.mark.parametrize("module", ["next_contacts", "recommendations", "link_evaluation"])
def test_a_use_case_imports_first_without_a_circle(module: str) -> None:
    # The job tasks import these modules for their params; a fresh interpreter that imports the
    # use case before anything else would meet a half-initialised module if the circle came back.
    import subprocess
    import sys
    from pathlib import Path

    root = Path(__file__).resolve().parents[2]
    done = subprocess.run([sys.executable, "-c", f"import service.usecases.{module}"], cwd=root,
                          capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr[-2000:]
