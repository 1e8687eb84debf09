"""Retry policy and problem documents."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

from pydantic import BaseModel, ValidationError

from service.analytics.errors import ComputationFailed, EmptyGraph, InvalidParameter
from service.jobs.errors import problem_document
from service.jobs.retry import RetryPolicy, is_permanent
from storage.errors import NotFound

T0 = datetime(2030, 1, 1, tzinfo=UTC)


def test_backoff_doubles_and_caps() -> None:
    p = RetryPolicy(base_seconds=5, factor=2, max_seconds=30)
    # Source: closed form base * factor ** (attempts - 1), capped.
    assert [p.delay(a) for a in (1, 2, 3, 4, 5)] == [5, 10, 20, 30, 30]
    d = p.decide(OSError("x"), attempts=2, max_attempts=3, now=T0)
    assert d is not None and d.retry_at == T0 + timedelta(seconds=10)
    assert p.decide(OSError("x"), attempts=3, max_attempts=3, now=T0) is None


def test_analytics_and_lookup_errors_are_permanent() -> None:
    class M(BaseModel):
        x: int

    try:
        M.model_validate({"x": "no"})
    except ValidationError as exc:
        verr = exc
    for exc in (InvalidParameter("p"), EmptyGraph(), ComputationFailed(), NotFound("gone"), verr):
        assert is_permanent(exc)
        assert RetryPolicy().decide(exc, attempts=1, max_attempts=5, now=T0) is None
    for exc in (OSError(), TimeoutError(), MemoryError(), RuntimeError()):
        assert not is_permanent(exc)


def test_problem_document_carries_error_data() -> None:
    doc = problem_document(InvalidParameter("epsilon must be in (0, 1)", field="epsilon", value=1.5), attempts=1)
    assert doc == {
        "type": "/problems/invalid-parameter",
        "title": "Invalid parameter",
        "detail": "epsilon must be in (0, 1)",
        "field": "epsilon",
        "value": 1.5,
        "attempts": 1,
    }
    doc = problem_document(KeyError("k"))
    assert doc["type"] == "/problems/internal-error" and doc["exception"] == "KeyError"
