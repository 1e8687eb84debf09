"""The rankings and communities use cases, called directly on a real SQLite database.

The graph is the Florentine families marriage network (nx.florentine_families_graph():
15 families, 20 ties; Padgett's data as NetworkX ships it), stored as version 1 with
segments and consent invented for these tests; a ``scores`` job runs in-process
(``Worker.run_once``). Version 2 keeps the edges and changes the segments (its
rankings are the version 1 result's); version 3 adds a tie (no result).
"""

from __future__ import annotations

import csv
import dataclasses
import io
from collections.abc import Iterator
from dataclasses import dataclass

import networkx as nx
import numpy as np
import pytest
from scipy.stats import percentileofscore
from sqlalchemy.orm import Session, sessionmaker

from service.analytics.errors import InvalidParameter
from service.analytics.graph import GraphArrays, NodeAttributes
from service.jobs.clock import FakeClock
from service.jobs.errors import ResultNotReady
from service.jobs.worker import Worker, WorkerConfig
from service.usecases.loading import clear_cache, version_arrays
from service.usecases._upload_report import edge_digest
from service.usecases import _ranking_tables as tables
from service.usecases.communities import CommunityList, CommunityQuery, list_communities
from service.usecases.rankings import (
    RankingExport, RankingPage, RankingQuery, Unchanged, export_ranking, read_person, read_ranking,
)
from storage.db import make_engine, make_sessionmaker, write_session
from storage.errors import NotFound
from storage.repo import graphs as graph_repo
from storage.repo import jobs as job_repo

TENANT = "default"


@dataclass(frozen=True)
class Stored:
    maker: sessionmaker[Session]
    graph_id: str
    G: nx.Graph
    ids: list[str]


def florentine() -> tuple[nx.Graph, list[str], GraphArrays]:
    G = nx.florentine_families_graph()
    ids = sorted(G)
    index = {name: i for i, name in enumerate(ids)}
    src = np.array([index[u] for u, _ in G.edges()], np.int32)
    dst = np.array([index[v] for _, v in G.edges()], np.int32)
    return G, ids, GraphArrays(len(ids), False, src, dst, np.ones(src.shape[0]))


def attributes(ids: list[str], *, flip: bool = False) -> NodeAttributes:
    a = NodeAttributes.empty(len(ids))
    a.segment[:] = [(i % 2) ^ int(flip) for i in range(len(ids))]
    a.consent[:] = [1 if i % 3 else 0 for i in range(len(ids))]
    return dataclasses.replace(a, segment_labels=("banking", "wool"), has_consent_data=True)


def add_version(db: Session, graph_id: str, based_on: int, g: GraphArrays, ids: list[str],
                attrs: NodeAttributes) -> None:
    graph = graph_repo.get_graph(db, TENANT, graph_id)
    arrays, extra = version_arrays(g, ids, attrs)
    graph_repo.add_version(db, graph, based_on=based_on, arrays=arrays, manifest_extra=extra, summary={},
                           origin={"test": True}, nodes=g.n, edges=g.m, edges_digest=edge_digest(g, ids))


@pytest.fixture
def stored(sqlite_url: str) -> Iterator[Stored]:
    engine = make_engine(sqlite_url)
    maker = make_sessionmaker(engine)
    G, ids, g = florentine()
    with maker() as db:
        graph = graph_repo.add_graph(db, tenant_id=TENANT, name="florentine", directed=False)
        add_version(db, graph.id, 0, g, ids, attributes(ids))
        db.commit()
        gid = graph.id
    clock = FakeClock()
    with write_session(maker) as db:
        job_repo.add_job(db, tenant_id=TENANT, graph_id=gid, version=1, kind="scores",
                         params={"measures": ["degree", "pagerank", "community"]}, now=clock.now())
        db.commit()
    outcome = Worker(maker, WorkerConfig(heartbeat_seconds=60, progress_interval_seconds=0.0), clock=clock).run_once()
    assert outcome is not None and outcome.status == "succeeded", outcome
    yield Stored(maker, gid, G, ids)
    tables.clear_cache()
    clear_cache()
    engine.dispose()


def expected_order(score: dict[str, float]) -> list[str]:
    """Best first, ties by id (the documented order)."""
    return sorted(score, key=lambda name: (-score[name], name))


