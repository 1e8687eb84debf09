"""Job results: one JSON document plus named arrays per succeeded job.

The ETag is a digest of the stored content only (the JSON document in
canonical form and every array's bytes), not of the job id or the time, so
two runs that produce the same result share an ETag: that is what lets
``/schedules/{id}/latest`` answer 304 until the result really changes.
"""

from __future__ import annotations

import hashlib
import json
from datetime import datetime
from typing import Any, Literal, NamedTuple

import numpy as np
from numpy.typing import NDArray
from sqlalchemy import bindparam, select
from sqlalchemy.orm import Session

from ..arrays import read_array, read_arrays, write_arrays
from ..errors import NotFound
from ..models import Graph, GraphVersion, Job, JobResult, ResultArray

__all__ = [
    "ResultRow",
    "add_result",
    "find_succeeded_results",
    "get_result",
    "get_result_array",
    "get_result_arrays",
    "get_result_data",
    "latest_for_schedule",
    "result_etag",
]


def result_etag(data: dict[str, Any], arrays: dict[str, NDArray[Any]]) -> str:
    """Hex SHA-256 of the canonical JSON document and the arrays (names, dtypes, bytes)."""
    h = hashlib.sha256()
    h.update(json.dumps(data, sort_keys=True, separators=(",", ":"), allow_nan=False).encode())
    for name in sorted(arrays):
        a = np.ascontiguousarray(arrays[name])
        h.update(f"\x00{name}\x00{a.dtype.str}\x00{a.shape[0]}\x00".encode())
        h.update(a.data.cast("B"))
    return h.hexdigest()


def add_result(
    db: Session, job_id: str, data: dict[str, Any], arrays: dict[str, NDArray[Any]], now: datetime
) -> str:
    """Store the result of ``job_id`` (the caller marks the job succeeded in the same transaction)."""
    etag = result_etag(data, arrays)
    result = JobResult(job_id=job_id, data=data, manifest={}, etag=etag, created_at=now)
    db.add(result)
    db.flush()
    if arrays:
        result.manifest = write_arrays(db, ResultArray, job_id, arrays)
        db.flush()
    return etag


def get_result(db: Session, job_id: str) -> JobResult:
    result = db.get(JobResult, job_id)
    if result is None:
        raise NotFound("result not found", resource="result", id=job_id)
    return result


def get_result_arrays(
    db: Session, result: JobResult, names: list[str] | None = None
) -> dict[str, NDArray[Any]]:
    wanted = list(result.manifest) if names is None else names
    return read_arrays(db, ResultArray, result.job_id, result.manifest, wanted)


def latest_for_schedule(db: Session, tenant_id: str, schedule_id: str) -> tuple[Job, JobResult] | None:
    """The newest succeeded job of a schedule, with its result; None before the first success."""
    row = db.execute(
        select(Job, JobResult)
        .join(JobResult, JobResult.job_id == Job.id)
        .where(Job.tenant_id == tenant_id, Job.schedule_id == schedule_id, Job.status == "succeeded")
        .order_by(Job.finished_at.desc(), Job.id.desc())
        .limit(1)
    ).first()
    return None if row is None else (row[0], row[1])


class ResultRow(NamedTuple):
    """A succeeded job's result as a lookup sees it: no JSON document, no arrays."""

    job_id: str
    version: int
    version_id: str
    etag: str
    created_at: datetime
    manifest: dict[str, Any]
    params: dict[str, Any] | None


Which = Literal["pinned", "latest", "version", "earlier"]


def _succeeded_statement(which: Which) -> Any:
    q = (
        select(Job.id, Job.version, GraphVersion.id, JobResult.etag, JobResult.created_at, JobResult.manifest,
               Job.params)
        .join(JobResult, JobResult.job_id == Job.id)
        .join(Graph, Graph.id == Job.graph_id)
        .join(GraphVersion, (GraphVersion.graph_id == Job.graph_id) & (GraphVersion.number == Job.version))
        .where(Graph.id == bindparam("gid"), Graph.tenant_id == bindparam("tenant"), Job.kind == bindparam("kind"),
               Job.status == "succeeded")
    )
    if which == "earlier":  # several versions, newest first
        return (q.where(Job.version.in_(bindparam("numbers", expanding=True)))
                .order_by(Job.version.desc(), Job.finished_at.desc(), Job.id.desc()).limit(100))
    where = {"pinned": Job.id == bindparam("rid"), "latest": Job.version == Graph.latest_version,
             "version": Job.version == bindparam("number")}[which]
    return q.where(where).order_by(Job.finished_at.desc(), Job.id.desc()).limit(100)


# Built once: composing a statement costs more than running it on a warm connection.
_SUCCEEDED: dict[Which, Any] = {w: _succeeded_statement(w) for w in ("pinned", "latest", "version", "earlier")}


def find_succeeded_results(
    db: Session, tenant_id: str, graph_id: str, kind: str, *, job_id: str | None = None,
    version: int | None = None, versions: list[int] | None = None,
) -> list[ResultRow]:
    """Succeeded ``kind`` results of a graph, newest first (at most 100).

    One of: the job ``job_id``; the versions numbered ``versions`` (newest
    version first, then newest run); the version numbered ``version``; by
    default the graph's latest version. Empty when none matches (including a
    graph of another tenant).
    """
    args: dict[str, Any] = {"gid": graph_id, "tenant": tenant_id, "kind": kind}
    which: Which
    if job_id is not None:
        which, args["rid"] = "pinned", job_id
    elif versions is not None:
        which, args["numbers"] = "earlier", versions
    elif version is not None:
        which, args["number"] = "version", version
    else:
        which = "latest"
    return [ResultRow(*row) for row in db.execute(_SUCCEEDED[which], args).all()]


def get_result_data(db: Session, job_id: str) -> dict[str, Any]:
    """The JSON document of a job's result."""
    data = db.execute(select(JobResult.data).where(JobResult.job_id == job_id)).scalar_one_or_none()
    if data is None:
        raise NotFound("result not found", resource="result", id=job_id)
    return dict(data)


def get_result_array(db: Session, job_id: str, name: str, manifest: dict[str, Any]) -> NDArray[Any]:
    """One named array of a job's result (``manifest``: the result's, from a lookup)."""
    return read_array(db, ResultArray, job_id, name, manifest)
