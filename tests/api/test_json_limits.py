"""JSON bodies that nest too deep or hold huge numbers are refused with a problem, on every JSON POST route."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import httpx
import pytest

from service.api.json_limits import MAX_DEPTH, MAX_NUMBER_CHARS, MAX_STRING_CHARS, measure
from tests.jobs.api_helpers import assert_problem, make_graph

pytestmark = pytest.mark.anyio


@pytest.fixture
def db_url(sqlite_url: str) -> str:
    return sqlite_url


def nested(depth: int) -> str:
    """A JSON list nested ``depth`` deep: ``[[[...]]]``."""
    return "[" * depth + "]" * depth


def _routes(gid: str) -> dict[str, tuple[str, str]]:
    """(path, JSON body template with ``@`` where the hostile value goes) per JSON POST route."""
    return {
        "graphs": ("/v1/graphs", '{"name": "g", "directed": false, "description": @}'),
        "jobs": (f"/v1/graphs/{gid}/jobs", '{"kind": "profile", "params": {"x": @}}'),
        "next-contacts": (f"/v1/graphs/{gid}/next-contacts", '{"adopters": ["a"], "random_seed": @}'),
        "schedules": (
            "/v1/schedules",
            '{"graph_id": "' + gid + '", "cron": "0 2 * * *", "job": {"kind": "profile", "params": {"x": @}}}',
        ),
        "webhooks": ("/v1/webhooks", '{"url": "https://192.0.2.1/h", "events": ["job.failed"], "description": @}'),
    }


def _around(template: str) -> int:
    """How deep the ``@`` of a template sits."""
    head = template.split("@")[0]
    return sum(head.count(c) for c in "[{") - sum(head.count(c) for c in "]}")


async def _post(client: httpx.AsyncClient, path: str, body: str, **headers: str) -> httpx.Response:
    return await client.post(path, content=body.encode(), headers={"Content-Type": "application/json", **headers})


@pytest.mark.parametrize("depth", [MAX_DEPTH + 1, 260, 900, 5000])
async def test_deep_nesting_is_a_problem_on_every_json_route(client: Any, depth: int) -> None:
    gid = await make_graph(client)
    for name, (path, template) in _routes(gid).items():
        for extra in ({}, {"Idempotency-Key": f"deep-{name}-{depth}"}):
            r = await _post(client, path, template.replace("@", nested(depth)), **extra)
            body = assert_problem(r, 422, "json-limit")
            assert (body["depth"], body["max_depth"]) == (depth + _around(template), MAX_DEPTH), name
            assert f"{body['depth']} levels deep" in body["detail"]


@pytest.mark.parametrize("digits", [MAX_NUMBER_CHARS + 1, 4301, 5000])
async def test_huge_numbers_are_a_problem_on_every_json_route(client: Any, digits: int) -> None:
    gid = await make_graph(client)
    for number in ("9" * digits, "-" + "1" * (digits - 1), "1." + "5" * (digits - 2), "1e" + "9" * (digits - 2)):
        for name, (path, template) in _routes(gid).items():
            r = await _post(client, path, template.replace("@", number), **{"Idempotency-Key": f"n-{name}"})
            body = assert_problem(r, 422, "json-limit")
            assert (body["number_chars"], body["max_number_chars"]) == (len(number), MAX_NUMBER_CHARS), name


async def test_long_strings_are_a_problem_but_ordinary_bodies_pass(client: Any) -> None:
    gid = await make_graph(client)
    path, template = _routes(gid)["graphs"]
    r = await _post(client, path, template.replace("@", '"' + "x" * (MAX_STRING_CHARS + 1) + '"'))
    assert assert_problem(r, 422, "json-limit")["string_chars"] == MAX_STRING_CHARS + 1
    # Within every limit: the route's own validation answers (a list is not a description).
    r = await _post(client, path, template.replace("@", nested(MAX_DEPTH - 1)))
    assert assert_problem(r, 422, "validation-error")["errors"][0]["loc"] == ["body", "description"]
    r = await _post(client, f"/v1/graphs/{gid}/jobs", '{"kind": "profile", "params": {"random_seed": 12345678901234567}}')
    assert r.status_code == 202, r.text
    # Not JSON at all: the route's own validation-error, not a json-limit.
    r = await _post(client, path, '{"name": [[[')
    assert assert_problem(r, 422, "validation-error")


def test_measure_counts_brackets_outside_strings_only() -> None:
    shape = measure(b'{"a": "[[[[{{{", "b": [1, -2.5e+10, {"c": "x\\"y"}]}')
    assert (shape.depth, shape.longest_number, shape.longest_string) == (3, 8, 7)
    assert measure(b"12").depth == 0 and measure(b"").depth == 0


def test_uploads_are_not_measured(tmp_path: Path) -> None:
    from service.api.middleware import is_upload

    assert is_upload("POST", "/v1/graphs/abc/versions")