def test_degree_ranking_matches_networkx_and_pages_by_cursor(stored: Stored) -> None:
    G, n = stored.G, stored.G.number_of_nodes()
    # Source: NetworkX degree_centrality = degree / (n - 1); the stored degree is the raw count.
    degree = {name: c * (n - 1) for name, c in nx.degree_centrality(G).items()}
    q = RankingQuery.parse(stored.graph_id, measure="degree", limit=5)
    with stored.maker() as db:
        first = read_ranking(db, TENANT, q)
        assert isinstance(first, RankingPage) and first.next_cursor is not None
        rest = read_ranking(db, TENANT, RankingQuery.parse(stored.graph_id, measure="degree", limit=50),
                            cursor=None)
        second = read_ranking(db, TENANT, q, cursor=first.next_cursor)
        again = read_ranking(db, TENANT, q, known_etag=lambda tag: tag == first.etag)
    assert isinstance(rest, RankingPage) and isinstance(second, RankingPage)
    assert rest.total == n and rest.version == rest.scores_version == 1 and rest.next_cursor is None
    assert [it["node_id"] for it in rest.items] == expected_order(degree)
    assert [it["rank"] for it in rest.items] == list(range(1, n + 1))
    values = list(degree.values())
    for it in rest.items:
        assert it["score"] == pytest.approx(degree[it["node_id"]])
        # Source: SciPy's mid-rank percentile, kind="mean" (the documented convention).
        assert it["percentile"] == pytest.approx(percentileofscore(values, degree[it["node_id"]], kind="mean"),
                                                 abs=1e-4)
    assert first.items == rest.items[:5] and second.items == rest.items[5:10]
    assert isinstance(again, Unchanged) and again.etag == first.etag
    with stored.maker() as db, pytest.raises(InvalidParameter) as err:
        read_ranking(db, TENANT, RankingQuery.parse(stored.graph_id, measure="pagerank", limit=5),
                     cursor=first.next_cursor)
    assert err.value.data["field"] == "cursor"
    with stored.maker() as db, pytest.raises(NotFound) as missing:
        read_ranking(db, "another-tenant", q)  # another tenant's graph does not exist for this one
    assert missing.value.data["resource"] == "graph"


def test_filters_keep_the_segment_and_the_consent_asked_for(stored: Stored) -> None:
    ids = stored.ids
    q = RankingQuery.parse(stored.graph_id, measure="degree", segments=["wool"], contactable=True, limit=50)
    with stored.maker() as db:
        page = read_ranking(db, TENANT, q)
        assert isinstance(page, RankingPage)
        with pytest.raises(InvalidParameter) as err:
            read_ranking(db, TENANT, RankingQuery.parse(stored.graph_id, measure="degree", segments=["silk"]))
    assert err.value.data["field"] == "segment" and "banking, wool" in str(err.value)
    # Counted by hand from attributes(): wool = odd index, consent = index not divisible by 3.
    kept = {ids[i] for i in range(len(ids)) if i % 2 == 1 and i % 3 != 0}
    assert {it["node_id"] for it in page.items} == kept and page.total == len(kept)
    assert all(it["segment"] == "wool" and it["contactable"] for it in page.items)
    degree = dict(stored.G.degree())
    assert [it["node_id"] for it in page.items] == expected_order({k: degree[k] for k in kept})


def test_a_version_with_the_same_edges_reuses_the_earlier_result(stored: Stored) -> None:
    G, ids, g = florentine()
    with stored.maker() as db:
        add_version(db, stored.graph_id, 1, g, ids, attributes(ids, flip=True))
        db.commit()
        page = read_ranking(db, TENANT, RankingQuery.parse(stored.graph_id, measure="degree",
                                                           segments=["wool"], limit=50))
        person = read_person(db, TENANT, stored.graph_id, "Medici")
    assert isinstance(page, RankingPage)
    assert (page.version, page.scores_version) == (2, 1)
    # Version 2's segments: wool is now the even indices.
    assert {it["node_id"] for it in page.items} == {ids[i] for i in range(len(ids)) if i % 2 == 0}
    assert person.version == 2 and person.scores_version == 1 and person.scores["degree"]["score"] == 6
    bigger = GraphArrays(g.n, False, np.append(g.src, 0).astype(np.int32), np.append(g.dst, 1).astype(np.int32),
                         np.ones(g.m + 1))
    with stored.maker() as db:
        add_version(db, stored.graph_id, 2, bigger, ids, attributes(ids))
        db.commit()
        with pytest.raises(ResultNotReady, match="version 3"):
            read_ranking(db, TENANT, RankingQuery.parse(stored.graph_id, measure="degree"))
        assert read_person(db, TENANT, stored.graph_id, "Medici").scores == {}


