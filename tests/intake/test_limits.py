"""Size limits of every reader: nesting, numbers, ids, labels, values; folding repeats while reading."""

from __future__ import annotations

import io
import json

import numpy as np
import pytest

from service.intake import (
    MAX_DEPTH,
    MAX_NUMBER_CHARS,
    MAX_RECORD_VALUES,
    MAX_TOKEN_BYTES,
    Interner,
    SizeLimits,
    TooDeep,
    TooLong,
    UploadError,
    merge_duplicates,
    read_edges_csv,
    read_edges_json,
    read_edges_ndjson,
    read_graphml,
    read_nodes_csv,
    read_nodes_json,
    read_nodes_ndjson,
)
from service.intake import tables

GRAPHML_HEAD = (
    b'<graphml xmlns="http://graphml.graphdrawing.org/xmlns">\n'
    b'<key id="w" for="edge" attr.name="weight" attr.type="double"/>\n'
    b'<key id="n" for="node" attr.name="note" attr.type="string"/>\n'
    b'<graph edgedefault="directed">\n'
)
GRAPHML_TAIL = b"</graph></graphml>\n"


def fails(reader, body: bytes, **kw: object) -> UploadError:  # type: ignore[no-untyped-def]
    it = Interner.from_ids(["kept"])
    with pytest.raises(UploadError) as info:
        reader(io.BytesIO(body), it, **kw)
    assert it.ids == ["kept"]  # a refused upload adds no node
    return info.value


# ------------------------------------------------------------------ nesting


def deep(n: int) -> bytes:
    return b"[" * n + b"]" * n


@pytest.mark.parametrize("n", [MAX_DEPTH + 1, 1000, 100_000])
def test_json_nesting_refused_with_line_and_depth(n):
    body = b'{"edges": [\n{"source": "a", "target": "b"},\n' + deep(n) + b"\n]}"
    err = fails(read_edges_json, body)
    assert isinstance(err, TooDeep)
    # The records array is level 2, so the body's own brackets reach past the limit on line 3.
    assert (err.line, err.unit, err.depth, err.limit) == (3, "line", MAX_DEPTH + 1, MAX_DEPTH)
    assert "at most" in err.reason


def test_json_nesting_at_the_limit_is_read():
    # A node note holding lists nested up to the limit is kept as JSON text.
    value: object = 1
    for _ in range(MAX_DEPTH - 3):  # document array, record object, then the note's lists
        value = [value]
    t = read_nodes_json(io.BytesIO(json.dumps([{"id": "a", "note": value}]).encode()), Interner())
    assert t.extra["note"] == [json.dumps(value)]


def test_json_nesting_in_a_skipped_member_is_refused_too():
    err = fails(read_edges_json, b'{"nodes": ' + deep(1000) + b', "edges": []}')
    assert isinstance(err, TooDeep) and err.line == 1


@pytest.mark.parametrize(
    ("reader", "first"),
    [(read_edges_ndjson, b'{"source": "a", "target": "b"}'), (read_nodes_ndjson, b'{"id": "a"}')],
)
def test_ndjson_nesting_refused_with_line(reader, first):
    body = first + b'\n\n{"x": ' + deep(1000) + b"}\n"
    err = fails(reader, body)
    assert isinstance(err, TooDeep) and (err.line, err.depth) == (3, MAX_DEPTH + 1)


def test_record_with_too_many_values():
    body = json.dumps([{"id": "a", "tags": list(range(MAX_RECORD_VALUES + 5))}]).encode()
    err = fails(read_nodes_json, body)
    assert isinstance(err, TooLong) and err.limit == MAX_RECORD_VALUES


def test_ndjson_line_longer_than_a_mib():
    body = b'{"source": "a", "target": "b"}\n{"source": "' + b"x" * (1 << 20) + b'", "target": "b"}\n'
    err = fails(read_edges_ndjson, body)
    assert isinstance(err, TooLong) and err.line == 2


# ------------------------------------------------------------------ numbers


HUGE = b"1" + b"0" * 4999  # 5,000 digits
LONG_FRACTION = b"0." + b"1" * 200


@pytest.mark.parametrize("number", [HUGE, LONG_FRACTION, b"1" * 101, b"-" + HUGE, b"1e" + b"9" * 200])
def test_long_numbers_refused_in_json_and_ndjson(number):
    ok = b'{"source": "a", "target": "b", "weight": 2}'
    bad = b'{"source": "b", "target": "c", "weight": ' + number + b"}"
    err = fails(read_edges_ndjson, ok + b"\n" + bad + b"\n")
    assert isinstance(err, TooLong) and err.line == 2 and err.limit == MAX_NUMBER_CHARS
    err = fails(read_edges_json, b"[" + ok + b",\n" + bad + b"]")
    assert isinstance(err, TooLong) and (err.line, err.unit) == (2, "line")


