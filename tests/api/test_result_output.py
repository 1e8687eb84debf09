"""What callers receive from every job kind, over HTTP: rounded figures, plain words, CSV exports.

One graph of 90 people (a hub-heavy random graph with labels, segments,
regions, consent and costs) runs every registered job kind through the API and
an in-process worker. The tests then walk each JSON result, each CSV export and
the /v1/job-kinds document:

- no float carries more digits than its kind allows (people: one decimal;
  shares and probabilities: four significant digits; costs: two decimals);
- no internal remark (module paths, "from memory", issue numbers, to-do notes)
  reaches a caller;
- shortlist and forecast results export as CSV, with labels, formula-looking
  text escaped.
"""

from __future__ import annotations

import csv
import io
import math
import re
from collections.abc import Iterator
from typing import Any

import numpy as np
import pytest

from tests.jobs.api_helpers import run_worker_once, worker_for

pytestmark = pytest.mark.anyio

N = 90
#: Phrases that are notes to ourselves, never words for a caller.
INTERNAL = re.compile(
    r"from memory|\bissue\b|#\d{2,}|\bTODO\b|\bFIXME\b|\bXXX\b|search notes|common practice"
    r"|\b(service|storage|tests)\.[a-z_]+|\b[a-z_]+\.py\b|_kernels?\b|numba",
    re.IGNORECASE,
)


@pytest.fixture
def db_url(sqlite_url: str) -> str:
    return sqlite_url


def _graph_csvs() -> tuple[str, str]:
    rng = np.random.default_rng(5)
    hubs = rng.pareto(1.2, N) + 1.0
    p = hubs / hubs.sum()
    pairs = set()
    while len(pairs) < 260:
        a, b = (int(x) for x in rng.choice(N, 2, p=p))
        if a != b:
            pairs.add((min(a, b), max(a, b)))
    edges = "source,target,weight\n" + "".join(f"p{a},p{b},{1 + (a * b) % 4}\n" for a, b in sorted(pairs))
    stores = ["North", "South", "East"]
    rows = []
    for i in range(N):
        label = "=HYPERLINK(1)" if i == 0 else f"Person {i}"
        rows.append(f"p{i},{label},{stores[i % 3]},{'west' if i % 2 else 'east'},"
                    f"{'false' if i % 4 == 1 else 'true'},{1.0 + (i % 7) / 3:.4f}\n")
    nodes = "id,label,segment,region,consent,cost\n" + "".join(rows)
    return edges, nodes


async def _setup(client) -> str:  # type: ignore[no-untyped-def]
    r = await client.post("/v1/graphs", json={"name": "output", "directed": False})
    assert r.status_code == 201, r.text
    gid = str(r.json()["id"])
    edges, nodes = _graph_csvs()
    r = await client.post(f"/v1/graphs/{gid}/versions", params={"part": "edges"}, content=edges,
                          headers={"Content-Type": "text/csv"})
    assert r.status_code == 201, r.text
    r = await client.post(f"/v1/graphs/{gid}/versions", params={"part": "nodes", "mode": "append"},
                          content=nodes, headers={"Content-Type": "text/csv"})
    assert r.status_code == 201, r.text
    return gid


WC = {"probability": {"scheme": "weighted_cascade"}}
PARAMS: dict[str, dict[str, Any]] = {
    "profile": {},
    "scores": {"measures": ["degree", "pagerank", "betweenness"]},
    "shortlist": {"budget": 4, **WC},
    "forecast": {"seed_sets": {"chosen": ["p1", "p2", "p3"], "other": ["p10", "p20"]}, "simulations": 400, **WC},
    "recommendations": {"nodes": ["p1", "p2"], "limit": 5},
    "link_evaluation": {"methods": ["adamic_adar"], "k": 10},
    "referral_asks": {"adopters": ["p1", "p2", "p3", "p5"], **WC},
}


async def _run(client, gid: str, kind: str, params: dict[str, Any]) -> str:  # type: ignore[no-untyped-def]
    r = await client.post(f"/v1/graphs/{gid}/jobs", json={"kind": kind, "params": params})
    assert r.status_code == 202, r.text
    jid = str(r.json()["id"])
    assert await run_worker_once(worker_for(client)) is not None
    job = (await client.get(f"/v1/jobs/{jid}")).json()
    assert job["status"] == "succeeded", job
    return jid


def _floats(doc: Any, path: str = "") -> Iterator[tuple[str, float]]:
    if isinstance(doc, float):
        yield path, doc
    elif isinstance(doc, dict):
        for k, v in doc.items():
            if k != "params":  # the caller's own input, echoed as given
                yield from _floats(v, f"{path}.{k}")
    elif isinstance(doc, list):
        for i, v in enumerate(doc):
            yield from _floats(v, f"{path}[{i}]")


def _strings(doc: Any, path: str = "") -> Iterator[tuple[str, str]]:
    if isinstance(doc, str):
        yield path, doc
    elif isinstance(doc, dict):
        for k, v in doc.items():
            yield from _strings(v, f"{path}.{k}")
    elif isinstance(doc, list):
        for i, v in enumerate(doc):
            yield from _strings(v, f"{path}[{i}]")


def short_enough(x: float) -> bool:
    """At most four significant digits, or at most one decimal (people), or a whole number."""
    if not math.isfinite(x) or x == int(x):
        return True
    return float(f"{x:.4g}") == x or round(x, 1) == x or round(x, 2) == x


def _people_one_decimal(x: float) -> bool:
    return round(x, 1) == x


