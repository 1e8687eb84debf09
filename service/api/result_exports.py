"""CSV exports of batch results: ``GET /v1/jobs/{job_id}/result.csv``.

Each exportable job kind has a table function (loaded version, result document,
arrays -> header and rows); this route streams it, escaping text a spreadsheet
would run as a formula and rounding each column by its kind.
"""

from __future__ import annotations

import asyncio
import csv
import io
from collections.abc import Callable, Iterator
from typing import Annotated, Any, TypeVar

import numpy as np
from fastapi import APIRouter, Header, HTTPException, Request, Response, status
from fastapi.responses import StreamingResponse
from sqlalchemy.orm import Session, sessionmaker

from service.jobs import queueing
from service.jobs.errors import ResultNotReady
from service.usecases.rankings import safe_cell
from service.usecases.indexes import compute_pool
from storage.repo import jobs as job_repo
from storage.repo import results as result_repo

from .deps import TenantDep
from .etags import etag_matches
from .rendering import round_cell
from .schemas.common import PROBLEM_RESPONSES

__all__ = ["csv_cell", "router"]

# Tagged with the recommendations routes it was first written beside: the OpenAPI document keeps its tags.
router = APIRouter(tags=["recommendations"], responses=PROBLEM_RESPONSES)

IfNoneMatch = Annotated[str | None, Header(alias="If-None-Match")]
T = TypeVar("T")

def _maker(request: Request) -> sessionmaker[Session]:
    maker: sessionmaker[Session] = request.app.state.sessionmaker
    return maker


async def _compute(fn: Callable[[], T]) -> T:
    """Run ``fn`` on the bounded compute pool (see service.usecases.indexes), off the event loop."""
    return await asyncio.get_running_loop().run_in_executor(compute_pool(), fn)


def csv_cell(value: object) -> str:
    """One CSV cell; text a spreadsheet would run as a formula gets a leading apostrophe."""
    if value is None:
        return ""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        return repr(value) if np.isfinite(value) else ""
    if isinstance(value, int):
        return str(value)
    return safe_cell(str(value)) or ""


def _csv_stream(header: list[str], rows: Iterator[list[Any]], batch: int = 2000) -> Iterator[str]:
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\r\n")
    writer.writerow(header)
    for i, row in enumerate(rows, 1):
        writer.writerow([csv_cell(round_cell(v, col)) for v, col in zip(row, header)])
        if i % batch == 0:
            yield buf.getvalue()
            buf.seek(0)
            buf.truncate()
    yield buf.getvalue()


@router.get(
    "/v1/jobs/{job_id}/result.csv",
    summary="Export a succeeded job's result as CSV (shortlist, forecast, recommendations, referral_asks, "
    "link_evaluation)",
    response_class=StreamingResponse,
    responses={
        200: {"content": {"text/csv": {}}, "description": "RFC 4180 CSV with a header row."},
        304: {"description": "Not modified (If-None-Match matched the ETag)."},
        406: {"description": "This job kind has no CSV export.", "content": {"application/problem+json": {}}},
    },
)
async def read_job_result_csv(
    job_id: str, request: Request, tenant: TenantDep, if_none_match: IfNoneMatch = None
) -> Response:
    maker = _maker(request)

    def prepare() -> Response:
        with maker() as db:
            job = job_repo.get_job(db, tenant, job_id)
            exports = queueing.csv_exports()
            if job.kind not in exports:
                raise HTTPException(
                    status.HTTP_406_NOT_ACCEPTABLE,
                    f"jobs of kind {job.kind!r} have no CSV export; kinds with one: {', '.join(sorted(exports))}",
                )
            if job.status != "succeeded":
                raise ResultNotReady(f"job {job.id} has no result: it is {job.status}", job_id=job.id,
                                     job_status=job.status)
            result = result_repo.get_result(db, job.id)
            etag = f'"{result.etag}-csv"'
            headers = {
                "ETag": etag,
                "Cache-Control": "no-cache",
                "Content-Disposition": f'attachment; filename="{job.kind}-{job.id}.csv"',
            }
            if etag_matches(if_none_match, etag):
                return Response(status_code=status.HTTP_304_NOT_MODIFIED, headers=headers)
            header, rows = queueing.result_table(db, tenant, job, result)
        return StreamingResponse(_csv_stream(header, rows), media_type="text/csv; charset=utf-8", headers=headers)

    return await _compute(prepare)