def test_a_hundred_character_number_is_read():
    number = "1." + "0" * 98  # 100 characters
    t, _ = read_edges_json(io.BytesIO(f'[{{"source": "a", "target": "b", "weight": {number}}}]'.encode()),
                           Interner()), None
    assert t.weight.tolist() == [1.0]


def test_overflowing_numbers_are_not_finite_and_refused_where_used():
    err = fails(read_edges_json, b'[{"source": "a", "target": "b", "weight": 1e999}]')
    assert (err.line, err.column) == (1, "weight")
    err = fails(read_nodes_ndjson, b'{"id": "a", "score": 1e999}\n')
    assert (err.line, err.column) == (1, "score") and "finite" in err.reason


def test_long_numbers_refused_in_csv():
    body = b"source,target,weight\na,b,1\nb,c," + HUGE + b"\n"
    err = fails(read_edges_csv, body)
    assert isinstance(err, TooLong) and (err.line, err.column) == (3, "weight")
    err = fails(read_edges_csv, b"source,target,probability\na,b,0." + b"5" * 150 + b"\n")
    assert isinstance(err, TooLong) and (err.line, err.column) == (2, "probability")
    err = fails(read_nodes_csv, b"id,cost\na,1\nb," + HUGE + b"\n")
    assert isinstance(err, TooLong) and (err.line, err.column) == (3, "cost")


def test_long_numbers_refused_in_graphml():
    body = (GRAPHML_HEAD + b'<node id="a"/><node id="b"/>\n<edge source="a" target="b">'
            b'<data key="w">' + b"1" * 300 + b"</data></edge>\n" + GRAPHML_TAIL)
    err = fails(read_graphml, body)
    assert isinstance(err, TooLong) and (err.line, err.column) == (6, "weight")


# ------------------------------------------------------------------ ids, labels, values


LONG_ID = "x" * 257


@pytest.mark.parametrize(
    ("reader", "body", "line", "column"),
    [
        (read_edges_csv, f"source,target\na,b\nb,{LONG_ID}\n".encode(), 3, "target"),
        (read_edges_ndjson, json.dumps({"source": LONG_ID, "target": "b"}).encode() + b"\n", 1, "source"),
        (read_edges_json, json.dumps([{"source": "a", "target": "b"},
                                      {"source": "a", "target": LONG_ID}]).encode(), 2, "target"),
        (read_nodes_csv, f"id,segment\na,x\n{LONG_ID},y\n".encode(), 3, "id"),
        (read_nodes_ndjson, json.dumps({"id": LONG_ID}).encode() + b"\n", 1, "id"),
        (read_nodes_json, json.dumps({"nodes": [{"id": LONG_ID}]}).encode(), 1, "id"),
        (read_graphml, GRAPHML_HEAD + f'<node id="{LONG_ID}"/>\n'.encode() + GRAPHML_TAIL, 5, "id"),
        (read_graphml, GRAPHML_HEAD + f'<node id="a"/>\n<edge source="a" target="{LONG_ID}"/>\n'.encode()
         + GRAPHML_TAIL, 6, "target"),
    ],
)
def test_ids_longer_than_the_limit_name_line_and_column(reader, body, line, column):
    err = fails(reader, body)
    assert isinstance(err, TooLong)
    assert (err.line, err.column, err.length, err.limit) == (line, column, 257, 256)
    assert "shorter key" in err.reason


def test_id_limit_is_a_parameter():
    body = f"source,target\na,{'y' * 20}\n".encode()
    err = fails(read_edges_csv, body, limits=SizeLimits(id_chars=10))
    assert (err.line, err.column, err.limit) == (2, "target", 10)
    t = read_edges_csv(io.BytesIO(f"source,target\na,{'y' * 256}\n".encode()), Interner())
    assert t.m == 1  # 256 characters: at the default limit, read


@pytest.mark.parametrize(
    ("body", "column", "limit"),
    [
        (b"id,label\na," + b"l" * 513 + b"\n", "label", 512),
        (b"id,segment\na," + b"s" * 513 + b"\n", "segment", 512),
        (b"id,note\na," + b"n" * 1025 + b"\n", "note", 1024),
        (b"id," + b"c" * 513 + b"\na,1\n", "c" * 80, 512),
    ],
)
def test_labels_values_and_column_names_have_limits(body, column, limit):
    err = fails(read_nodes_csv, body)
    assert isinstance(err, TooLong) and (err.line, err.column, err.limit) == (2, column, limit)


def test_graphml_long_text_stops_at_the_limit():
    body = GRAPHML_HEAD + b'<node id="a"><data key="n">' + b"t" * 5000 + b"</data></node>\n" + GRAPHML_TAIL
    err = fails(read_graphml, body)
    assert isinstance(err, TooLong) and (err.line, err.column, err.limit) == (5, "note", 1024)


