"""The console's network picture: the stored layout drawn with a shortlist or forecast marked."""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, Request, Response
from markupsafe import Markup

from service.analytics.errors import InvalidParameter
from service.usecases.network_picture import PictureRequest, network_picture
from storage.repo import graphs as graph_repo
from storage.repo import jobs as job_repo

from .account import SessionDep
from .web import ConsoleRoute, maker_of, render

__all__ = ["router"]

router = APIRouter(route_class=ConsoleRoute, include_in_schema=False)


@router.get("/console/graphs/{graph_id}/versions/{number}/picture")
def picture_page(graph_id: str, number: int, request: Request, session: SessionDep, size_by: str = "degree",
                 colour_by: str = "community", shortlist: str = "", forecast: str = "") -> Response:
    with maker_of(request)() as db:
        graph = graph_repo.get_graph(db, session.tenant_id, graph_id)
        version = graph_repo.get_version(db, graph, number)
        jobs, _ = job_repo.list_jobs(db, session.tenant_id, limit=200, graph_id=graph.id, status="succeeded")
        mine = [j for j in jobs if j.version == version.number]
        options: dict[str, Any] = {"shortlists": [j for j in mine if j.kind == "shortlist"],
                                   "forecasts": [j for j in mine if j.kind == "forecast"]}
        chosen = {"size_by": size_by, "colour_by": colour_by, "shortlist": shortlist, "forecast": forecast}
        try:
            picture = network_picture(db, session.tenant_id, graph.id, version.number, PictureRequest(
                size_by=size_by, colour_by="segment" if colour_by == "segment" else "community",
                shortlist_job=shortlist or None, forecast_job=forecast or None, legend=False))
        except InvalidParameter as exc:
            return render(request, "picture.html", session, graph=graph, version=version, picture=None,
                          svg=None, problem=exc.reason, chosen=chosen, no_layout=exc.data.get("field") == "version",
                          **options)
        # The SVG is written by network_picture, which escapes every id and label it draws.
        return render(request, "picture.html", session, graph=graph, version=version, picture=picture,
                      svg=Markup(picture.svg), problem=None, chosen=chosen, no_layout=False, **options)
