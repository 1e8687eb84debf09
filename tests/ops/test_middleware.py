"""The operations middleware: request ids, JSON logs, body limits on the stream, rate limits, loopback guard."""

from __future__ import annotations

import io
import json
import logging
from collections.abc import AsyncIterator
from pathlib import Path

import httpx
import pytest

from service.api.middleware import JsonFormatter, RequestIdFilter, TokenBuckets, is_loopback
from tests.ops.helpers import PROBLEM, bearer, make_key, secured_app

pytestmark = pytest.mark.anyio


def assert_problem(r: httpx.Response, status: int, slug: str) -> dict[str, object]:
    assert r.status_code == status, r.text
    assert r.headers["content-type"] == PROBLEM
    body = r.json()
    assert body["type"] == f"/problems/{slug}" and body["status"] == status and body["detail"]
    return dict(body)


# -- request ids and logs ----------------------------------------------------------------


async def test_request_id_is_echoed_or_generated(sqlite_url: str, tmp_path: Path) -> None:
    async with secured_app(sqlite_url, tmp_path, auth_disabled=True) as c:
        r = await c.get("/healthz", headers={"X-Request-ID": "abc-123.x:y"})
        assert r.headers["x-request-id"] == "abc-123.x:y"
        made = (await c.get("/v1/graphs")).headers["x-request-id"]
        assert len(made) == 32 and int(made, 16) >= 0  # uuid4 hex
        assert (await c.get("/v1/graphs")).headers["x-request-id"] != made
        # Not a short token (spaces, too long): replaced, never echoed into logs or headers.
        bad = (await c.get("/healthz", headers={"X-Request-ID": "a b"})).headers["x-request-id"]
        assert bad != "a b" and len(bad) == 32
        assert (await c.get("/healthz", headers={"X-Request-ID": "x" * 200})).headers["x-request-id"] != "x" * 200
        # Problem answers carry it too.
        r = await c.get("/v1/graphs/nope", headers={"X-Request-ID": "rid-404"})
        assert r.status_code == 404 and r.headers["x-request-id"] == "rid-404"


async def test_access_log_is_one_json_line_with_request_id_and_no_node_ids(
    sqlite_url: str, tmp_path: Path
) -> None:
    stream = io.StringIO()
    handler = logging.StreamHandler(stream)
    handler.setFormatter(JsonFormatter())
    handler.addFilter(RequestIdFilter())
    logger = logging.getLogger("bellwether.access")
    logger.addHandler(handler)
    try:
        async with secured_app(sqlite_url, tmp_path, auth_disabled=True) as c:
            gid = (await c.post("/v1/graphs", json={"name": "g", "directed": False})).json()["id"]
            await c.get(f"/v1/graphs/{gid}/nodes/alice%40example.org/recommendations", headers={"X-Request-ID": "r-1"})
    finally:
        logger.removeHandler(handler)
    lines = [json.loads(line) for line in stream.getvalue().splitlines()]
    assert len(lines) == 2
    post, rec = lines
    assert post["msg"] == "request" and post["method"] == "POST" and post["route"] == "/v1/graphs"
    assert post["status"] == 201 and post["tenant"] == "default" and post["duration_ms"] >= 0
    assert rec["request_id"] == "r-1" and rec["graph_id"] == gid
    assert rec["route"] == "/v1/graphs/{graph_id}/nodes/{node_id}/recommendations"
    assert "alice" not in json.dumps(rec)  # node ids (the caller's, maybe personal) stay out of logs


def test_json_formatter_keeps_extras_and_exceptions() -> None:
    record = logging.LogRecord("bellwether.worker", logging.ERROR, __file__, 1, "job %s failed", ("j1",), None)
    record.job_id = "j1"
    try:
        raise ValueError("boom")
    except ValueError:
        import sys

        record.exc_info = sys.exc_info()
    doc = json.loads(JsonFormatter().format(record))
    assert doc["msg"] == "job j1 failed" and doc["level"] == "error" and doc["job_id"] == "j1"
    assert "ValueError: boom" in doc["exc"] and doc["ts"].endswith("+00:00")


# -- body limits --------------------------------------------------------------------------


