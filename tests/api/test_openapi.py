"""The OpenAPI document: valid, every error a Problem, the headers and media types callers use, short ids."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import pytest

from tests.conftest import make_settings
from tests.jobs.api_helpers import assert_problem, make_graph

pytestmark = pytest.mark.anyio


@pytest.fixture
def db_url(sqlite_url: str) -> str:
    return sqlite_url


@pytest.fixture(scope="module")
def doc() -> dict[str, Any]:
    from service.app import create_app

    return create_app(make_settings("sqlite://", Path("/nonexistent"))).openapi()


def operations(doc: dict[str, Any]) -> list[tuple[str, str, dict[str, Any]]]:
    return [(p, m, op) for p, ops in doc["paths"].items() for m, op in ops.items()]


def test_document_passes_the_openapi_validator(doc: dict[str, Any]) -> None:
    from openapi_spec_validator import validate

    validate(doc)  # raises on the first error


def test_node_id_is_a_declared_path_parameter(doc: dict[str, Any]) -> None:
    for path in ("/v1/graphs/{graph_id}/nodes/{node_id}", "/v1/graphs/{graph_id}/nodes/{node_id}/recommendations"):
        declared = {(p["name"], p["in"]) for p in doc["paths"][path]["get"]["parameters"]}
        assert {("graph_id", "path"), ("node_id", "path")} <= declared, path


def test_every_error_answer_is_a_problem(doc: dict[str, Any]) -> None:
    problem = doc["components"]["schemas"]["Problem"]
    assert set(problem["required"]) == {"type", "title", "status", "detail", "instance"}
    assert {"errors", "field", "retry_after", "depth", "max_depth"} <= set(problem["properties"])
    checked = 0
    for path, method, op in operations(doc):
        assert "500" in op["responses"], (method, path)
        for code, answer in op["responses"].items():
            if code[0] in "45" and path != "/readyz":
                assert answer["content"] == {
                    "application/problem+json": {"schema": {"$ref": "#/components/schemas/Problem"}}
                }, (method, path, code)
                checked += 1
    assert checked > 200
    assert "HTTPValidationError" not in doc["components"]["schemas"]


def test_operation_ids_are_short_verbs(doc: dict[str, Any]) -> None:
    ids = {(m, p): op["operationId"] for p, m, op in operations(doc)}
    assert ids[("post", "/v1/graphs")] == "create_graph"
    assert ids[("post", "/v1/graphs/{graph_id}/versions")] == "upload_version"
    assert ids[("post", "/v1/graphs/{graph_id}/jobs")] == "create_job"
    assert ids[("get", "/v1/graphs/{graph_id}/rankings")] == "get_rankings"
    assert ids[("get", "/v1/jobs/{job_id}/result")] == "get_job_result"
    assert len(set(ids.values())) == len(ids) and all(len(i) <= 30 for i in ids.values())


def test_headers_callers_rely_on_are_declared(doc: dict[str, Any]) -> None:
    paths = doc["paths"]
    for path in ("/v1/graphs", "/v1/graphs/{graph_id}/versions", "/v1/schedules", "/v1/webhooks"):
        assert "Location" in paths[path]["post"]["responses"]["201"]["headers"], path
    for code in ("200", "202"):
        assert "Location" in paths["/v1/graphs/{graph_id}/jobs"]["post"]["responses"][code]["headers"]
    # An idempotent replay answers 200 with the first answer.
    for path in ("/v1/schedules", "/v1/webhooks"):
        assert "Location" in paths[path]["post"]["responses"]["200"]["headers"], path
    result = paths["/v1/jobs/{job_id}/result"]["get"]["responses"]
    assert "ETag" in result["200"]["headers"] and "ETag" in result["304"]["headers"]
    assert "ETag" in paths["/v1/graphs/{graph_id}/rankings"]["get"]["responses"]["200"]["headers"]
    for path, method, op in operations(doc):
        if path.startswith("/v1/"):
            assert "Retry-After" in op["responses"]["429"]["headers"], (method, path)
            assert "Allow" in op["responses"]["405"]["headers"], (method, path)


def test_file_bodies_are_declared_with_their_media_types(doc: dict[str, Any]) -> None:
    binary = {"type": "string", "format": "binary"}
    upload = doc["paths"]["/v1/graphs/{graph_id}/versions"]["post"]["requestBody"]["content"]
    assert [upload[t]["schema"] for t in ("text/csv", "application/x-ndjson", "application/graphml+xml")] == [binary] * 3
    assert doc["paths"]["/v1/jobs/{job_id}/plots/{name}.svg"]["get"]["responses"]["200"]["content"] == {
        "image/svg+xml": {"schema": binary}
    }
    assert doc["paths"]["/v1/jobs/{job_id}/result.csv"]["get"]["responses"]["200"]["content"]["text/csv"] == {
        "schema": binary
    }
    rankings = doc["paths"]["/v1/graphs/{graph_id}/rankings"]["get"]["responses"]["200"]["content"]
    assert rankings["text/csv"] == {"schema": binary} and "$ref" in rankings["application/json"]["schema"]


async def test_booleans_and_integers_are_strict_in_json_bodies(client: Any) -> None:
    gid = await make_graph(client)
    for body in ({"name": "g", "directed": False, "allow_self_loops": 0},
                 {"name": "g", "directed": "false"}, {"name": "g", "directed": 1}):
        r = await client.post("/v1/graphs", json=body)
        assert assert_problem(r, 422, "validation-error")["errors"][0]["type"] == "bool_type", body
    for body in ({"kind": "profile", "priority": False}, {"kind": "profile", "priority": "3"},
                 {"kind": "profile", "version": "1"}, {"kind": "profile", "priority": 2.5}):
        r = await client.post(f"/v1/graphs/{gid}/jobs", json=body)
        assert assert_problem(r, 422, "validation-error")["errors"][0]["loc"][1] in ("priority", "version"), body
    r = await client.post(f"/v1/graphs/{gid}/next-contacts", json={"adopters": ["a"], "strict": 1})
    assert assert_problem(r, 422, "validation-error")["errors"][0]["loc"] == ["body", "strict"]
    r = await client.post("/v1/schedules", json={"graph_id": gid, "cron": "0 2 * * *", "priority": True,
                                                 "job": {"kind": "profile"}})
    assert assert_problem(r, 422, "validation-error")["errors"][0]["loc"] == ["body", "priority"]
    # A kind's params are as strict: its model's booleans and integers take no 0, "7" or false.
    for params in ({"random_seed": "7"}, {"bootstrap": False}, {"bootstrap": 1.5}):
        r = await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "profile", "params": params})
        assert assert_problem(r, 422, "invalid-parameter")["errors"][0]["loc"][0] == "params", params
    r = await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "recommendations", "params": {"contactable": 0}})
    assert assert_problem(r, 422, "invalid-parameter")["errors"][0]["loc"] == ["params", "contactable"]
    # The same values with their declared types pass; 3.0 is the integer 3, as in JSON Schema.
    r = await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": "profile", "priority": 3.0, "version": 1})
    assert r.status_code == 202 and r.json()["priority"] == 3, r.text


async def test_schedule_replay_answers_200_as_declared(client: Any) -> None:
    gid = await make_graph(client)
    body = {"graph_id": gid, "cron": "0 2 * * *", "job": {"kind": "profile"}}
    first = await client.post("/v1/schedules", json=body, headers={"Idempotency-Key": "s-1"})
    again = await client.post("/v1/schedules", json=body, headers={"Idempotency-Key": "s-1"})
    assert (first.status_code, again.status_code) == (201, 200)
    assert again.json()["id"] == first.json()["id"] and again.headers["location"] == first.headers["location"]


async def test_unknown_query_parameters_are_named_in_a_problem(client: Any) -> None:
    r = await client.get("/v1/graphs", params={"limt": "5"})
    body = assert_problem(r, 422, "invalid-parameter")
    assert body["field"] == "limt" and "limit" in body["detail"]
    gid = await make_graph(client)
    r = await client.get(f"/v1/graphs/{gid}/rankings", params={"measure": "degree", "sort": "asc"})
    assert assert_problem(r, 422, "invalid-parameter")["field"] == "sort"
    assert (await client.get("/v1/graphs", params={"limit": "5"})).status_code == 200


async def test_an_unknown_graph_is_a_404_before_the_other_checks(client: Any) -> None:
    missing = "g_missing"
    for method, path, kwargs in [
        ("post", f"/v1/graphs/{missing}/jobs", {"json": {"kind": "astrology"}}),
        ("get", f"/v1/graphs/{missing}/rankings", {"params": {"measure": "fame", "version": "x"}}),
        ("get", f"/v1/graphs/{missing}/communities", {"params": {"measure": ""}}),
        ("get", f"/v1/graphs/{missing}/nodes/a", {"params": {"version": "0"}}),
        ("get", f"/v1/graphs/{missing}/versions/abc", {}),
        ("post", f"/v1/graphs/{missing}/next-contacts", {"json": {"adopters": ["a"]}, "params": {"limit": "3"}}),
        ("post", "/v1/schedules", {"json": {"graph_id": missing, "cron": "bad", "job": {"kind": "astrology"}}}),
    ]:
        r = await client.request(method.upper(), path, **kwargs)
        assert assert_problem(r, 404, "not-found")["resource"] == "graph", (method, path)


def test_location_only_where_something_is_made(doc: dict[str, Any]) -> None:
    for path, method, op in operations(doc):
        for code, answer in op["responses"].items():
            if "Location" in answer.get("headers", {}):
                assert op["operationId"].startswith(("create_", "upload_")), (method, path, code)
    assert "headers" not in doc["paths"]["/v1/graphs/{graph_id}/next-contacts"]["post"]["responses"]["200"]
