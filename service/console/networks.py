"""Console pages for networks (graphs) and their versions: what was uploaded, what to check."""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, Request, Response

from storage.models import GraphVersion, Job
from storage.repo import graphs as graph_repo
from storage.repo import jobs as job_repo

from .account import SessionDep
from .web import ConsoleRoute, maker_of, render

__all__ = ["router", "summary_rows", "newest_finished"]

router = APIRouter(route_class=ConsoleRoute, include_in_schema=False)

# Ingest figures worth reading, in plain words, in this order.
SUMMARY_WORDS = {
    "nodes": "People",
    "edges": "Ties",
    "directed": "Ties have a direction",
    "weighted": "Ties carry interaction counts",
    "density": "Density (share of possible ties present)",
    "reciprocity": "Share of ties returned",
    "weak_components": "Separate groups",
    "largest_weak_share": "Share of people in the largest group",
    "strong_components": "Groups that reach each other both ways",
    "degree_min": "Fewest ties of one person",
    "degree_median": "Typical ties per person (median)",
    "degree_max": "Most ties of one person",
    "self_loops": "Ties of a person to themselves",
    "encoding": "File read as",
    "delimiter": "Column separator",
}


def summary_rows(version: GraphVersion) -> list[tuple[str, Any]]:
    """The stored ingest summary as (words, value) rows: known figures first, other plain values after."""
    summary = {"nodes": version.nodes, "edges": version.edges, **(version.summary or {})}
    rows = [(words, summary[k]) for k, words in SUMMARY_WORDS.items() if k in summary]
    rows += [(k.replace("_", " ").capitalize(), v) for k, v in summary.items()
             if k not in SUMMARY_WORDS and k != "warnings" and isinstance(v, (int, float, str, bool))]
    return rows


def newest_finished(jobs: list[Job], kind: str, version: int) -> Job | None:
    """The newest succeeded job of ``kind`` on ``version`` among ``jobs`` (newest first)."""
    return next((j for j in jobs if j.kind == kind and j.version == version and j.status == "succeeded"), None)


@router.get("/console/graphs")
def graphs_page(request: Request, session: SessionDep) -> Response:
    with maker_of(request)() as db:
        graphs, _ = graph_repo.list_graphs(db, session.tenant_id, limit=200)
        return render(request, "graphs.html", session, graphs=graphs)


@router.get("/console/graphs/{graph_id}")
def graph_page(graph_id: str, request: Request, session: SessionDep) -> Response:
    with maker_of(request)() as db:
        graph = graph_repo.get_graph(db, session.tenant_id, graph_id)
        versions = list(reversed(graph_repo.list_versions(db, graph)))
        jobs, _ = job_repo.list_jobs(db, session.tenant_id, limit=30, graph_id=graph.id)
        return render(request, "graph.html", session, graph=graph, versions=versions, jobs=jobs)


@router.get("/console/graphs/{graph_id}/versions/{number}")
def version_page(graph_id: str, number: int, request: Request, session: SessionDep) -> Response:
    with maker_of(request)() as db:
        graph = graph_repo.get_graph(db, session.tenant_id, graph_id)
        version = graph_repo.get_version(db, graph, number)
        jobs, _ = job_repo.list_jobs(db, session.tenant_id, limit=200, graph_id=graph.id)
        mine = [j for j in jobs if j.version == version.number]
        return render(request, "version.html", session, graph=graph, version=version,
                      rows=summary_rows(version), warnings=(version.summary or {}).get("warnings") or [],
                      jobs=mine[:20], layout=newest_finished(mine, "layout", version.number),
                      profile=newest_finished(mine, "profile", version.number))
