"""NDJSON and JSON readers: records, id rules, bad input with line/record numbers."""

from __future__ import annotations

import io
import json

import numpy as np
import pytest

from service.intake import (
    EmptyUpload,
    Interner,
    MissingColumn,
    UnknownColumn,
    UploadError,
    read_edges_json,
    read_edges_ndjson,
    read_nodes_json,
    read_nodes_ndjson,
)
from service.intake import tables


def ndjson(*records: object) -> bytes:
    return b"".join(json.dumps(r).encode() + b"\n" for r in records)


def read_nd(body: bytes, interner: Interner | None = None, **kw: object):
    it = Interner() if interner is None else interner
    return read_edges_ndjson(io.BytesIO(body), it, **kw), it  # type: ignore[arg-type]


def read_js(doc: object, interner: Interner | None = None, **kw: object):
    it = Interner() if interner is None else interner
    body = doc if isinstance(doc, bytes) else json.dumps(doc).encode()
    return read_edges_json(io.BytesIO(body), it, **kw), it  # type: ignore[arg-type]


def nd_fails(body: bytes, **kw: object) -> UploadError:
    with pytest.raises(UploadError) as info:
        read_nd(body, **kw)
    return info.value


def js_fails(doc: object, **kw: object) -> UploadError:
    with pytest.raises(UploadError) as info:
        read_js(doc, **kw)
    return info.value


# ------------------------------------------------------------------ NDJSON edges


def test_ndjson_edges_with_blank_lines():
    body = b'{"source": "a", "target": "b", "weight": 2}\n\n  \n{"source": "b", "target": "c"}\n'
    t, it = read_nd(body)
    assert it.ids == ["a", "b", "c"]
    assert t.src.tolist() == [0, 1] and t.dst.tolist() == [1, 2]
    assert t.weight.tolist() == [2.0, 1.0] and t.probability is None and t.records == 2


def test_ndjson_integer_ids_become_decimal_text():
    t, it = read_nd(ndjson({"source": 7, "target": "x"}, {"source": -3, "target": 10**20},
                           {"source": "7", "target": "-3"}))
    assert it.ids == ["7", "x", "-3", "100000000000000000000"]
    assert t.src.tolist() == [0, 2, 0] and t.dst.tolist() == [1, 3, 2]
    assert "self-loop" in nd_fails(ndjson({"source": 7, "target": "7"})).reason


@pytest.mark.parametrize("bad", [1.5, True, None, {"a": 1}, [1]])
def test_ndjson_ids_must_be_strings_or_integers(bad):
    err = nd_fails(ndjson({"source": "a", "target": "b"}, {"source": bad, "target": "b"}))
    assert (err.line, err.column, err.unit) == (2, "source", "line")


def test_ndjson_unicode_ids_and_bom():
    body = "\ufeff".encode() + ndjson({"source": "Zoë", "target": "李雷"})
    _, it = read_nd(body)
    assert it.ids == ["Zoë", "李雷"]


def test_ndjson_weights_may_be_numeric_strings():
    t, _ = read_nd(ndjson({"source": "a", "target": "b", "weight": "2.5"}))
    assert t.weight.tolist() == [2.5]


@pytest.mark.parametrize(
    ("record", "column", "reason"),
    [
        ({"source": "a", "target": "b", "weight": "x"}, "weight", "positive number"),
        ({"source": "a", "target": "b", "weight": 0}, "weight", "positive number"),
        ({"source": "a", "target": "b", "weight": -1}, "weight", "positive number"),
        ({"source": "a", "target": "b", "weight": True}, "weight", "positive number"),
        ({"source": "a", "target": "b", "weight": [1]}, "weight", "positive number"),
        ({"source": "a", "target": "b", "probability": 2}, "probability", "[0, 1]"),
        ({"source": "a", "target": "a"}, "target", "self-loop"),
        ({"source": "", "target": "b"}, "source", "empty node id"),
        ({"source": "a"}, "target", "missing required column"),
        ({"source": "a", "target": "b", "colour": "red"}, "colour", "unknown column"),
    ],
)
def test_ndjson_bad_records_name_line_and_column(record, column, reason):
    body = ndjson({"source": "x", "target": "y", "probability": 0.5} if "probability" in record
                  else {"source": "x", "target": "y"}) + b"\n" + ndjson(record)
    err = nd_fails(body)
    assert (err.line, err.column) == (3, column)
    assert reason in err.reason