def test_a_person_their_ranks_and_the_csv_export(stored: Stored) -> None:
    G = stored.G
    with stored.maker() as db:
        person = read_person(db, TENANT, stored.graph_id, "Medici", "1")
        export = export_ranking(db, TENANT, RankingQuery.parse(stored.graph_id, measure="pagerank"))
        page = read_ranking(db, TENANT, RankingQuery.parse(stored.graph_id, measure="pagerank", limit=50))
    assert isinstance(export, RankingExport) and isinstance(page, RankingPage)
    # Source: NetworkX degree and pagerank (alpha 0.85, as the result states) on the same graph.
    pagerank = nx.pagerank(G, alpha=0.85, tol=1e-12)
    assert person.degree == G.degree("Medici") == 6
    assert person.scores["degree"]["rank"] == 1
    assert person.scores["pagerank"]["score"] == pytest.approx(pagerank["Medici"], abs=1e-6)
    assert person.scores["pagerank"]["rank"] == expected_order(pagerank).index("Medici") + 1
    rows = list(csv.reader(io.StringIO("".join(export.chunks))))
    assert tuple(rows[0]) == tables.CSV_HEADER
    assert [r[1] for r in rows[1:]] == [it["node_id"] for it in page.items] == expected_order(pagerank)
    assert export.filename == f"rankings-{stored.graph_id}-v1-pagerank.csv"
    with stored.maker() as db, pytest.raises(InvalidParameter) as err:
        read_person(db, TENANT, stored.graph_id, "Medici", "0")
    assert err.value.data["field"] == "version"


def test_communities_match_networkx_counts_and_modularity(stored: Stored) -> None:
    G, ids = stored.G, stored.ids
    with stored.maker() as db:
        page = list_communities(db, TENANT, CommunityQuery(stored.graph_id, "degree", top=3, limit=50))
        members: dict[int, set[str]] = {}
        for name in ids:
            c = read_person(db, TENANT, stored.graph_id, name).community
            assert c is not None
            members.setdefault(c["community"], set()).add(name)
    assert isinstance(page, CommunityList) and page.count == len(members)
    # Source: NetworkX modularity of the same partition (resolution 1, as the result states).
    assert page.modularity == pytest.approx(nx.community.modularity(G, members.values()), abs=1e-6)
    degree = dict(G.degree())
    for item in page.items:
        group = members[item["community"]]
        assert item["size"] == len(group)
        assert item["internal_edges"] == G.subgraph(group).number_of_edges()
        top = expected_order({k: degree[k] for k in group})[:3]
        assert [m["node_id"] for m in item["top_members"]] == top
    assert [it["size"] for it in page.items] == sorted((len(m) for m in members.values()), reverse=True)


def test_measures_are_checked_when_the_query_is_built() -> None:
    for measure, weights, field in [("composite", None, "weights"), ("community", None, "measure"),
                                    ("fame", None, "measure"), ("degree", "degree:1", "weights"),
                                    ("composite", "degree:-1", "weights")]:
        with pytest.raises(InvalidParameter) as err:
            RankingQuery.parse("g", measure=measure, weights=weights)
        assert err.value.data["field"] == field, measure
    with pytest.raises(InvalidParameter) as err:
        RankingQuery.parse("g", measure="degree", version="x")
    assert err.value.data["field"] == "version"
    with pytest.raises(InvalidParameter) as err:
        CommunityQuery("g", measure="community")
    assert err.value.data["field"] == "measure"
    assert RankingQuery.parse("g", measure="composite", weights="degree:1,pagerank:3").weights == {
        "degree": 1.0, "pagerank": 3.0}