def test_graphml_oversized_id_stops_reading_early():
    # A 50 MB id: refused once a MiB of the tag has arrived, not after the XML
    # parser has read (and re-scanned) the whole tag.
    body = GRAPHML_HEAD + b'<node id="' + b"x" * 50_000_000 + b'"/>\n' + GRAPHML_TAIL
    fh = io.BytesIO(body)
    with pytest.raises(TooLong) as info:
        read_graphml(fh, Interner())
    assert info.value.line == 5 and info.value.limit == MAX_TOKEN_BYTES
    assert fh.tell() < 3 * MAX_TOKEN_BYTES  # stopped early: most of the body was never read


# ------------------------------------------------------------------ folding repeats while reading


def fold_with(directed: bool, rule: str):  # type: ignore[no-untyped-def]
    def fold(s, d, w, p):  # type: ignore[no-untyped-def]
        out = merge_duplicates(s, d, w, p, directed=directed, rule=rule, overwrite_input=True)  # type: ignore[arg-type]
        return out[:4]

    return fold


@pytest.mark.parametrize("rule", ["sum", "max", "last"])
@pytest.mark.parametrize("directed", [True, False])
@pytest.mark.parametrize("with_p", [False, True])
def test_folding_while_reading_equals_merging_at_once(monkeypatch, rule, directed, with_p):
    """Reference: merge_duplicates over every record at once (the path without a fold)."""
    monkeypatch.setattr(tables, "FOLD_MIN", 64)
    rng = np.random.default_rng(7)
    m = 5_000
    src, dst = rng.integers(0, 30, m), rng.integers(0, 30, m)
    keep = src != dst
    src, dst = src[keep], dst[keep]
    w = rng.integers(1, 9, src.size)
    p = rng.integers(1, 9, src.size) / 10
    head = "source,target,weight" + (",probability" if with_p else "")
    rows = [f"n{a},n{b},{c}" + (f",{q}" if with_p else "") for a, b, c, q in zip(src, dst, w, p)]
    body = ("\n".join([head, *rows]) + "\n").encode()
    it1, it2 = Interner(), Interner()
    folded = read_edges_csv(io.BytesIO(body), it1, fold=fold_with(directed, rule), block_bytes=512)
    whole = read_edges_csv(io.BytesIO(body), it2, block_bytes=512)
    assert folded.records == whole.records == src.size
    assert folded.m < 2 * 30 * 30  # the buffers held distinct edges, not every record
    a = merge_duplicates(folded.src, folded.dst, folded.weight, folded.probability, directed=directed, rule=rule)  # type: ignore[arg-type]
    b = merge_duplicates(whole.src, whole.dst, whole.weight, whole.probability, directed=directed, rule=rule)  # type: ignore[arg-type]
    assert it1.ids == it2.ids
    for x, y in zip(a[:4], b[:4]):
        if y is None:
            assert x is None
        else:
            np.testing.assert_allclose(x, y, rtol=1e-12)


def test_folding_without_weights_counts_records(monkeypatch):
    monkeypatch.setattr(tables, "FOLD_MIN", 16)
    body = b"source,target\n" + b"a,b\n" * 100 + b"b,c\n"
    t = read_edges_csv(io.BytesIO(body), Interner(), fold=fold_with(True, "sum"), block_bytes=64)
    s, d, w, _, _ = merge_duplicates(t.src, t.dst, t.weight, None, directed=True, rule="sum")
    assert (s.tolist(), d.tolist(), w.tolist(), t.records) == ([0, 1], [1, 2], [100.0, 1.0], 101)


# ------------------------------------------------------------------ where faults are found


def test_json_fault_far_into_the_body_names_its_line():
    # Past the first 64 KiB chunk: the line comes from reading again line by line.
    recs = ",\n".join(json.dumps({"source": f"s{i}", "target": f"t{i}"}) for i in range(5000))
    body = ("[\n" + recs + ',\n{"source": "a", "target": }\n]').encode()
    assert len(body) > 3 * 65536
    err = fails(read_edges_json, body)
    assert (err.line, err.unit) == (5002, "line") and "invalid JSON" in err.reason
    body = ("[\n" + recs + ',\n{"source": "a", "target": "b", "weight": ' + "9" * 150 + "}\n]").encode()
    err = fails(read_edges_json, body)
    assert isinstance(err, TooLong) and err.line == 5002


def test_ndjson_line_with_many_brackets_within_the_depth_is_read_alike():
    # More brackets than the depth limit, but shallow: read by the bounded builder,
    # it gives what json.loads gives.
    record = {"id": "a", "pairs": [[i, i + 1] for i in range(40)], "flag": True, "none": None, "x": 0.25}
    t = read_nodes_ndjson(io.BytesIO(json.dumps(record).encode() + b"\n"), Interner())
    assert t.extra["pairs"] == [json.dumps(record["pairs"])]
    assert t.extra["flag"] == ["true"] and t.extra["x"] == ["0.25"]
