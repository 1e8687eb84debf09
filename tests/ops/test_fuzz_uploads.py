"""Fuzz uploads: hostile values in every format and place, never a 5xx.

The OpenAPI fuzz (test_fuzz.py) sends bodies its schema describes; an upload
body is a file, so this test builds files itself with hypothesis: values
nested up to 3,000 deep, strings up to 300,000 characters, numbers of up to
6,000 digits (with sign, fraction or exponent), and ordinary values, placed
as a node id, a weight, a label or a free column of a CSV, NDJSON, JSON or
GraphML upload of edges or nodes. Every answer must be a 201 or a problem
document of status 4xx. Bounded: ``BELLWETHER_FUZZ_EXAMPLES`` x 10 examples
(80 by default). Run against the readers before the limits, it fails on its
own (a RecursionError and an integer-conversion error, both 500).
"""

from __future__ import annotations

import json
import os
from collections.abc import Iterator
from pathlib import Path
from typing import Any
from xml.sax.saxutils import quoteattr

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from service.app import create_app
from tests.conftest import make_settings

EXAMPLES = 10 * int(os.environ.get("BELLWETHER_FUZZ_EXAMPLES", "8"))
CTYPES = {"csv": "text/csv", "ndjson": "application/x-ndjson", "json": "application/json",
          "graphml": "application/graphml+xml"}


@pytest.fixture(scope="module")
def api(tmp_path_factory: pytest.TempPathFactory) -> Iterator[tuple[Any, str]]:
    from fastapi.testclient import TestClient

    from storage.migrate import upgrade

    folder: Path = tmp_path_factory.mktemp("fuzz-uploads")
    url = f"sqlite:///{folder / 'fuzz.sqlite3'}"
    upgrade(url)
    app = create_app(make_settings(url, folder, rate_limit_per_second=0, max_upload_bytes=4 * 1024 * 1024))
    with TestClient(app, raise_server_exceptions=False, client=("127.0.0.1", 50000)) as client:
        r = client.post("/v1/graphs", json={"name": "fuzz", "directed": True})
        assert r.status_code == 201, r.text
        yield client, r.json()["id"]


def nested(depth: int, kind: str) -> str:
    if kind == "array":
        return "[" * depth + "1" + "]" * depth
    return '{"a": ' * depth + "1" + "}" * depth


# Sizes: just past each limit and far past it, drawn as often as any size in between.
def sizes(*marks: int, top: int) -> st.SearchStrategy[int]:
    return st.one_of(st.sampled_from(marks), st.integers(1, top))


deep_values = st.builds(nested, sizes(33, 1000, 3000, 50_000, top=3000), st.sampled_from(["array", "object"]))
long_strings = sizes(257, 1025, 100_000, 300_000, top=300_000).map(lambda n: json.dumps("x" * n))
huge_numbers = st.builds(
    lambda sign, digits, tail: sign + "1" + "0" * digits + tail,
    st.sampled_from(["", "-"]),
    sizes(100, 4400, 5000, top=6000),
    st.sampled_from(["", ".5", "e10", "e-999", "e" + "9" * 120, ".0" + "1" * 200]),
)
plain = st.one_of(
    st.integers(-10, 10).map(str),
    st.floats(allow_nan=False, allow_infinity=False).map(repr),
    st.text(max_size=20).map(json.dumps),
)
hostile = st.one_of(deep_values, huge_numbers, long_strings, plain)


