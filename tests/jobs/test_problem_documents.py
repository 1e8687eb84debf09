"""A failed job's stored error is the problem document the API answers for the same exception."""

from __future__ import annotations

from typing import Any

import numpy as np
import pytest
from fastapi import FastAPI
from fastapi.testclient import TestClient
from sqlalchemy.orm import Session, sessionmaker

import tests.jobs.kinds as test_kinds
from service.analytics import errors as aerr
from service.analytics.events.backbone import EmptyBackbone
from service.api import errors as apierr
from service.api.problems import install_problem_handlers
from service.intake import errors as ierr
from service.jobs import errors as jerr
from service.jobs.clock import FakeClock
from service.jobs.retry import RetryPolicy
from service.jobs.worker import Worker, WorkerConfig
from storage import errors as serr
from storage.repo import jobs as jr


def _upload_with_hint() -> ierr.UploadError:
    exc = ierr.MissingColumn("no column named 'target'", header=("From", "To"), line=1)
    exc.hint = {"header": ["From", "To"], "query": "source=From&target=To"}
    return exc


# One error of every row of the API's table, with the kinds of data errors carry.
# LeaseLost and Cancelled are left out: the worker ends those runs without failing the job.
ERRORS: list[Exception] = [
    serr.NotFound("the job's graph no longer exists", resource="graph", id="g-1"),
    serr.Conflict("job already succeeded; it cannot be cancelled", job_id="j-1", job_status="succeeded"),
    ierr.IntakeError("the upload could not be read"),
    ierr.UploadError("not a number", line=3, column="weight", value="x" * 100),
    _upload_with_hint(),
    ierr.TooDeep("nested too deeply", depth=40, limit=32, line=1, unit="record"),
    ierr.UnsafeXml("GraphML with a DTD is refused", line=2),
    ierr.EmptyUpload(),
    ierr.InvalidEncoding("not UTF-8", likely="cp1252", charset=None, line=4),
    ierr.InvalidOption("duplicates must be one of: sum, max, first", field="duplicates"),
    aerr.UnknownNode("node 'zed' is not in the graph", node="zed"),
    aerr.InfeasibleRequest("the budget cannot pay for one seed", budget=1.0, cheapest=2.5),
    aerr.EmptyGraph(),
    EmptyBackbone("no tie is significant", edges_tested=15, smallest_p_value=np.float64(0.4096)),
    aerr.InvalidParameter("epsilon must be in (0, 1)", field="epsilon", value=np.float64(1.5), allowed=(0, 1)),
    aerr.TooExpensive("lower k", estimated_bytes=np.int64(10**10), limit_bytes=2**30),
    aerr.ComputationFailed("the kernel failed"),
    aerr.AnalyticsError("the computation could not be carried out"),
    jerr.UnknownKind("no job kind named 'x'", kind="x"),
    jerr.InvalidJobParams("k: must be positive", field="params", errors=[{"loc": ["k"], "msg": "bad"}]),
    jerr.UnsafeWebhookUrl("the address is private", address="10.0.0.1"),
    jerr.InvalidSchedule("bad cron", cron="* * *"),
    jerr.ResultNotReady("job j-1 has no result", job_id="j-1", job_status="running"),
    apierr.BadRequest("the body was cut off"),
    apierr.InvalidParams("cursor is not valid", field="cursor"),
    apierr.JsonLimit("nested too deeply", depth=40, max_depth=32),
    apierr.PayloadTooLarge("the body is over the limit", limit_bytes=100),
    apierr.UnsupportedMediaType("send text/csv", accepted=["text/csv"]),
    apierr.Unauthorized(),
    apierr.Forbidden("the key lacks the admin scope", scope="admin"),
    apierr.RateLimited(retry_after=3),
    jerr.TooManyJobs(retry_after=5, queued=100),
]


def api_document(exc: Exception) -> dict[str, Any]:
    """What the API answers when a route raises ``exc``."""
    app = FastAPI()
    install_problem_handlers(app)

    @app.get("/raise")
    def raise_it() -> None:
        raise exc

    with TestClient(app, raise_server_exceptions=False) as client:
        r = client.get("/raise")
    assert r.headers["content-type"] == "application/problem+json"
    body: dict[str, Any] = r.json()
    assert body["status"] == r.status_code and body["instance"] == "/raise"
    return body


def stored_error(maker: sessionmaker[Session], exc: Exception) -> dict[str, Any]:
    """The error the worker stores when a job's task raises ``exc``."""
    clock = FakeClock()

    def hook(ctx: object) -> None:
        raise exc

    test_kinds.HOOKS["problem-document"] = hook
    try:
        with jr.write_session(maker) as db:
            job, _ = jr.add_job(db, tenant_id="default", graph_id=None, version=None, kind="test_hook",
                                params={"hook": "problem-document"}, now=clock.now(), max_attempts=1)
            db.commit()
        worker = Worker(maker, WorkerConfig(progress_interval_seconds=0.0, retry=RetryPolicy()), clock=clock)
        out = worker.run_once()
        assert out is not None and out.status == "failed"
    finally:
        del test_kinds.HOOKS["problem-document"]
    with maker() as db:
        error = jr.get_job(db, "default", job.id).error
    assert error is not None
    return dict(error)


@pytest.mark.parametrize("exc", ERRORS, ids=[type(e).__name__ for e in ERRORS])
def test_failed_job_error_equals_the_api_document(maker: sessionmaker[Session], exc: Exception) -> None:
    stored = stored_error(maker, exc)
    assert stored.pop("attempts") == 1
    body = api_document(exc)
    del body["status"], body["instance"]
    assert stored == body
    assert stored["type"] == f"/problems/{type(exc).slug}" and stored["title"] == type(exc).title  # type: ignore[attr-defined]


def test_documents_keep_their_members() -> None:
    """Spot checks of the shape every caller reads (README's error table)."""
    doc = jerr.problem_document(_upload_with_hint())
    assert doc == {
        "type": "/problems/invalid-upload",
        "title": "Upload could not be read",
        "detail": "no column named 'target'",
        "line": 1,
        "unit": "line",
        "header": ["From", "To"],
        "hint": {"header": ["From", "To"], "query": "source=From&target=To"},
    }
    doc = jerr.problem_document(aerr.TooExpensive("lower k", estimated_bytes=np.int64(10**10), limit_bytes=2**30))
    assert doc == {
        "type": "/problems/too-expensive",
        "title": "Job too expensive",
        "detail": "lower k",
        "estimated_bytes": 10**10,
        "limit_bytes": 2**30,
    }
    assert isinstance(doc["estimated_bytes"], int)
    # An error's data never overwrites the standard members.
    doc = jerr.problem_document(aerr.InvalidParameter("bad", type="x", title="y", status=3, instance="z", k=1))
    assert doc == {"type": "/problems/invalid-parameter", "title": "Invalid parameter", "detail": "bad", "k": 1}
