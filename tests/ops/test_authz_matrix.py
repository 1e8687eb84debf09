"""Authorisation matrix over every route of the OpenAPI document.

Each operation is called without a key (401), with a key of the right
tenant lacking the scope the route needs (403), and with another tenant's
key on the first tenant's resources (404, and nothing changed). The routes
come from the app's own OpenAPI document, so a route added later is covered
at once; one that the rules below do not classify (an unknown path
parameter, a new route without parameters, a body the matrix cannot fill)
fails the test until it is added here.
"""

from __future__ import annotations

import json
import re
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import pytest

from service.api.auth import ADMIN_PREFIXES, required_scope
from storage.repo import jobs as jr
from storage.repo import webhooks as webhook_repo
from tests.ops.helpers import PROBLEM, bearer, make_key, secured_app

pytestmark = pytest.mark.anyio

ALL_SCOPES = ("read", "write", "admin")
#: Operations endpoints outside /v1 (no key on loopback; /metrics is covered in test_metrics.py).
OPEN = {("GET", "/healthz"), ("GET", "/readyz"), ("GET", "/metrics")}
#: Path parameters naming a tenant's resource: the other tenant must get 404 on them.
RESOURCE_PARAMS = {"graph_id": "graph", "job_id": "job", "schedule_id": "schedule", "webhook_id": "webhook",
                   "campaign_id": "campaign"}
#: Other path parameters: a value that exists inside the resource.
INNER_PARAMS = {"node_id": "a", "number": "1", "name": "reach"}
#: Routes without path parameters, and what another tenant sees there.
COLLECTIONS = {
    ("GET", "/v1/graphs"): "list",
    ("GET", "/v1/jobs"): "list",
    ("GET", "/v1/schedules"): "list",
    ("GET", "/v1/webhooks"): "list",
    ("GET", "/v1/job-kinds"): "catalog",
    ("POST", "/v1/graphs"): "create",
    ("POST", "/v1/webhooks"): "create",
    ("POST", "/v1/schedules"): "create-on-graph",  # names a graph in the body: 404 on another tenant's
}
#: Bodies for operations that require one: (content type, body); "{graph_id}" is filled in.
BODIES: dict[tuple[str, str], tuple[str, Any]] = {
    ("POST", "/v1/graphs"): ("application/json", {"name": "m", "directed": False}),
    ("POST", "/v1/graphs/{graph_id}/versions"): ("text/csv", "source,target\nx,y\n"),
    ("POST", "/v1/graphs/{graph_id}/jobs"): ("application/json", {"kind": "profile", "params": {}}),
    ("POST", "/v1/graphs/{graph_id}/next-contacts"): ("application/json", {"adopters": ["a"]}),
    ("POST", "/v1/graphs/{graph_id}/campaigns"): ("application/json",
                                                  {"name": "spring", "started_at": "2026-03-01T09:00:00Z"}),
    ("PUT", "/v1/graphs/{graph_id}/campaigns/{campaign_id}/log"): ("text/csv", "person,role,round\na,seed,0\nb,adopter,1\n"),
    ("POST", "/v1/schedules"): (
        "application/json",
        {"graph_id": "{graph_id}", "cron": "0 2 * * *", "timezone": "UTC", "job": {"kind": "profile"}},
    ),
    # An address literal that is not public: refused without any lookup or traffic.
    ("POST", "/v1/webhooks"): ("application/json", {"url": "https://192.0.2.1/hook", "events": ["job.succeeded"]}),
}


def operations(doc: dict[str, Any]) -> list[tuple[str, str, dict[str, Any]]]:
    return [(m.upper(), p, op) for p, ops in doc["paths"].items() for m, op in ops.items()]