def test_ndjson_nan_and_infinity_literals_refused():
    # Python's json accepts the non-standard NaN / Infinity tokens; the value rules refuse them.
    err = nd_fails(b'{"source": "a", "target": "b", "weight": NaN}\n')
    assert err.line == 1 and err.column == "weight"
    err = nd_fails(b'{"source": "a", "target": "b", "weight": Infinity}\n')
    assert err.line == 1


def test_ndjson_unknown_columns_can_be_ignored():
    t, _ = read_nd(ndjson({"source": "a", "target": "b", "note": 1}), extra_columns="ignore")
    assert t.records == 1
    assert isinstance(nd_fails(ndjson({"source": "a", "target": "b", "note": 1})), UnknownColumn)


def test_ndjson_probability_all_or_nothing():
    err = nd_fails(ndjson({"source": "a", "target": "b", "probability": 0.1},
                          {"source": "b", "target": "c"}))
    assert err.line == 2 and err.column == "probability"
    err = nd_fails(ndjson({"source": "a", "target": "b"},
                          {"source": "b", "target": "c", "probability": 0.1}))
    assert err.line == 2


def test_ndjson_syntax_and_shape_errors():
    err = nd_fails(b'{"source": "a", "target": "b"}\n{"source": \n')
    assert err.line == 2 and "invalid JSON" in err.reason
    err = nd_fails(b'{"source": "a", "target": "b"}\n["a", "b"]\n')
    assert err.line == 2 and "JSON object" in err.reason
    err = nd_fails(b'{"source": "a", "target": "\xff"}\n')
    assert err.line == 1 and "UTF-8" in err.reason


def test_ndjson_explicit_weight_column_must_appear():
    with pytest.raises(MissingColumn) as info:
        read_nd(ndjson({"source": "a", "target": "b"}), weight="count")
    assert info.value.column == "count"


def test_ndjson_empty_bodies():
    for body in (b"", b"\n\n"):
        with pytest.raises(EmptyUpload):
            read_nd(body)


def test_ndjson_earliest_fault_across_blocks():
    # Record 2 has a bad weight; a later record is not an object. The block holding
    # record 2 is checked before the later fault is raised.
    recs = [{"source": "a", "target": "b"}, {"source": "a", "target": "c", "weight": -1}]
    body = ndjson(*recs) + b"42\n"
    err = nd_fails(body)
    assert err.line == 2 and err.column == "weight"


def test_ndjson_many_records_span_blocks(monkeypatch):
    block = 50
    monkeypatch.setattr(tables, "BLOCK_RECORDS", block)
    n = 3 * block + 10
    recs = [{"source": f"s{i}", "target": f"t{i}", "weight": 1 + i % 3} for i in range(n)]
    recs[2 * block + 5]["weight"] = "bad"
    err = nd_fails(ndjson(*recs))
    assert err.line == 2 * block + 6
    recs[2 * block + 5]["weight"] = 2
    t, it = read_nd(ndjson(*recs))
    assert t.records == n and len(it) == 2 * n and t.weight[:3].tolist() == [1.0, 2.0, 3.0]


def test_ndjson_failure_restores_interner():
    it = Interner.from_ids(["a"])
    with pytest.raises(UploadError):
        read_nd(ndjson({"source": "a", "target": "b"}, {"source": "c", "target": "c"}), it)
    assert it.ids == ["a"]


# ------------------------------------------------------------------ JSON edges


def test_json_array_and_object_forms():
    recs = [{"source": "a", "target": "b", "probability": 0.25}]
    for doc in (recs, {"edges": recs, "nodes": [{"id": "z"}], "directed": True}):
        t, it = read_js(doc)
        assert it.ids == ["a", "b"]  # "nodes" is not read here
        assert t.probability is not None and t.probability.tolist() == [0.25]