async def test_small_routes_refuse_big_bodies_by_length_and_on_the_stream(sqlite_url: str, tmp_path: Path) -> None:
    async with secured_app(sqlite_url, tmp_path, auth_disabled=True, max_body_bytes=1000) as c:
        big = json.dumps({"name": "x" * 2000, "directed": False})
        body = assert_problem(
            await c.post("/v1/graphs", content=big, headers={"Content-Type": "application/json"}),
            413, "payload-too-large",
        )
        assert body["limit"] == 1000

        async def chunks() -> AsyncIterator[bytes]:  # no Content-Length: counted as it arrives
            for _ in range(30):
                yield b" " * 100

        r = await c.post("/v1/graphs", content=chunks(), headers={"Content-Type": "application/json"})
        assert_problem(r, 413, "payload-too-large")
        # Within the limit, chunked or not, the body reaches the route intact.
        async def small() -> AsyncIterator[bytes]:
            yield b'{"name": "ok",'
            yield b' "directed": true}'

        r = await c.post("/v1/graphs", content=small(), headers={"Content-Type": "application/json"})
        assert r.status_code == 201 and r.json()["directed"] is True
        assert [g["name"] for g in (await c.get("/v1/graphs")).json()["items"]] == ["ok"]


async def test_uploads_take_bodies_past_the_small_limit_up_to_their_own(sqlite_url: str, tmp_path: Path) -> None:
    async with secured_app(
        sqlite_url, tmp_path, auth_disabled=True, max_body_bytes=1000, max_upload_bytes=50_000
    ) as c:
        gid = (await c.post("/v1/graphs", json={"name": "g", "directed": False})).json()["id"]
        rows = b"source,target\n" + b"".join(b"p%d,p%d\n" % (i, i + 1) for i in range(1000))
        assert 1000 < len(rows) < 50_000
        r = await c.post(f"/v1/graphs/{gid}/versions", content=rows, headers={"Content-Type": "text/csv"})
        assert r.status_code == 201 and r.json()["edges"] == 1000
        huge = rows * 10
        r = await c.post(f"/v1/graphs/{gid}/versions", content=huge, headers={"Content-Type": "text/csv"})
        assert_problem(r, 413, "payload-too-large")
        assert (await c.get(f"/v1/graphs/{gid}")).json()["latest_version"] == 1


# -- rate limit -------------------------------------------------------------------------------


def test_token_bucket_refills_at_the_rate_up_to_the_burst() -> None:
    now = [0.0]
    tb = TokenBuckets(rate=2.0, burst=3, clock=lambda: now[0])
    assert [tb.take("k") for _ in range(3)] == [0.0, 0.0, 0.0]
    assert tb.take("k") == pytest.approx(0.5)  # Source: closed form, 1 token / 2 per s.
    assert tb.take("other") == 0.0  # buckets are per key
    now[0] = 0.5
    assert tb.take("k") == 0.0 and tb.take("k") > 0
    now[0] = 100.0
    assert [tb.take("k") for _ in range(4)][:3] == [0.0] * 3  # refilled to the burst, not beyond


async def test_rate_limit_is_per_key_and_answers_429_with_retry_after(sqlite_url: str, tmp_path: Path) -> None:
    k1 = make_key(sqlite_url, "t1", ["read"])
    k2 = make_key(sqlite_url, "t2", ["read"])
    async with secured_app(sqlite_url, tmp_path, rate_limit_per_second=0.5, rate_limit_burst=3) as c:
        codes = [(await c.get("/v1/graphs", headers=bearer(k1))).status_code for _ in range(3)]
        assert codes == [200, 200, 200]
        r = await c.get("/v1/graphs", headers=bearer(k1))
        body = assert_problem(r, 429, "rate-limited")
        assert r.headers["retry-after"] == "2" and body["retry_after"] == 2  # Source: closed form, 1 / 0.5 per s.
        assert (await c.get("/v1/graphs", headers=bearer(k2))).status_code == 200  # other key, own bucket
        # Operations endpoints are not limited.
        assert (await c.get("/healthz")).status_code == 200


# -- loopback guard and unexpected errors ---------------------------------------------------


async def test_auth_disabled_serves_loopback_clients_only(sqlite_url: str, tmp_path: Path) -> None:
    assert is_loopback("127.0.0.1") and is_loopback("::1") and is_loopback("127.8.0.1")
    assert is_loopback("::ffff:127.0.0.1") and not is_loopback("10.1.2.3") and not is_loopback("testclient")
    async with secured_app(sqlite_url, tmp_path, auth_disabled=True, client=("192.0.2.7", 4000)) as c:
        assert_problem(await c.get("/v1/graphs"), 403, "forbidden")
        assert (await c.get("/healthz")).status_code == 200


async def test_unexpected_errors_are_problems_with_the_request_id(sqlite_url: str, tmp_path: Path) -> None:
    async with secured_app(sqlite_url, tmp_path, auth_disabled=True) as c:
        app = c.app  # type: ignore[attr-defined]

        @app.get("/v1/boom")
        def boom() -> None:
            raise RuntimeError("kaput")

        r = await c.get("/v1/boom", headers={"X-Request-ID": "rid-500"})
        body = assert_problem(r, 500, "internal-error")
        assert r.headers["x-request-id"] == "rid-500" and "kaput" not in json.dumps(body)