def body_for(fmt: str, part: str, place: str, raw: str) -> str:
    """An upload whose first record is fine and whose second carries ``raw`` (JSON text) at ``place``."""
    if part == "nodes":
        good: dict[str, str] = {"id": '"ann"', "label": '"A"', "note": '"n"'}
        bad = {"id": '"bob"', "label": '"B"', "note": '"m"'}
        key = {"id": "id", "weight": "note", "label": "label", "extra": "note"}[place]
    else:
        good = {"source": '"ann"', "target": '"bob"', "weight": "1"}
        bad = {"source": '"bob"', "target": '"cy"', "weight": "2"}
        key = {"id": "target", "weight": "weight", "label": "weight", "extra": "colour"}[place]
    bad[key] = raw
    records = [good, bad]
    if fmt in ("ndjson", "json"):
        lines = ["{" + ", ".join(f'"{k}": {v}' for k, v in r.items()) + "}" for r in records]
        if fmt == "ndjson":
            return "\n".join(lines) + "\n"
        return '{"' + part + '": [\n' + ",\n".join(lines) + "\n]}"
    cells = [{k: _text(v) for k, v in r.items()} for r in records]
    if fmt == "csv":
        head = list(cells[1])
        rows = [",".join(_csv_cell(c.get(h, "")) for h in head) for c in cells]
        return ",".join(head) + "\n" + "\n".join(rows) + "\n"
    keys = "".join(
        f'<key id="{k}" for="{"node" if part == "nodes" else "edge"}" attr.name="{k}"/>'
        for k in cells[1] if k not in ("id", "source", "target")
    )
    items = []
    for c in cells:
        data = "".join(f"<data key={quoteattr(k)}>{_xml(v)}</data>" for k, v in c.items()
                       if k not in ("id", "source", "target"))
        if part == "nodes":
            items.append(f"<node id={quoteattr(c['id'])}>{data}</node>")
        else:
            items.append(f"<edge source={quoteattr(c['source'])} target={quoteattr(c['target'])}>{data}</edge>")
    return ('<graphml xmlns="http://graphml.graphdrawing.org/xmlns">' + keys
            + '<graph edgedefault="directed">\n' + "\n".join(items) + "\n</graph></graphml>\n")


def _text(raw: str) -> str:
    """A JSON value as a cell's text: strings unquoted, everything else as written."""
    if raw.startswith('"'):
        try:
            value = json.loads(raw)
        except ValueError:
            return raw
        return value if isinstance(value, str) else raw
    return raw


def _csv_cell(text: str) -> str:
    return '"' + text.replace('"', '""') + '"' if any(c in text for c in ',"\n\r') else text


def _xml(text: str) -> str:
    return text.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")


@given(
    fmt=st.sampled_from(sorted(CTYPES)),
    part=st.sampled_from(["edges", "nodes"]),
    place=st.sampled_from(["id", "weight", "label", "extra"]),
    raw=hostile,
)
@settings(max_examples=EXAMPLES, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow,
                                 HealthCheck.data_too_large])
def test_hostile_uploads_never_answer_5xx(api: tuple[Any, str], fmt: str, part: str, place: str, raw: str) -> None:
    client, gid = api
    body = body_for(fmt, part, place, raw)
    r = client.post(f"/v1/graphs/{gid}/versions", params={"part": part, "mode": "append"},
                    content=body.encode(), headers={"Content-Type": CTYPES[fmt]})
    assert r.status_code < 500, (fmt, part, place, raw[:100], r.text[:300])
    if r.status_code >= 400:
        assert r.headers["content-type"] == "application/problem+json"
        problem = r.json()
        assert problem["status"] == r.status_code and problem["detail"]


@pytest.mark.parametrize("fmt", sorted(CTYPES))
@pytest.mark.parametrize(
    "raw", [nested(1000, "array"), "1" + "0" * 4999, json.dumps("p" * 100_000)],
    ids=["nested-1000", "digits-5000", "string-100k"],
)
def test_the_issue_cases_in_every_format(api: tuple[Any, str], fmt: str, raw: str) -> None:
    """The bodies that answered 500 before the limits, as fixed examples (hypothesis may not draw them)."""
    client, gid = api
    for part in ("edges", "nodes"):
        for place in ("id", "weight", "extra"):
            body = body_for(fmt, part, place, raw)
            r = client.post(f"/v1/graphs/{gid}/versions", params={"part": part, "mode": "append"},
                            content=body.encode(), headers={"Content-Type": CTYPES[fmt]})
            assert r.status_code < 500, (fmt, part, place, r.text[:300])