def test_json_errors_give_record_numbers():
    recs = [{"source": "a", "target": "b"}, {"source": "b", "target": "c"},
            {"source": "c", "target": "d", "weight": "heavy"}]
    err = js_fails({"edges": recs})
    assert (err.line, err.unit, err.column, err.value) == (3, "record", "weight", "heavy")
    err = js_fails([{"source": "a", "target": "b"}, "oops"])
    assert (err.line, err.unit) == (2, "record")
    err = js_fails([{"source": 1.0, "target": "b"}])
    assert (err.line, err.column) == (1, "source")


def test_json_syntax_error_gives_physical_line():
    err = js_fails(b'[\n{"source": "a", "target": "b"},\n{"source": }\n]')
    assert (err.line, err.unit) == (3, "line") and "invalid JSON" in err.reason


@pytest.mark.parametrize("doc", [{"nodes": []}, 42, "edges", {"edges": {"a": 1}}])
def test_json_wrong_top_level(doc):
    err = js_fails(doc)
    assert "JSON array" in err.reason


def test_json_empty_array():
    with pytest.raises(EmptyUpload):
        read_js([])
    with pytest.raises(EmptyUpload):
        read_js({"edges": []})


# ------------------------------------------------------------------ nodes


def test_ndjson_nodes():
    body = ndjson(
        {"id": "a", "consent": True, "cost": 2, "segment": "gold", "tier": 3, "tags": ["x"]},
        {"id": 5, "consent": "no", "value": "1.5", "label": None},
        {"id": "a", "consent": None, "region": "north"},
    )
    it = Interner.from_ids(["5"])
    t = read_nodes_ndjson(io.BytesIO(body), it)
    assert it.ids == ["5", "a"]
    assert t.index.tolist() == [0, 1]  # "a" kept its last record, after "5"
    assert t.consent.tolist() == [0, -1]
    np.testing.assert_array_equal(t.cost, [np.nan, np.nan])
    np.testing.assert_array_equal(t.value, [1.5, np.nan])
    assert t.region == [None, "north"] and t.segment == [None, None]
    assert t.extra == {"tier": [None, None], "tags": [None, None]}
    assert set(t.columns) == {"consent", "cost", "segment", "value", "label", "region"}


@pytest.mark.parametrize(
    ("record", "column"),
    [
        ({"id": "a", "consent": "perhaps"}, "consent"),
        ({"id": "a", "consent": 2}, "consent"),
        ({"id": "a", "cost": -1}, "cost"),
        ({"id": "a", "cost": True}, "cost"),
        ({"id": "a", "value": "lots"}, "value"),
        ({"id": "a", "segment": 1.5}, "segment"),
        ({"id": "a", "region": {"x": 1}}, "region"),
        ({"id": ""}, "id"),
        ({"id": False}, "id"),
        ({"name": "a"}, "id"),
    ],
)
def test_bad_node_records(record, column):
    body = ndjson({"id": "ok"}, record)
    with pytest.raises(UploadError) as info:
        read_nodes_ndjson(io.BytesIO(body), Interner())
    assert (info.value.line, info.value.column) == (2, column)
    with pytest.raises(UploadError) as info:
        read_nodes_json(io.BytesIO(json.dumps([{"id": "ok"}, record]).encode()), Interner())
    assert (info.value.line, info.value.column, info.value.unit) == (2, column, "record")


def test_json_nodes_forms_and_id_mapping():
    doc = {"nodes": [{"person": "p1", "consent": 1}], "edges": []}
    it = Interner()
    t = read_nodes_json(io.BytesIO(json.dumps(doc).encode()), it, id="person")
    assert it.ids == ["p1"] and t.consent.tolist() == [1] and t.columns == ("consent",)
    with pytest.raises(EmptyUpload):
        read_nodes_json(io.BytesIO(b"[]"), Interner())
