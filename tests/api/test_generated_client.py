"""A client generated from the live OpenAPI document by openapi-python-client drives the core workflow.

Generation runs locally (no network): the document is written to a temporary
folder, the generator writes a package beside it, and the test imports that
package and talks to the app over ASGI with it: create a graph, upload a CSV,
run scores, read rankings, run a shortlist and a forecast, and read a problem.
"""

from __future__ import annotations

import importlib
import json
import subprocess
import sys
from collections.abc import Iterator
from pathlib import Path
from types import ModuleType
from typing import Any

import networkx as nx
import pytest

from tests.jobs.api_helpers import run_worker_once, worker_for

pytest.importorskip("openapi_python_client", reason="openapi-python-client is in the test extras")

pytestmark = [pytest.mark.anyio, pytest.mark.slow]

PACKAGE = "bellwether_generated_client"
# The generator reads JSON bodies itself; file bodies it handles as bytes (File) under these types.
CONFIG = """content_type_overrides:
  text/csv: application/octet-stream
  application/x-ndjson: application/octet-stream
  application/graphml+xml: application/octet-stream
  image/svg+xml: application/octet-stream
"""
EDGES_CSV = "source,target\n" + "".join(f"{u},{v}\n" for u, v in nx.karate_club_graph().edges())


@pytest.fixture
def db_url(sqlite_url: str) -> str:
    return sqlite_url


@pytest.fixture
def generated(tmp_path_factory: pytest.TempPathFactory, client: Any) -> Iterator[ModuleType]:
    folder = tmp_path_factory.mktemp("client")
    doc = folder / "openapi.json"
    doc.write_text(json.dumps(client.app.openapi()))
    (folder / "config.yaml").write_text(CONFIG)
    run = subprocess.run(
        [sys.executable, "-m", "openapi_python_client", "generate", "--path", str(doc),
         "--output-path", str(folder / PACKAGE), "--meta", "none", "--config", str(folder / "config.yaml")],
        capture_output=True, text=True, timeout=300,
    )
    assert (folder / PACKAGE / "client.py").exists(), run.stdout + run.stderr
    # Every operation made it into the client (a skipped one is named in a warning).
    assert "WARNING parsing" not in run.stdout + run.stderr, run.stdout + run.stderr
    sys.path.insert(0, str(folder))
    try:
        yield importlib.import_module(PACKAGE)
    finally:
        sys.path.remove(str(folder))
        for name in [m for m in sys.modules if m == PACKAGE or m.startswith(PACKAGE + ".")]:
            del sys.modules[name]


def _api(pkg: ModuleType, tag: str, operation: str) -> Any:
    return importlib.import_module(f"{PACKAGE}.api.{tag}.{operation}")


def _model(pkg: ModuleType, name: str) -> Any:
    return getattr(importlib.import_module(f"{PACKAGE}.models"), name)


async def _run_job(pkg: ModuleType, api: Any, client: Any, gid: str, kind: str, params: dict[str, Any]) -> Any:
    job_create, params_model = _model(pkg, "JobCreate"), _model(pkg, "JobCreateParams")
    job = await _api(pkg, "jobs", "create_job").asyncio(
        gid, client=api, body=job_create(kind=kind, params=params_model.from_dict(params))
    )
    assert type(job).__name__ == "JobRead" and job.kind == kind, job
    await run_worker_once(worker_for(client))
    done = await _api(pkg, "jobs", "get_job").asyncio(job.id, client=api)
    assert done.status == "succeeded", done.error
    return await _api(pkg, "jobs", "get_job_result").asyncio(job.id, client=api)


async def test_generated_client_drives_the_core_workflow(generated: ModuleType, client: Any) -> None:
    pkg = generated
    api = pkg.Client(base_url="http://testserver", raise_on_unexpected_status=True)
    api.set_async_httpx_client(client)
    types = importlib.import_module(f"{PACKAGE}.types")

    graph = await _api(pkg, "graphs", "create_graph").asyncio(
        client=api, body=_model(pkg, "GraphCreate")(name="karate club", directed=False)
    )
    assert type(graph).__name__ == "GraphRead" and graph.latest_version is None

    # httpx's AsyncClient takes bytes, not a blocking file object, as a body (a sync client takes both).
    upload = await _api(pkg, "graphs", "upload_version").asyncio_detailed(
        graph.id, client=api, body=types.File(payload=EDGES_CSV.encode(), file_name="edges.csv")  # type: ignore[arg-type]
    )
    assert upload.status_code == 201 and upload.headers["location"] == f"/v1/graphs/{graph.id}/versions/1"
    assert (upload.parsed.nodes, upload.parsed.edges) == (34, 78)  # Zachary's karate club (NetworkX)

    scores = await _run_job(pkg, api, client, graph.id, "scores", {"measures": ["degree", "pagerank"]})
    assert type(scores).__name__ == "ScoresResult" and scores.nodes == 34

    page = await _api(pkg, "scores", "get_rankings").asyncio(graph.id, client=api, measure="degree", limit=3)
    assert type(page).__name__ == "ScorePage"
    # Source: NetworkX degree of Zachary's karate club: node 33 has 17 ties, node 0 has 16.
    assert [(i.node_id, i.score) for i in page.items[:2]] == [("33", 17.0), ("0", 16.0)]

    shortlist = await _run_job(pkg, api, client, graph.id, "shortlist", {"budget": 2})
    assert type(shortlist).__name__ == "ShortlistResult"
    seeds = shortlist.seeds
    assert [type(s).__name__ for s in seeds] == ["ShortlistSeed", "ShortlistSeed"]
    assert [s.rank for s in seeds] == [1, 2] and all(s.reason for s in seeds)
    assert type(shortlist.expected_reach).__name__ == "ReachEstimate"

    forecast = await _run_job(pkg, api, client, graph.id, "forecast",
                              {"seeds": [s.node_id for s in seeds], "simulations": 200})
    assert type(forecast).__name__ == "ForecastResult"
    reach = forecast.forecasts[0].expected_reach
    assert type(reach).__name__ == "Interval" and reach.ci_low <= reach.mean <= reach.ci_high
    assert reach.confidence == 0.95 and forecast.forecasts[0].by_round[0].round_ == 0

    # Errors parse into the Problem model, extension members included.
    missing = await _api(pkg, "graphs", "get_graph").asyncio("g_missing", client=api)
    assert type(missing).__name__ == "Problem"
    assert (missing.type_, missing.status, missing.instance) == ("/problems/not-found", 404, "/v1/graphs/g_missing")
    unknown = await _api(pkg, "jobs", "create_job").asyncio(
        graph.id, client=api, body=_model(pkg, "JobCreate")(kind="astrology")
    )
    assert type(unknown).__name__ == "Problem" and unknown.type_ == "/problems/unknown-kind"
    assert unknown.field == "kind" and "profile" in unknown.detail


async def test_generated_package_has_short_operation_names(generated: ModuleType) -> None:
    folder = Path(generated.__file__).parent / "api"
    names = {p.stem for p in folder.rglob("*.py") if p.stem != "__init__"}
    assert {"create_graph", "upload_version", "create_job", "get_rankings", "get_job_result"} <= names
    assert all(len(n) <= 30 for n in names), sorted(names, key=len)[-3:]
