"""The event-graph use cases called directly against a real SQLite database: upload, append, the job's step."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import networkx as nx
import pytest
from networkx.algorithms import bipartite

from service.analytics.errors import InvalidParameter
from service.intake import SizeLimits
from service.intake.events import EventColumns
from service.usecases.event_graphs import EventUploadOptions, ProjectEventsParams, project_stored_events, upload_events
from service.usecases.loading import clear_cache, load_version
from storage.db import make_engine, make_sessionmaker
from storage.repo import graphs as graph_repo
from storage.repo import jobs as job_repo

LIMITS = SizeLimits()


@pytest.fixture
def maker(sqlite_url: str) -> Any:
    engine = make_engine(sqlite_url)
    yield make_sessionmaker(engine)
    engine.dispose()
    clear_cache()


def _graph(maker: Any, directed: bool = False) -> str:
    with maker() as db:
        g = graph_repo.add_graph(db, tenant_id="t", name="tastings", directed=directed)
        db.commit()
        return str(g.id)


def _file(tmp_path: Path, rows: list[tuple[str, str]], name: str = "events.csv") -> Path:
    path = tmp_path / name
    path.write_text("who,tasting\n" + "".join(f"{p},{e}\n" for p, e in rows))
    return path


def _upload(maker: Any, gid: str, path: Path, mode: str = "replace", **settings: Any) -> dict[str, Any]:
    options = EventUploadOptions("csv", mode, EventColumns(person="who", event="tasting"), settings)  # type: ignore[arg-type]
    done = upload_events(maker, "t", gid, path, options, limits=LIMITS,
                         render=lambda g, v: {"number": v.number, "summary": v.summary, "edges": v.edges})
    return done.body


def _ties(maker: Any, gid: str, number: int | None = None) -> dict[tuple[str, str], float]:
    with maker() as db:
        v = load_version(db, graph_repo.get_version(db, graph_repo.get_graph(db, "t", gid), number))
    return {tuple(sorted((v.ids[a], v.ids[b]))): float(w)  # type: ignore[misc]
            for a, b, w in zip(v.graph.src, v.graph.dst, v.graph.weight)}


def _davis() -> tuple[nx.Graph, list[str], list[tuple[str, str]]]:
    g = nx.davis_southern_women_graph()
    women = [n for n, d in g.nodes(data=True) if d["bipartite"] == 0]
    return g, women, sorted((w, e) for w, e in g.edges() if g.nodes[w]["bipartite"] == 0)


def test_upload_then_job_step_rebuilds_with_other_settings(maker: Any, tmp_path: Path) -> None:
    g, women, rows = _davis()
    gid = _graph(maker)
    first = _upload(maker, gid, _file(tmp_path, rows), projection="count", max_event_size=0)
    # Source: NetworkX weighted_projected_graph (shared-event counts).
    want = {tuple(sorted((a, b))): d["weight"] for a, b, d in bipartite.weighted_projected_graph(g, women).edges(data=True)}
    assert _ties(maker, gid) == want and first["summary"]["projection"]["method"] == "count"
    out = project_stored_events(maker, "t", gid, 1, ProjectEventsParams(projection="newman"),
                                progress=lambda f, m=None: None)
    assert out.data["version_created"] == 2
    # Source: NetworkX collaboration_weighted_projected_graph (Newman 2001); max_event_size kept from version 1.
    ref = bipartite.collaboration_weighted_projected_graph(g, women)
    got = _ties(maker, gid, 2)
    assert got.keys() == {tuple(sorted((a, b))) for a, b in ref.edges()}
    assert all(abs(got[tuple(sorted((a, b)))] - d["weight"]) < 1e-12 for a, b, d in ref.edges(data=True))
    # Running the step again on version 1 would build on top of a version it did not see: refused.
    from storage.errors import Conflict

    with pytest.raises(Conflict):
        project_stored_events(maker, "t", gid, 1, ProjectEventsParams(), progress=lambda f, m=None: None)


def test_a_retried_job_answers_with_the_version_it_already_stored(maker: Any, tmp_path: Path) -> None:
    # A worker stopped after storing the version but before storing the result retries the
    # job: the same job finds its own version; another job on the same version is refused.
    from storage.errors import Conflict

    _, _, rows = _davis()
    gid = _graph(maker)
    _upload(maker, gid, _file(tmp_path, rows), projection="count", max_event_size=0)
    quiet = lambda f, m=None: None  # noqa: E731
    first = project_stored_events(maker, "t", gid, 1, ProjectEventsParams(projection="newman"), progress=quiet,
                                  job_id="job-a")
    again = project_stored_events(maker, "t", gid, 1, ProjectEventsParams(projection="newman"), progress=quiet,
                                  job_id="job-a")
    assert again.data == first.data and again.data["version_created"] == 2
    with maker() as db:
        assert graph_repo.get_graph(db, "t", gid).latest_version == 2
    with pytest.raises(Conflict):
        project_stored_events(maker, "t", gid, 1, ProjectEventsParams(), progress=quiet, job_id="job-b")


def test_large_table_is_stored_with_a_queued_job(maker: Any, tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    from service.usecases import event_graphs

    monkeypatch.setattr(event_graphs, "JOB_ROWS", 20)
    _, _, rows = _davis()
    gid = _graph(maker)
    body = _upload(maker, gid, _file(tmp_path, rows), backbone="disparity_filter", alpha=0.3)
    assert body["edges"] == 0 and body["summary"]["projection"]["state"] == "queued"
    with maker() as db:
        job = job_repo.get_job(db, "t", body["summary"]["projection"]["job_id"])
        assert (job.kind, job.version, job.status) == ("project_events", 1, "queued")
        assert job.params["backbone"] == "disparity_filter" and job.params["alpha"] == 0.3


def test_append_needs_an_events_version_and_people_keep_their_attributes(maker: Any, tmp_path: Path) -> None:
    gid = _graph(maker)
    path = _file(tmp_path, [("ann", "t1"), ("bob", "t1")])
    with pytest.raises(InvalidParameter) as info:
        _upload(maker, gid, path, mode="append")
    assert info.value.data["field"] == "mode"
    _upload(maker, gid, path)
    more = _upload(maker, gid, _file(tmp_path, [("cy", "t1"), ("cy", "t2"), ("dee", "t2")], "more.csv"),
                   mode="append")
    assert more["summary"]["projection"]["rows"] == 5 and more["edges"] == 4
    # Newman: t1 has three people (1/2 per pair), t2 two (1 per pair).
    assert _ties(maker, gid) == {("ann", "bob"): 0.5, ("ann", "cy"): 0.5, ("bob", "cy"): 0.5, ("cy", "dee"): 1.0}


def test_time_decay_halves_an_event_one_half_life_older(maker: Any, tmp_path: Path) -> None:
    gid = _graph(maker)
    path = tmp_path / "timed.csv"
    path.write_text("who,tasting,time\nann,t1,2026-01-01\nbob,t1,2026-01-01\nann,t2,2026-01-31\nbob,t2,2026-01-31\n")
    _upload(maker, gid, path, projection="count", half_life_days=30)
    # Source: closed form 2^(-30/30) + 2^0 = 1.5 shared events.
    assert _ties(maker, gid) == {("ann", "bob"): pytest.approx(1.5)}


def test_directed_graph_takes_resource_allocation_and_mirrors_symmetric_ties(maker: Any, tmp_path: Path) -> None:
    rows = [("ann", "t1"), ("bob", "t1"), ("cy", "t1"), ("ann", "t2"), ("bob", "t2")]
    gid = _graph(maker, directed=True)
    _upload(maker, gid, _file(tmp_path, rows), projection="resource_allocation")
    with maker() as db:
        v = load_version(db, graph_repo.get_version(db, graph_repo.get_graph(db, "t", gid)))
    arcs = {(v.ids[a], v.ids[b]): float(w) for a, b, w in zip(v.graph.src, v.graph.dst, v.graph.weight)}
    # Source: closed form of Zhou et al. (2007), W(j -> i) = (1/k_j) sum_l a_il a_jl / k_l:
    # bob -> ann = (1/2)(1/3 + 1/2); cy -> ann = (1/1)(1/3); ann -> cy = (1/2)(1/3).
    assert arcs[("bob", "ann")] == pytest.approx(5 / 12) and arcs[("cy", "ann")] == pytest.approx(1 / 3)
    assert arcs[("ann", "cy")] == pytest.approx(1 / 6) and len(arcs) == 6
    gid2 = _graph(maker, directed=True)
    _upload(maker, gid2, _file(tmp_path, rows, "b.csv"), projection="count")
    with maker() as db:
        v = load_version(db, graph_repo.get_version(db, graph_repo.get_graph(db, "t", gid2)))
    arcs = {(v.ids[a], v.ids[b]): float(w) for a, b, w in zip(v.graph.src, v.graph.dst, v.graph.weight)}
    assert arcs[("ann", "bob")] == arcs[("bob", "ann")] == 2.0 and len(arcs) == 6