def classify(method: str, path: str, op: dict[str, Any]) -> str:
    """'open', 'collection' or 'resource'; AssertionError naming what the matrix lacks."""
    if (method, path) in OPEN:
        return "open"
    assert path.startswith("/v1/"), f"{method} {path}: outside /v1 and not an operations route; classify it"
    params = re.findall(r"{([^}]+)}", path)
    unknown = [p for p in params if p not in RESOURCE_PARAMS and p not in INNER_PARAMS]
    assert not unknown, f"{method} {path}: path parameters {unknown} unknown to the matrix; add them"
    needs_body = bool(op.get("requestBody", {}).get("required"))
    assert not needs_body or (method, path) in BODIES, f"{method} {path}: needs a body; add one to BODIES"
    if not params:
        assert (method, path) in COLLECTIONS, f"{method} {path}: a new route without parameters; classify it"
        return "collection"
    assert any(p in RESOURCE_PARAMS for p in params), f"{method} {path}: names no tenant resource; classify it"
    return "resource"


def fill(path: str, ids: dict[str, str], op: dict[str, Any]) -> str:
    """The path with tenant A's resources; an inner parameter with an enum gets its first value."""
    values = {**INNER_PARAMS, **ids}
    for p in op.get("parameters", []):
        schema = p.get("schema", {})
        enum = schema.get("enum") or next((s["enum"] for s in schema.get("anyOf", []) if "enum" in s), None)
        if p.get("in") == "path" and p["name"] in INNER_PARAMS and enum:
            values[p["name"]] = str(enum[0])
    return re.sub(r"{([^}]+)}", lambda m: values.get(m.group(1), "x"), path)


def request_kwargs(method: str, template: str, ids: dict[str, str]) -> dict[str, Any]:
    if (method, template) not in BODIES:
        return {}
    ctype, body = BODIES[(method, template)]
    if ctype == "application/json":
        text = json.dumps(body).replace("{graph_id}", ids["graph_id"])
        return {"content": text, "headers": {"Content-Type": ctype}}
    return {"content": body, "headers": {"Content-Type": ctype}}


def test_scope_table_matches_the_issue() -> None:
    # Admin manages keys, webhooks and schedules; reads need read, writes need write.
    assert set(ADMIN_PREFIXES) >= {"/v1/webhooks", "/v1/schedules", "/v1/keys"}
    assert required_scope("GET", "/v1/graphs/g") == "read"
    assert required_scope("DELETE", "/v1/graphs/g") == "write"
    assert required_scope("GET", "/v1/schedules/s") == "admin"
    assert required_scope("POST", "/v1/graphs/g/next-contacts") == "read"  # a read posted with a body


