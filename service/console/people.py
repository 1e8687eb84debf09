"""Console pages about people: rankings with filters and CSV, one person's page, next contacts.

Each page calls one use case: :func:`service.usecases.rankings.read_ranking` and
``export_ranking``, ``read_person`` with
:func:`service.usecases.recommendations.recommend_for_person`, and
:func:`service.usecases.next_contacts.next_contacts_for`.
"""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, Request, Response

from service.analytics.errors import AnalyticsError
from service.jobs.errors import JobsError
from service.usecases.errors import ResultNotReady, UsecaseError
from service.usecases.next_contacts import AdopterQuery, next_contacts_for
from service.usecases.rankings import RankingQuery, Unchanged, export_ranking, read_person, read_ranking
from service.usecases.recommendations import PersonQuery, recommend_for_person
from storage.repo import graphs as graph_repo

from .account import SessionDep
from .campaigns import id_list
from .sessions import check_csrf
from .web import ConsoleRoute, maker_of, read_form, render

__all__ = ["router"]

router = APIRouter(route_class=ConsoleRoute, include_in_schema=False)

MEASURE_WORDS = {"pagerank": "standing (PageRank)", "degree": "number of ties", "strength": "interactions",
                 "betweenness": "bridging (betweenness)", "harmonic": "closeness", "coreness": "core depth",
                 "eigenvector": "well-connected contacts (eigenvector)", "clustering": "close-knit circle",
                 "constraint": "brokerage (low constraint)", "in_degree": "ties in", "out_degree": "ties out",
                 "hub": "hub score", "authority": "authority score"}


def _query(graph_id: str, number: int, measure: str, segment: str, contactable: str, limit: int = 50
           ) -> RankingQuery:
    return RankingQuery.parse(graph_id, measure=measure or "pagerank", segments=[segment] if segment else [],
                              contactable=True if contactable == "yes" else None, version=number, limit=limit)


@router.get("/console/graphs/{graph_id}/versions/{number}/rankings")
def rankings_page(graph_id: str, number: int, request: Request, session: SessionDep, measure: str = "pagerank",
                  segment: str = "", contactable: str = "") -> Response:
    chosen = {"measure": measure, "segment": segment, "contactable": contactable}
    with maker_of(request)() as db:
        graph = graph_repo.get_graph(db, session.tenant_id, graph_id)
        version = graph_repo.get_version(db, graph, number)
        try:
            page = read_ranking(db, session.tenant_id, _query(graph.id, version.number, measure, segment,
                                                              contactable, 100))
        except ResultNotReady:
            return render(request, "rankings.html", session, graph=graph, version=version, page=None,
                          problem=None, no_scores=True, chosen=chosen, words=MEASURE_WORDS)
        except AnalyticsError as exc:
            return render(request, "rankings.html", session, status=422, graph=graph, version=version, page=None,
                          problem=exc.reason, no_scores=False, chosen=chosen, words=MEASURE_WORDS)
        assert not isinstance(page, Unchanged)
        return render(request, "rankings.html", session, graph=graph, version=version, page=page, problem=None,
                      no_scores=False, chosen=chosen, words=MEASURE_WORDS)


@router.get("/console/graphs/{graph_id}/versions/{number}/rankings.csv")
def rankings_csv(graph_id: str, number: int, request: Request, session: SessionDep, measure: str = "pagerank",
                 segment: str = "", contactable: str = "") -> Response:
    with maker_of(request)() as db:
        export = export_ranking(db, session.tenant_id, _query(graph_id, number, measure, segment, contactable))
        assert not isinstance(export, Unchanged)
        text = "".join(export.chunks)
    return Response(text, media_type="text/csv; charset=utf-8",
                    headers={"Content-Disposition": f'attachment; filename="{export.filename}"'})


@router.get("/console/graphs/{graph_id}/versions/{number}/people/{node_id:path}")
def person_page(graph_id: str, number: int, node_id: str, request: Request, session: SessionDep) -> Response:
    maker = maker_of(request)
    with maker() as db:
        graph = graph_repo.get_graph(db, session.tenant_id, graph_id)
        person = read_person(db, session.tenant_id, graph.id, node_id, number)
    answer = recommend_for_person(maker, session.tenant_id, PersonQuery(graph.id, node_id, limit=10,
                                                                        contactable=True, version=number))
    return render(request, "person.html", session, graph=graph, number=number, person=person,
                  recommendations=(answer.document or {}).get("items") or [], words=MEASURE_WORDS)


@router.get("/console/graphs/{graph_id}/versions/{number}/next-contacts")
def next_contacts_page(graph_id: str, number: int, request: Request, session: SessionDep) -> Response:
    with maker_of(request)() as db:
        graph = graph_repo.get_graph(db, session.tenant_id, graph_id)
        version = graph_repo.get_version(db, graph, number)
    return render(request, "next_contacts.html", session, graph=graph, version=version, form={}, answer=None,
                  error=None)


@router.post("/console/graphs/{graph_id}/versions/{number}/next-contacts")
async def next_contacts(graph_id: str, number: int, request: Request, session: SessionDep) -> Response:
    # A read: like POST /v1/graphs/{id}/next-contacts it needs the read scope only.
    form = await read_form(request)
    check_csrf(session, form.get("csrf"))
    maker = maker_of(request)
    with maker() as db:
        graph = graph_repo.get_graph(db, session.tenant_id, graph_id)
        version = graph_repo.get_version(db, graph, number)
    answer: dict[str, Any] | None = None
    error = None
    adopters = id_list(form.get("adopters", ""))
    try:
        if not adopters:
            raise ValueError("Enter the ids of the people who have adopted, one per line or comma-separated")
        answer = next_contacts_for(maker, session.tenant_id, AdopterQuery(
            graph.id, tuple(adopters), limit=50, version=version.number, strict=False))
    except ValueError as exc:
        error = str(exc)
    except (AnalyticsError, JobsError, UsecaseError) as exc:
        error = exc.reason
    return render(request, "next_contacts.html", session, status=422 if error else 200, graph=graph,
                  version=version, form=form, answer=answer, error=error)
