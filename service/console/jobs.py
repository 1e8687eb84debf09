"""Console pages for jobs: the list with live progress, one job's page, cancel, plots and CSV.

A finished job's page shows its result in the kind's own template (a
shortlist, a forecast, a profile); the plots are the kinds' own SVG plots,
served here under the session so that an ``<img>`` can show them.
"""

from __future__ import annotations

import csv
import io
from collections.abc import Iterator
from typing import Any

from fastapi import APIRouter, Request, Response
from fastapi.responses import JSONResponse

from service.api.rendering import round_cell, round_document
from service.api.result_exports import csv_cell
from service.jobs import queueing, registry
from service.jobs.clock import SystemClock
from storage.errors import NotFound
from storage.repo import graphs as graph_repo
from storage.repo import jobs as job_repo
from storage.repo import results as result_repo

from .account import SessionDep, WriterDep
from .sessions import check_csrf
from .web import STATUS_WORDS, ConsoleRoute, maker_of, read_form, render, see_other

__all__ = ["router"]

router = APIRouter(route_class=ConsoleRoute, include_in_schema=False)

TEMPLATES = {"shortlist": "shortlist.html", "forecast": "forecast.html", "profile": "profile.html"}


def _state(job: Any) -> dict[str, Any]:
    return {"id": job.id, "status": job.status, "status_words": STATUS_WORDS.get(job.status, job.status),
            "progress": round(float(job.progress or 0.0), 3), "message": job.progress_message or "",
            "finished": job.status in ("succeeded", "failed", "cancelled")}


@router.get("/console/jobs")
def jobs_page(request: Request, session: SessionDep) -> Response:
    with maker_of(request)() as db:
        jobs, _ = job_repo.list_jobs(db, session.tenant_id, limit=100)
        graphs, _ = graph_repo.list_graphs(db, session.tenant_id, limit=1000)
        return render(request, "jobs.html", session, jobs=jobs, graph_names={g.id: g.name for g in graphs})


@router.get("/console/jobs/{job_id}/state")
def job_state(job_id: str, request: Request, session: SessionDep) -> Response:
    with maker_of(request)() as db:
        return JSONResponse(_state(job_repo.get_job(db, session.tenant_id, job_id)),
                            headers={"Cache-Control": "no-store"})


@router.get("/console/jobs/{job_id}")
def job_page(job_id: str, request: Request, session: SessionDep) -> Response:
    with maker_of(request)() as db:
        job = job_repo.get_job(db, session.tenant_id, job_id)
        graph = graph_repo.get_graph(db, session.tenant_id, job.graph_id or "")
        kind = registry.REGISTRY.get(job.kind)
        context: dict[str, Any] = {"job": job, "graph": graph, "state": _state(job),
                                   "plots": list(kind.plots) if kind else [], "has_csv": bool(kind and kind.csv),
                                   "data": None}
        if job.status == "succeeded":
            context["data"] = round_document(result_repo.get_result(db, job.id).data)
        if job.kind == "layout" and job.status == "succeeded":
            return see_other(f"/console/graphs/{graph.id}/versions/{job.version}/picture")
        template = TEMPLATES.get(job.kind, "job.html") if job.status == "succeeded" else "job.html"
        return render(request, template, session, **context)


@router.post("/console/jobs/{job_id}/cancel")
async def cancel_job(job_id: str, request: Request, session: WriterDep) -> Response:
    check_csrf(session, (await read_form(request)).get("csrf"))
    maker = maker_of(request)
    queueing.cancel_job(lambda: job_repo.write_session(maker), session.tenant_id, job_id, now=SystemClock().now())
    return see_other(f"/console/jobs/{job_id}")


@router.get("/console/jobs/{job_id}/plots/{name}.svg")
def job_plot(job_id: str, name: str, request: Request, session: SessionDep) -> Response:
    with maker_of(request)() as db:
        job = job_repo.get_job(db, session.tenant_id, job_id)
        kind = registry.REGISTRY.get(job.kind)
        if kind is None or name not in kind.plots or job.status != "succeeded":
            raise NotFound("no such plot", resource="plot", id=name)
        svg = kind.plots[name](result_repo.get_result(db, job.id).data)
    return Response(svg, media_type="image/svg+xml", headers={"Cache-Control": "private, max-age=300"})


def _csv_text(header: list[str], rows: Iterator[list[Any]]) -> str:
    """The CSV as the API exports it: rounded by column, formula-like text defused."""
    buf = io.StringIO()
    out = csv.writer(buf, lineterminator="\r\n")
    out.writerow(header)
    for row in rows:
        out.writerow([csv_cell(round_cell(v, col)) for v, col in zip(row, header)])
    return buf.getvalue()


@router.get("/console/jobs/{job_id}/result.csv")
def job_csv(job_id: str, request: Request, session: SessionDep) -> Response:
    with maker_of(request)() as db:
        job = job_repo.get_job(db, session.tenant_id, job_id)
        if job.kind not in queueing.csv_exports() or job.status != "succeeded":
            raise NotFound("no CSV for this job", resource="csv", id=job_id)
        job, result = queueing.read_result(db, session.tenant_id, job_id)
        text = _csv_text(*queueing.result_table(db, session.tenant_id, job, result))
    return Response(text, media_type="text/csv; charset=utf-8",
                             headers={"Content-Disposition": f'attachment; filename="{job.kind}-{job.id}.csv"'})