async def test_every_kind_rounded_and_in_plain_words(client) -> None:  # type: ignore[no-untyped-def]
    gid = await _setup(client)
    kinds = (await client.get("/v1/job-kinds")).json()["items"]
    assert {k["name"] for k in kinds} >= set(PARAMS)
    for k in kinds:  # the job-kinds document itself
        for path, text in _strings({"summary": k["summary"], "result": k["result_description"],
                                    "params": k["params_schema"]}):
            assert not INTERNAL.search(text), (k["name"], path, text)
    for kind, params in PARAMS.items():
        jid = await _run(client, gid, kind, params)
        body = (await client.get(f"/v1/jobs/{jid}/result")).json()
        for path, x in _floats(body):
            assert short_enough(x), (kind, path, x)
        for path, text in _strings(body):
            if ".params" not in path and not path.startswith((".job_id", ".created_at")):
                assert not INTERNAL.search(text), (kind, path, text)
        if kind in ("shortlist", "forecast"):
            reach = body["expected_reach"] if kind == "shortlist" else body["forecasts"][0]["expected_reach"]
            for key in ("mean", "ci_low", "ci_high"):
                assert _people_one_decimal(reach[key]), (kind, key, reach[key])
        r = await client.get(f"/v1/jobs/{jid}/result.csv")
        if r.status_code == 406:
            continue
        assert r.status_code == 200, (kind, r.text)
        for row in csv.DictReader(io.StringIO(r.text)):
            for col, cell in row.items():
                assert not INTERNAL.search(cell or ""), (kind, col, cell)
                try:
                    x = float(cell)
                except ValueError:
                    continue
                assert short_enough(x), (kind, col, cell)


async def test_shortlist_and_forecast_csv_exports(client) -> None:  # type: ignore[no-untyped-def]
    gid = await _setup(client)
    jid = await _run(client, gid, "shortlist", {"budget": 4, **WC, "method": "top_degree"})
    body = (await client.get(f"/v1/jobs/{jid}/result")).json()
    assert all(s["label"] == f"Person {s['node_id'][1:]}" or s["node_id"] == "p0" for s in body["seeds"])
    r = await client.get(f"/v1/jobs/{jid}/result.csv")
    assert r.status_code == 200 and r.headers["content-type"].startswith("text/csv")
    assert f'filename="shortlist-{jid}.csv"' in r.headers["content-disposition"]
    rows = list(csv.DictReader(io.StringIO(r.text)))
    assert list(rows[0]) == ["rank", "node_id", "label", "segment", "region", "gain", "cumulative_reach",
                             "reason"]
    assert [row["node_id"] for row in rows] == [s["node_id"] for s in body["seeds"]]
    for row, s in zip(rows, body["seeds"]):
        assert float(row["cumulative_reach"]) == s["cumulative_reach"]
        assert row["segment"] in ("North", "South", "East") and row["region"] in ("east", "west")
        assert row["reason"]
    # p0 is the best-connected person with a formula-looking label; the export defuses it.
    jid = await _run(client, gid, "shortlist", {"budget": 2, **WC, "method": "top_degree", "must_include": ["p0"]})
    text = (await client.get(f"/v1/jobs/{jid}/result.csv")).text
    assert "'=HYPERLINK(1)" in text and ",=HYPERLINK" not in text

    jid = await _run(client, gid, "forecast", PARAMS["forecast"])
    body = (await client.get(f"/v1/jobs/{jid}/result")).json()
    assert body["forecasts"][0]["top_nodes"][0]["label"]
    r = await client.get(f"/v1/jobs/{jid}/result.csv")
    assert r.status_code == 200
    rows = list(csv.DictReader(io.StringIO(r.text)))
    assert list(rows[0]) == ["seed_set", "figure", "segment", "people"]
    got = {(row["seed_set"], row["figure"], row["segment"]): float(row["people"]) for row in rows}
    for f in body["forecasts"]:
        assert got[(f["name"], "expected reach (mean)", "")] == f["expected_reach"]["mean"]
        assert got[(f["name"], "90% of campaigns reach at least", "")] == f["percentiles"]["p5"]
        assert got[(f["name"], "90% of campaigns reach at most", "")] == f["percentiles"]["p95"]
        for s in f["segment_reach"]:
            assert got[(f["name"], "expected reach in segment", s["segment"])] == s["expected"]


async def test_kinds_without_a_csv_export_say_which_have_one(client) -> None:  # type: ignore[no-untyped-def]
    gid = await _setup(client)
    jid = await _run(client, gid, "profile", {})
    r = await client.get(f"/v1/jobs/{jid}/result.csv")
    assert r.status_code == 406
    assert "shortlist" in r.json()["detail"] and "forecast" in r.json()["detail"]


def test_probability_bounds_are_true_as_printed() -> None:
    from service.usecases._shortlist_result import _at_least

    # 1 - n^-l for n = 90, l = 1 (IMM's default confidence, closed form) and near-certain bounds:
    # rounded down, so "at least" never claims more than holds, and never prints "1".
    assert _at_least(1 - 90 ** -1.0) == "98.88%"
    assert _at_least(1 - 1e-12) == "99.99%" and _at_least(0.5) == "50.00%"
    assert _at_least(None) == "an unstated level"


async def test_guarantee_text_never_claims_probability_one(client) -> None:  # type: ignore[no-untyped-def]
    gid = await _setup(client)
    jid = await _run(client, gid, "shortlist", {"budget": 3, **WC, "method": "imm", "l": 5})
    g = (await client.get(f"/v1/jobs/{jid}/result")).json()["guarantee"]
    assert "probability at least 99.99%" in g["summary"], g["summary"]  # 1 - 90^-5 (and more) rounds down
    assert not re.search(r"probability at least 1\b", g["summary"])
