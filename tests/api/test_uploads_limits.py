"""Uploads past the size limits, in every format: 422 naming the line, never a 500, no version left.

Each case is an upload that reached an internal error before the limits: nesting a
thousand deep (RecursionError), 5,000-digit numbers, ids of 100k characters
and more, labels and values of any length.
"""

from __future__ import annotations

import json

import pytest

from tests.api.test_graphs import make_graph, upload
from tests.api.test_uploads import assert_problem, versions

pytestmark = pytest.mark.anyio

CSV, NDJSON, JSON, GRAPHML = "text/csv", "application/x-ndjson", "application/json", "application/graphml+xml"
DEEP = "[" * 1000 + "]" * 1000
HUGE = "1" + "0" * 4999  # a number of 5,000 digits
LONG_ID = "p" * 100_000
GRAPHML_HEAD = (
    '<graphml xmlns="http://graphml.graphdrawing.org/xmlns">\n'
    '<key id="w" for="edge" attr.name="weight" attr.type="double"/>\n'
    '<key id="n" for="node" attr.name="note" attr.type="string"/>\n'
    '<graph edgedefault="directed">\n'
)
GRAPHML_TAIL = "</graph></graphml>\n"

# (case, content type, part, body, expected problem members)
CASES = [
    ("json nested 1000 deep", JSON, "edges", '{"edges": ' + DEEP + "}", {"line": 1, "depth": 33, "limit": 32}),
    ("json record nested deep", JSON, "edges",
     '{"edges": [\n{"source": "a", "target": "b", "x": ' + DEEP + "}\n]}", {"line": 2, "depth": 33}),
    ("ndjson line nested 1000 deep", NDJSON, "edges",
     '{"source": "a", "target": "b"}\n{"source": "b", "target": "c", "x": ' + DEEP + "}\n", {"line": 2, "depth": 33}),
    ("json nodes nested deep", JSON, "nodes", '[{"id": "a", "tags": ' + DEEP + "}]", {"line": 1, "depth": 33}),
    ("json 5000-digit weight", JSON, "edges",
     '[{"source": "a", "target": "b"},\n{"source": "b", "target": "c", "weight": ' + HUGE + "}]", {"line": 2}),
    ("ndjson 5000-digit weight", NDJSON, "edges",
     '{"source": "a", "target": "b", "weight": ' + HUGE + "}\n", {"line": 1, "limit": 100}),
    ("ndjson 5000-digit id", NDJSON, "edges", '{"source": ' + HUGE + ', "target": "b"}\n', {"line": 1}),
    ("csv 5000-digit weight", CSV, "edges",
     "source,target,weight\na,b,1\nb,c," + HUGE + "\n", {"line": 3, "column": "weight", "length": 5000}),
    ("csv 5000-digit cost", CSV, "nodes", "id,cost\na," + HUGE + "\n", {"line": 2, "column": "cost"}),
    ("graphml 5000-digit weight", GRAPHML, "edges",
     GRAPHML_HEAD + '<node id="a"/><node id="b"/>\n<edge source="a" target="b"><data key="w">'
     + HUGE + "</data></edge>\n" + GRAPHML_TAIL, {"line": 6, "column": "weight"}),
    ("csv 100k-character id", CSV, "edges", f"source,target\na,b\n{LONG_ID},b\n",
     {"line": 3, "column": "source", "length": 100_000, "limit": 256}),
    ("ndjson 100k-character id", NDJSON, "edges", json.dumps({"source": "a", "target": LONG_ID}) + "\n",
     {"line": 1, "column": "target", "limit": 256}),
    ("json 100k-character id", JSON, "edges", json.dumps({"edges": [{"source": LONG_ID, "target": "b"}]}),
     {"line": 1, "unit": "record", "column": "source"}),
    ("csv nodes 100k-character id", CSV, "nodes", f"id,segment\n{LONG_ID},gold\n", {"line": 2, "column": "id"}),
    ("graphml 100k-character id", GRAPHML, "edges", GRAPHML_HEAD + f'<node id="{LONG_ID}"/>\n' + GRAPHML_TAIL,
     {"line": 5, "column": "id", "limit": 256}),
    ("graphml 5 MB id", GRAPHML, "edges", GRAPHML_HEAD + '<node id="' + "q" * 5_000_000 + '"/>\n' + GRAPHML_TAIL,
     {"line": 5, "limit": 1 << 20}),
    ("csv long label", CSV, "nodes", "id,label\na," + "l" * 600 + "\n", {"line": 2, "column": "label", "limit": 512}),
    ("ndjson long free value", NDJSON, "nodes", json.dumps({"id": "a", "note": "n" * 2000}) + "\n",
     {"line": 1, "column": "note", "limit": 1024}),
    ("csv long column name", CSV, "nodes", "id," + "c" * 600 + "\na,1\n", {"line": 2, "limit": 512}),
    ("json record of 20,000 values", JSON, "nodes", json.dumps([{"id": "a", "tags": list(range(20_000))}]),
     {"line": 1, "limit": 10_000}),
    ("ndjson line over 1 MiB", NDJSON, "edges",
     '{"source": "a", "target": "b"}\n{"source": "' + "s" * (1 << 20) + '", "target": "b"}\n', {"line": 2}),
    ("ndjson infinite free value", NDJSON, "nodes", '{"id": "a", "score": 1e999}\n', {"line": 1, "column": "score"}),
    ("graphml long free value", GRAPHML, "edges",
     GRAPHML_HEAD + '<node id="a"><data key="n">' + "t" * 3000 + "</data></node>\n" + GRAPHML_TAIL,
     {"line": 5, "column": "note", "limit": 1024}),
]


