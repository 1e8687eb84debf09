"""The OpenAPI document: FastAPI's, finished in one place so a generated client can use all of it.

What is added to what FastAPI writes from the routes:

- **Operation ids**: short verbs (``create_graph``, ``upload_version``, ``get_rankings``)
  from :data:`OPERATION_IDS`, the route function's name otherwise.
- **Problems**: every 4xx and 5xx answer of every operation is
  ``application/problem+json`` with the ``Problem`` schema (RFC 9457 members and the
  extension members this service uses); every operation also lists ``500`` and, on
  ``/v1``, ``405`` with its ``Allow`` header.
- **Headers**: ``Location`` on the 201, 202 and replayed 200 answers of the
  operations that create (:data:`CREATES`), ``ETag`` and ``Cache-Control`` on the answers of operations that honour
  ``If-None-Match`` (those that list ``304``), ``Retry-After`` on every ``429``.
- **Security**: the bearer API key (RFC 6750) on every ``/v1`` operation.
- **Cursors**: every ``cursor`` query parameter has the custom format ``cursor``:
  a string only the service makes (a page's ``next_cursor``).
- **Results**: a kind registered from ``job_kind_modules`` with a ``result`` model
  joins the ``JobResult`` union (the built-in kinds' models are in ``schemas/results.py``).
- **Files**: every body that is not JSON (CSV, NDJSON, GraphML uploads, CSV exports,
  SVG plots) is ``{"type": "string", "format": "binary"}`` under its own media type.
"""

from __future__ import annotations

from typing import Any

from fastapi import FastAPI
from fastapi.openapi.utils import get_openapi
from fastapi.routing import APIRoute

from service.jobs import registry

from .schemas.common import Problem

__all__ = ["OPERATION_IDS", "install_openapi", "build_openapi", "operation_id"]

#: Route function name -> operation id, where the function's own name is not the verb a caller wants.
OPERATION_IDS = {
    "healthz": "get_health",
    "readyz": "get_readiness",
    "read_metrics": "get_metrics",
    "read_graph": "get_graph",
    "create_version": "upload_version",
    "read_version": "get_version",
    "read_job": "get_job",
    "read_job_result": "get_job_result",
    "read_job_result_csv": "export_job_result_csv",
    "read_plot": "get_plot",
    "read_schedule": "get_schedule",
    "read_latest_result": "get_schedule_latest_result",
    "read_webhook": "get_webhook",
    "list_recommendations": "get_recommendations",
    "create_next_contacts": "rank_next_contacts",
    "list_rankings": "get_rankings",
    "read_node": "get_node",
    "list_communities": "get_communities",
}

#: Operations whose 201 (202 for a job), and 200 on an idempotent replay, carry ``Location``.
CREATES = {"create_graph", "upload_version", "create_job", "create_schedule", "create_webhook", "create_campaign"}

PROBLEM_REF = {"$ref": "#/components/schemas/Problem"}
_STRING = {"type": "string"}
_HEADERS = {
    "Location": {"description": "The URL of the resource made (or found again, on a replay).", "schema": _STRING},
    "ETag": {"description": "Send it back as `If-None-Match` to get a 304 while it holds.", "schema": _STRING},
    "Cache-Control": {"description": "`no-cache`: revalidate with `If-None-Match`.", "schema": _STRING},
    "Retry-After": {"description": "Seconds to wait before trying again.", "schema": {"type": "integer"}},
    "Allow": {"description": "The methods this path answers.", "schema": _STRING},
}


def _header(*names: str) -> dict[str, Any]:
    return {n: _HEADERS[n] for n in names}


def _mark_cursor(param: dict[str, Any]) -> None:
    """A page cursor is opaque: declared as the custom format ``cursor`` (only the service makes them)."""
    schema = param.get("schema", {})
    for branch in [schema, *schema.get("anyOf", [])]:
        if branch.get("type") == "string":
            branch["format"] = "cursor"
    param["description"] = "`next_cursor` of the previous page, as given (it is opaque)."


