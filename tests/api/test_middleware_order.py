"""The operations middleware in app.py check a request in README "Errors" order.

Rate (429) before body size and shape (413, 422 json-limit) before the key and
its scope (401, 403) before the graph (404); and a refused request still
carries its request id and is written to the access log.
"""

from __future__ import annotations

import io
import json
import logging
from pathlib import Path

import httpx
import pytest

from service.api.json_limits import MAX_DEPTH
from service.telemetry.logs import JsonFormatter, RequestIdFilter
from tests.ops.helpers import PROBLEM, bearer, make_key, secured_app

pytestmark = pytest.mark.anyio

JSON = {"Content-Type": "application/json"}


def slug(r: httpx.Response) -> tuple[int, str]:
    assert r.headers["content-type"] == PROBLEM, r.text
    return r.status_code, str(r.json()["type"]).removeprefix("/problems/")


async def test_rate_then_body_then_key_then_graph(sqlite_url: str, tmp_path: Path) -> None:
    reader = make_key(sqlite_url, "t1", ["read"])
    big = json.dumps({"name": "x" * 2000, "directed": False})
    deep = "[" * (MAX_DEPTH + 8) + "]" * (MAX_DEPTH + 8)
    stream = io.StringIO()
    handler = logging.StreamHandler(stream)
    handler.setFormatter(JsonFormatter())
    handler.addFilter(RequestIdFilter())
    access = logging.getLogger("bellwether.access")
    access.addHandler(handler)
    try:
        async with secured_app(
            sqlite_url, tmp_path, max_body_bytes=1000, rate_limit_per_second=0.01, rate_limit_burst=3
        ) as c:
            # No key: the body is judged before the missing key.
            assert slug(await c.post("/v1/graphs", content=big, headers=JSON)) == (413, "payload-too-large")
            assert slug(await c.post("/v1/graphs", content=deep, headers=JSON)) == (422, "json-limit")
            assert slug(await c.post("/v1/graphs", json={"name": "g", "directed": False})) == (401, "unauthorized")
            # The caller's bucket (burst 3) is now empty: the rate is judged before the body.
            r = await c.post("/v1/graphs", content=big, headers={**JSON, "X-Request-ID": "rid-429"})
            assert slug(r) == (429, "rate-limited") and r.headers["retry-after"] == "100"  # closed form: 1 / 0.01 per s
            assert r.headers["x-request-id"] == "rid-429"
            # A key with the wrong scope is refused before the unknown graph is looked up.
            r = await c.post("/v1/graphs/nope/jobs", json={"kind": "profile"}, headers=bearer(reader))
            assert slug(r) == (403, "forbidden")
            assert slug(await c.get("/v1/graphs/nope", headers=bearer(reader))) == (404, "not-found")
    finally:
        access.removeHandler(handler)
    lines = [json.loads(line) for line in stream.getvalue().splitlines()]
    assert [line["status"] for line in lines] == [413, 422, 401, 429, 403, 404]
    refused = lines[3]
    assert refused["request_id"] == "rid-429" and refused["method"] == "POST"
    # Refused before routing, the line still names the route the request was for.
    assert [line["route"] for line in lines[:4]] == ["/v1/graphs"] * 4
