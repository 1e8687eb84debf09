"""Console forms that start work: a shortlist, a forecast, a network picture, a profile, scores.

Each form is read into the job's params exactly as the API's JSON body would
carry them and queued by the one queueing use case
(:func:`service.jobs.queueing.queue_job`), so every rule is checked in the
same place; a refusal is shown above the form in the same words the API uses.
"""

from __future__ import annotations

import re
from typing import Any

from fastapi import APIRouter, Request, Response

from service.analytics.errors import AnalyticsError
from service.jobs import queueing
from service.jobs.clock import SystemClock
from service.jobs.errors import JobsError
from storage.repo import graphs as graph_repo
from storage.repo import jobs as job_repo

from .account import SessionDep, WriterDep
from .sessions import ConsoleSession, check_csrf
from .web import ConsoleRoute, maker_of, read_form, render, see_other

__all__ = ["router", "id_list", "segment_caps", "shortlist_params", "forecast_params"]

router = APIRouter(route_class=ConsoleRoute, include_in_schema=False)

SCHEMES = {"weighted_cascade": "One over the number of ties in (weighted cascade)",
           "per_interaction": "From interaction counts", "uniform": "The same for every tie",
           "trivalency": "Low, medium or high at random (trivalency)"}
METHODS = {"imm": "Guaranteed (IMM)", "opim": "Guaranteed, stops early when certain (OPIM-C)",
           "degree_discount": "Quick heuristic (degree discount)"}


class FormError(ValueError):
    """A form field that cannot be read; the message says how to fill it in."""


def id_list(text: str) -> list[str]:
    """People's ids, one per line or separated by commas (blank entries dropped)."""
    return [p.strip() for p in re.split(r"[\n,]", text or "") if p.strip()]


def _whole(form: dict[str, str], name: str, words: str, *, required: bool = False) -> int | None:
    raw = (form.get(name) or "").strip()
    if not raw:
        if required:
            raise FormError(f"{words}: enter a whole number")
        return None
    if not re.fullmatch(r"\d+", raw):
        raise FormError(f"{words}: {raw!r} is not a whole number")
    return int(raw)


def segment_caps(text: str) -> int | dict[str, int] | None:
    """'3' caps every segment; 'north=3, south=2' (or one per line) caps the segments named."""
    text = (text or "").strip()
    if not text:
        return None
    if re.fullmatch(r"\d+", text):
        return int(text)
    caps: dict[str, int] = {}
    for part in id_list(text):
        name, sep, value = part.rpartition("=")
        if not sep or not name.strip() or not re.fullmatch(r"\s*\d+\s*", value):
            raise FormError(f"Caps per segment: write segment=number, for example north=3 (not {part!r})")
        caps[name.strip()] = int(value)
    return caps


def _diffusion(form: dict[str, str]) -> dict[str, Any]:
    scheme = form.get("scheme") or "weighted_cascade"
    if scheme not in SCHEMES:
        raise FormError("Chance that a tie passes the message on: choose one of the listed ways")
    params: dict[str, Any] = {"model": "lt" if form.get("model") == "lt" else "ic", "probability": {"scheme": scheme}}
    if scheme == "uniform":
        raw = (form.get("p") or "0.1").strip()
        try:
            params["probability"]["p"] = float(raw)
        except ValueError:
            raise FormError(f"Chance per tie: {raw!r} is not a number between 0 and 1") from None
    rounds = _whole(form, "rounds", "Campaign length in rounds")
    if rounds is not None:
        params["rounds"] = rounds
    return params


def shortlist_params(form: dict[str, str]) -> dict[str, Any]:
    params = {**_diffusion(form), "budget": _whole(form, "budget", "How many people to contact", required=True)}
    method = form.get("method") or "imm"
    if method not in METHODS:
        raise FormError("Method: choose one of the listed methods")
    params["method"] = method
    for name in ("must_include", "exclude"):
        ids = id_list(form.get(name, ""))
        if ids:
            params[name] = ids
    caps = segment_caps(form.get("max_per_segment", ""))
    if caps is not None:
        params["max_per_segment"] = caps
    return params


def forecast_params(form: dict[str, str]) -> dict[str, Any]:
    seeds = id_list(form.get("seeds", ""))
    if not seeds:
        raise FormError("People contacted first: enter at least one id")
    params = {**_diffusion(form), "seeds": seeds}
    sims = _whole(form, "simulations", "Most simulated campaigns")
    if sims is not None:
        params["simulations"] = sims
    return params


def _queue(request: Request, session: ConsoleSession, graph_id: str, kind: str, params: dict[str, Any],
           version: int | None) -> str:
    settings = request.app.state.settings
    maker = maker_of(request)
    job, _ = queueing.queue_job(
        maker, lambda: job_repo.write_session(maker), session.tenant_id, graph_id,
        queueing.JobOrder(kind, params, version),
        now=SystemClock().now(),
        limits=queueing.QueueLimits(settings.job_max_queued_per_tenant, settings.job_max_attempts,
                                    settings.job_memory_limit()),
    )
    return job.id


def _form_page(request: Request, session: ConsoleSession, graph_id: str, which: str, form: dict[str, str],
               error: str | None, status: int = 200) -> Response:
    with maker_of(request)() as db:
        graph = graph_repo.get_graph(db, session.tenant_id, graph_id)
        versions = [v.number for v in reversed(graph_repo.list_versions(db, graph))]
    return render(request, f"start_{which}.html", session, status=status, graph=graph, versions=versions,
                  form=form, error=error, schemes=SCHEMES, methods=METHODS)


@router.get("/console/graphs/{graph_id}/start/{which}")
def start_page(graph_id: str, which: str, request: Request, session: SessionDep) -> Response:
    if which not in ("shortlist", "forecast"):
        return render(request, "not_found.html", session, status=404)
    form = {k: v for k, v in request.query_params.items() if k in ("seeds", "version")}
    return _form_page(request, session, graph_id, which, form, None)


@router.post("/console/graphs/{graph_id}/start/{which}")
async def start(graph_id: str, which: str, request: Request, session: WriterDep) -> Response:
    form = await read_form(request)
    check_csrf(session, form.get("csrf"))
    if which not in ("shortlist", "forecast", "layout", "profile", "scores"):
        return render(request, "not_found.html", session, status=404)
    try:
        version = _whole(form, "version", "Version")
        params: dict[str, Any] = {"shortlist": shortlist_params, "forecast": forecast_params}.get(
            which, lambda f: {})(form)
        job_id = _queue(request, session, graph_id, which, params, version)
    except (FormError, AnalyticsError, JobsError) as exc:
        message = str(exc) if isinstance(exc, FormError) else exc.reason
        if which in ("layout", "profile", "scores"):
            return render(request, "refused.html", session, status=422, reason=message)
        return _form_page(request, session, graph_id, which, form, message, status=422)
    return see_other(f"/console/jobs/{job_id}")