def _finish_operation(path: str, method: str, op: dict[str, Any]) -> None:
    for param in op.get("parameters", []):
        if param.get("in") == "query" and param.get("name") == "cursor":
            _mark_cursor(param)
    responses: dict[str, Any] = op.setdefault("responses", {})
    responses.setdefault("500", {"description": "Internal error"})
    if path.startswith("/v1/"):
        responses.setdefault("405", {"description": "Method not allowed on this path"})
        op["security"] = [{"bearerAuth": []}]
    revalidates = "304" in responses
    for code, answer in responses.items():
        if code[0] in "45" and not _own_error_body(answer):
            answer["content"] = {"application/problem+json": {"schema": PROBLEM_REF}}
            if code == "429":
                answer["headers"] = {**answer.get("headers", {}), **_header("Retry-After")}
            if code == "405":
                answer["headers"] = {**answer.get("headers", {}), **_header("Allow")}
            continue
        for kind, media in (answer.get("content") or {}).items():
            _text_schema(kind, media)
        if op.get("operationId") in CREATES and code in ("200", "201", "202"):
            answer["headers"] = {**answer.get("headers", {}), **_header("Location")}
        if revalidates and code in ("200", "304"):
            answer["headers"] = {**answer.get("headers", {}), **_header("ETag", "Cache-Control")}
    for kind, media in op.get("requestBody", {}).get("content", {}).items():
        _text_schema(kind, media)


def _own_error_body(answer: dict[str, Any]) -> bool:
    """An error answer a route declared with its own JSON model (``/readyz``'s 503), not a problem."""
    ref = (answer.get("content") or {}).get("application/json", {}).get("schema", {}).get("$ref", "")
    return bool(ref) and ref != PROBLEM_REF["$ref"]


def _is_json(media_type: str) -> bool:
    return media_type == "application/json" or media_type.endswith("+json")


def _text_schema(media_type: str, media: dict[str, Any]) -> None:
    """A body that is not JSON is a string of bytes: a file to send or to save."""
    if not _is_json(media_type):
        media["schema"] = {**_STRING, "format": "binary"}


def build_openapi(app: FastAPI) -> dict[str, Any]:
    schema = get_openapi(
        title=app.title,
        version=app.version,
        summary=app.summary,
        description=app.description,
        routes=app.routes,
    )
    components = schema.setdefault("components", {})
    schemas = components.setdefault("schemas", {})
    schemas["Problem"] = Problem.model_json_schema(ref_template="#/components/schemas/{model}")
    for name, sub in schemas["Problem"].pop("$defs", {}).items():
        schemas.setdefault(name, sub)
    components.setdefault("securitySchemes", {})["bearerAuth"] = {
        "type": "http",
        "scheme": "bearer",
        "description": "An API key from `bellwether keys create`.",
    }
    paths: dict[str, Any] = schema.get("paths", {})
    for path, operations in paths.items():
        for method, op in operations.items():
            _finish_operation(path, method, op)
    _add_kind_results(app, schemas)
    # FastAPI's own validation-error schemas are not used: a 422 is a Problem.
    for unused in ("HTTPValidationError", "ValidationError"):
        schemas.pop(unused, None)
    return schema


def _add_kind_results(app: FastAPI, schemas: dict[str, Any]) -> None:
    """Kinds from ``job_kind_modules`` that set ``result`` join the ``JobResult`` union.

    Their model must have ``kind: Literal["<name>"]``, as the built-in result models do.
    """
    union = schemas.get("JobResult")
    if union is None:
        return
    registry.import_kind_modules(app.state.settings.job_kind_modules)
    for kind in sorted(registry.REGISTRY.values(), key=lambda k: k.name):
        model = kind.result
        if model is None or kind.name in union["discriminator"]["mapping"]:
            continue
        own = model.model_json_schema(ref_template="#/components/schemas/{model}")
        for name, sub in own.pop("$defs", {}).items():
            schemas.setdefault(name, sub)
        schemas[model.__name__] = own
        ref = f"#/components/schemas/{model.__name__}"
        union["oneOf"].append({"$ref": ref})
        union["discriminator"]["mapping"][kind.name] = ref


def operation_id(route: APIRoute) -> str:
    """The operation id of a route (FastAPI's ``generate_unique_id_function``)."""
    return OPERATION_IDS.get(route.name, route.name)


def install_openapi(app: FastAPI) -> None:
    """Serve :func:`build_openapi`'s document at ``/openapi.json`` (built once, on first use)."""

    def openapi() -> dict[str, Any]:
        if not app.openapi_schema:
            app.openapi_schema = build_openapi(app)
        return app.openapi_schema

    app.openapi = openapi  # type: ignore[method-assign]
