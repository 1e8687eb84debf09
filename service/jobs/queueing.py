"""Queue a job on a graph version: the one use case behind ``POST /v1/graphs/{id}/jobs``
and the schedules that queue jobs on their own.

The params are parsed once, here, into the kind's model (strictly, as request bodies
are read); the model's JSON is what is stored, and the worker parses that once more
when it runs the job. Checks that need the version (``precheck``) and the memory
estimate (``estimate``) run before the write transaction, since they may load the
version.
"""

from __future__ import annotations

import json
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from datetime import datetime
from typing import Any

from pydantic import BaseModel, ValidationError
from sqlalchemy.orm import Session, sessionmaker

from service.analytics.errors import InvalidParameter
from service.usecases.loading import load_version
from storage.errors import NotFound
from storage.models import Graph, Job, JobResult
from storage.repo import graphs as graph_repo
from storage.repo import jobs as job_repo
from storage.repo import results as result_repo

from . import admission, registry, webhooks
from .errors import InvalidJobParams, ResultNotReady, TooManyJobs
from .kinds import JobKind

__all__ = ["JobOrder", "QueueLimits", "parse_job_params", "resolve_version", "queue_job", "cancel_job", "read_result", "csv_exports", "result_table"]


@dataclass(frozen=True)
class JobOrder:
    """What to run: a kind, its params as sent, the version (None: newest) and a priority."""

    kind: str
    params: dict[str, Any]
    version: int | None = None
    priority: int = 0


@dataclass(frozen=True)
class QueueLimits:
    """The limits a new job is held to (from the settings)."""

    max_queued_per_tenant: int
    max_attempts: int
    memory_limit: int | None
    threads: int = 1  # threads a job runs on (its memory estimate counts each thread's buffers)


def parse_job_params(kind: JobKind, raw: dict[str, Any]) -> BaseModel:
    """The kind's params as the registry reads them, after a strict pass over the JSON as sent.

    Strict as the request bodies are: ``0`` is no boolean and ``"3"`` no integer (``3.0`` is 3).
    """
    params = registry.parse_params(kind, raw)  # the kind's own messages for anything else
    try:
        kind.params.model_validate_json(json.dumps(_whole_numbers(raw)), strict=True)
    except ValidationError as exc:
        errors = registry.validation_errors(exc)
        raise InvalidJobParams(f"{'.'.join(errors[0]['loc'])}: {errors[0]['msg']}", field="params",
                               errors=errors) from exc
    return params


def _whole_numbers(value: Any) -> Any:
    """3.0 as 3 throughout (JSON Schema's integers); a float field takes an int as well."""
    if isinstance(value, float) and value.is_integer():
        return int(value)
    if isinstance(value, list):
        return [_whole_numbers(v) for v in value]
    if isinstance(value, dict):
        return {k: _whole_numbers(v) for k, v in value.items()}
    return value


def resolve_version(db: Session, tenant: str, graph_id: str, version: int | None) -> tuple[Graph, int]:
    """The graph (an unknown one is a 404 before anything else) and the version number to run on."""
    graph = graph_repo.get_graph(db, tenant, graph_id)
    if version is None:
        if graph.latest_version < 1:
            raise InvalidParameter("the graph has no versions yet; upload its edges first", field="version")
        return graph, graph.latest_version
    try:
        return graph, graph_repo.get_version(db, graph, version).number
    except NotFound as exc:
        raise InvalidParameter(
            f"version {version} does not exist; the newest is {graph.latest_version}",
            field="version",
            value=version,
        ) from exc