async def test_every_route_no_key_wrong_scope_and_other_tenant(sqlite_url: str, tmp_path: Path) -> None:
    owner = make_key(sqlite_url, "tenant-a", list(ALL_SCOPES))
    other = make_key(sqlite_url, "tenant-b", list(ALL_SCOPES))
    lacking = {s: make_key(sqlite_url, "tenant-a", [x for x in ALL_SCOPES if x != s]) for s in ALL_SCOPES}
    async with secured_app(sqlite_url, tmp_path, rate_limit_per_second=0) as c:
        app = c.app  # type: ignore[attr-defined]
        a = bearer(owner)
        # Tenant A's resources: a graph with a version, a job, a schedule, a webhook.
        gid = (await c.post("/v1/graphs", json={"name": "a", "directed": False}, headers=a)).json()["id"]
        r = await c.post(f"/v1/graphs/{gid}/versions", content="source,target\na,b\nb,c\nc,a\n",
                         headers={"Content-Type": "text/csv", **a})
        assert r.status_code == 201, r.text
        job = (await c.post(f"/v1/graphs/{gid}/jobs", json={"kind": "profile"}, headers=a)).json()["id"]
        r = await c.post("/v1/schedules", headers=a, json={
            "graph_id": gid, "cron": "0 2 * * *", "timezone": "UTC", "job": {"kind": "profile"}})
        assert r.status_code == 201, r.text
        sid = r.json()["id"]
        with jr.write_session(app.state.sessionmaker) as db:
            hook = webhook_repo.add_webhook(db, tenant_id="tenant-a", url="https://hooks.invalid/x",
                                            events=["job.succeeded"], secret="s", now=datetime.now(UTC))
            db.commit()
        r = await c.post(f"/v1/graphs/{gid}/campaigns", headers=a,
                         json={"name": "spring", "started_at": "2026-03-01T09:00:00Z"})
        assert r.status_code == 201, r.text
        cid = r.json()["id"]
        ids = {"graph_id": gid, "job_id": job, "schedule_id": sid, "webhook_id": hook.id, "campaign_id": cid}

        doc = (await c.get("/openapi.json")).json()
        ops = operations(doc)
        kinds = {(m, p): classify(m, p, op) for m, p, op in ops}  # fails first on anything unclassified
        checked = 0
        for method, template, op in ops:
            kind = kinds[(method, template)]
            if kind == "open":
                continue
            path = fill(template, ids, op)
            where = f"{method} {template}"
            kw = request_kwargs(method, template, ids)
            extra_headers = kw.pop("headers", {})

            r = await c.request(method, path, headers=extra_headers, **kw)
            assert r.status_code == 401, f"{where} without a key: {r.status_code}"
            assert r.headers["content-type"] == PROBLEM and r.headers["www-authenticate"].startswith("Bearer")

            need = required_scope(method, path)
            r = await c.request(method, path, headers={**extra_headers, **bearer(lacking[need])}, **kw)
            assert r.status_code == 403, f"{where} with a key lacking {need!r}: {r.status_code}"
            assert r.json()["type"] == "/problems/forbidden" and r.json()["scope"] == need

            r = await c.request(method, path, headers={**extra_headers, **bearer(other)}, **kw)
            if kind == "resource" or COLLECTIONS.get((method, template)) == "create-on-graph":
                assert r.status_code == 404, f"{where} with another tenant's key: {r.status_code} {r.text}"
                assert r.headers["content-type"] == PROBLEM
            elif COLLECTIONS[(method, template)] == "list":
                assert r.status_code == 200 and isinstance(r.json()["items"], list), f"{where}: {r.text}"
            else:
                assert r.status_code < 500, f"{where}: {r.status_code}"
            sent = path + str(kw.get("content", ""))
            for ident in ids.values():  # an id tenant B did not send must not come back
                assert ident in sent or ident not in r.text, f"{where} shows tenant A's {ident} to tenant B"
            checked += 1
        assert checked >= 25

        # Nothing of tenant A was changed by tenant B's deletes and cancels.
        assert (await c.get(f"/v1/graphs/{gid}", headers=a)).status_code == 200
        assert (await c.get(f"/v1/jobs/{job}", headers=a)).json()["status"] == "queued"
        assert (await c.get(f"/v1/schedules/{sid}", headers=a)).status_code == 200
        assert (await c.get(f"/v1/webhooks/{hook.id}", headers=a)).status_code == 200
        assert (await c.get(f"/v1/graphs/{gid}/campaigns/{cid}", headers=a)).status_code == 200
        assert (await c.get(f"/v1/graphs/{gid}/versions", headers=a)).json()["items"][-1]["number"] == 1
        # And the owner gets no 5xx, 401 or 403 on any read.
        for method, template, op in ops:
            if method == "GET" and kinds[(method, template)] != "open":
                r = await c.get(fill(template, ids, op), headers=a)
                assert r.status_code < 500 and r.status_code not in (401, 403), f"GET {template}: {r.status_code}"


def test_an_unclassified_route_fails_the_matrix() -> None:
    with pytest.raises(AssertionError, match="unknown to the matrix"):
        classify("GET", "/v1/graphs/{graph_id}/secrets/{secret_id}", {})
    with pytest.raises(AssertionError, match="without parameters"):
        classify("GET", "/v1/everything", {})
    with pytest.raises(AssertionError, match="needs a body"):
        classify("POST", "/v1/graphs/{graph_id}/forecasts", {"requestBody": {"required": True}})
    with pytest.raises(AssertionError, match="outside /v1"):
        classify("GET", "/admin", {})