@pytest.mark.parametrize("case,ctype,part,body,fields", CASES, ids=[c[0] for c in CASES])
async def test_oversized_upload_is_a_422_naming_the_line(client, case, ctype, part, body, fields) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client)
    problem = await assert_problem(await upload(client, gid, body, ctype, part=part), 422, "invalid-upload", **fields)
    assert len(problem["detail"]) < 300 and ":" in problem["detail"]  # what is wrong: how to fix it
    assert len(problem.get("value", "")) <= 80
    assert await versions(client, gid) == []
    assert (await client.get(f"/v1/graphs/{gid}")).json()["latest_version"] is None


async def test_limits_follow_the_settings(client) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client)
    body = "source,target\nann,bob\n"
    client.app.state.settings.upload_max_id_chars = 2  # type: ignore[attr-defined]
    problem = await assert_problem(await upload(client, gid, body), 422, "invalid-upload", line=2, limit=2)
    assert "2 characters" in problem["detail"]
    client.app.state.settings.upload_max_id_chars = 3  # type: ignore[attr-defined]
    r = await upload(client, gid, body)
    assert r.status_code == 201, r.text


async def test_ids_at_the_limit_round_trip(client) -> None:  # type: ignore[no-untyped-def]
    gid = await make_graph(client)
    long_id = "é" * 256  # characters, not bytes
    r = await upload(client, gid, f"source,target\n{long_id},b\n".encode())
    assert r.status_code == 201, r.text
    assert r.json()["nodes"] == 2


async def test_repeated_edges_fold_to_the_same_version(client) -> None:  # type: ignore[no-untyped-def]
    # Enough repeats that the reader folds them while reading (1M-record blocks).
    gid = await make_graph(client, directed=True)
    rows = "".join(f"n{i % 7},n{(i * 3 + 1) % 7 + 7},{1 + i % 3}\n" for i in range(1_100_000))
    r = await upload(client, gid, "source,target,weight\n" + rows)
    assert r.status_code == 201, r.text
    made = r.json()
    assert made["origin"]["records"] == 1_100_000
    assert made["edges"] + made["origin"]["duplicates_merged"] == 1_100_000
