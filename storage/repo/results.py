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
from typing import Any

import numpy as np
from numpy.typing import NDArray
from sqlalchemy import select
from sqlalchemy.orm import Session

from ..arrays import read_arrays, write_arrays
from ..errors import NotFound
from ..models import Job, JobResult, ResultArray

__all__ = ["add_result", "get_result", "get_result_arrays", "latest_for_schedule", "result_etag"]


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