def queue_job(
    maker: sessionmaker[Session],
    write: Callable[[], Any],
    tenant: str,
    graph_id: str,
    order: JobOrder,
    *,
    now: datetime,
    limits: QueueLimits,
    idempotency_key: str | None = None,
    request_hash: str | None = None,
) -> tuple[Job, bool]:
    """Queue ``order`` on the graph; (job, created), created False for an idempotent replay.

    ``write()`` opens the short write transaction (``job_repo.write_session(maker)``).
    """
    with maker() as db:  # an unknown graph is a 404 whatever else is wrong
        graph_repo.get_graph(db, tenant, graph_id)
    kind = registry.get_kind(order.kind)
    params = parse_job_params(kind, order.params)
    if kind.precheck is not None or kind.estimate is not None or kind.resolve is not None:
        # Before the write transaction: checking ids and estimating memory may load the version.
        with maker() as db:
            graph, number = resolve_version(db, tenant, graph_id, order.version)
            row = graph_repo.get_version(db, graph, number)
            if kind.resolve is not None:
                params = kind.resolve(params, db, tenant, lambda: load_version(db, row), graph_id=graph.id,
                                      version=number)
            if kind.precheck is not None:
                kind.precheck(params, lambda: load_version(db, row), edges=row.edges)
            if kind.estimate is not None:
                estimate = kind.estimate(params, lambda: load_version(db, row), nodes=row.nodes,
                                         edges=row.edges, limit=limits.memory_limit, threads=limits.threads)
                admission.admit(estimate, limits.memory_limit)
    with write() as db:
        if idempotency_key:
            replay = job_repo.get_by_idempotency_key(db, tenant, idempotency_key, request_hash)
            if replay is not None:
                return replay, False
        graph, version = resolve_version(db, tenant, graph_id, order.version)
        if job_repo.count_queued(db, tenant) >= limits.max_queued_per_tenant:
            raise TooManyJobs(f"{limits.max_queued_per_tenant} jobs are already queued for this tenant",
                              retry_after=30)
        job, created = job_repo.add_job(
            db,
            tenant_id=tenant,
            graph_id=graph.id,
            version=version,
            kind=order.kind,
            params=params.model_dump(mode="json"),
            now=now,
            priority=order.priority,
            max_attempts=limits.max_attempts,
            idempotency_key=idempotency_key,
            request_hash=request_hash,
        )
        db.commit()
        return job, created


def cancel_job(write: Callable[[], Any], tenant: str, job_id: str, *, now: datetime) -> Job:
    """Cancel a job: a queued one at once, a running one at its next progress point.

    A job that ends here queues its webhook event in the same transaction.
    """
    with write() as db:
        job, ended = job_repo.cancel(db, tenant, job_id, now)
        if ended:
            webhooks.queue_job_event(db, job, now)
        db.commit()
    return job


_NOT_READY = {
    "queued": "it is queued; poll GET /v1/jobs/{id}?wait=30",
    "running": "it is still running; poll GET /v1/jobs/{id}?wait=30",
    "failed": "it failed; see the job's error",
    "cancelled": "it was cancelled",
}


def read_result(db: Session, tenant: str, job_id: str) -> tuple[Job, JobResult]:
    """A succeeded job and its stored result; :class:`ResultNotReady` saying what to do otherwise."""
    job = job_repo.get_job(db, tenant, job_id)
    if job.status != "succeeded":
        hint = _NOT_READY[job.status].replace("{id}", job.id)
        raise ResultNotReady(f"job {job.id} has no result: {hint}", job_id=job.id, job_status=job.status)
    return job, result_repo.get_result(db, job.id)


def csv_exports() -> dict[str, Callable[..., tuple[list[str], Iterator[list[Any]]]]]:
    """Job kinds whose result can be exported as CSV, and how (each kind declares its ``csv``)."""
    return {k.name: k.csv for k in registry.REGISTRY.values() if k.csv is not None}


def result_table(db: Session, tenant: str, job: Job, result: JobResult) -> tuple[list[str], Iterator[list[Any]]]:
    """A succeeded job's result as a CSV header and rows, by its kind's ``csv`` (on its version)."""
    render = registry.get_kind(job.kind).csv
    if render is None:
        raise InvalidParameter(f"jobs of kind {job.kind!r} have no CSV export", field="job_id")
    arrays = result_repo.get_result_arrays(db, result)
    graph = graph_repo.get_graph(db, tenant, job.graph_id or "")
    loaded = load_version(db, graph_repo.get_version(db, graph, job.version))
    return render(loaded, result.data, arrays)
