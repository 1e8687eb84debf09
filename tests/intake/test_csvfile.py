"""CSV readers: RFC 4180 parsing, bad input with line numbers, streaming memory."""

from __future__ import annotations

import csv
import io
import random
import tracemalloc

import numpy as np
import pytest

from service.intake.limits import SizeLimits
from service.intake import (
    EmptyUpload,
    InvalidOption,
    Interner,
    MissingColumn,
    UnknownColumn,
    UploadError,
    read_edges_csv,
    read_nodes_csv,
)


def edges(body: bytes, interner: Interner | None = None, **kw: object):
    it = Interner() if interner is None else interner
    t = read_edges_csv(io.BytesIO(body), it, **kw)  # type: ignore[arg-type]
    return t, it


def pairs(body: bytes, **kw: object) -> list[tuple[str, str]]:
    t, it = edges(body, **kw)
    return [(it.ids[s], it.ids[d]) for s, d in zip(t.src.tolist(), t.dst.tolist())]


def fails(body: bytes, **kw: object) -> UploadError:
    with pytest.raises(UploadError) as info:
        edges(body, **kw)
    return info.value


# ------------------------------------------------------------------ RFC 4180


def test_crlf_line_breaks():
    # Source: RFC 4180 section 2.1, records delimited by CRLF.
    assert pairs(b"source,target\r\na,b\r\nc,d\r\n") == [("a", "b"), ("c", "d")]


def test_lf_line_breaks_and_no_final_break():
    # Source: RFC 4180 section 2.2, the last record may lack a line break;
    # LF-only files are the common practice relaxation of 2.1.
    assert pairs(b"source,target\na,b\nc,d") == [("a", "b"), ("c", "d")]


def test_header_is_required():
    # Source: RFC 4180 section 2.3 makes the header optional; this service requires it
    # (the column mapping is by name), so a body of data rows misses its columns.
    err = fails(b"a,b\nc,d\n")
    assert isinstance(err, MissingColumn)
    assert err.line == 1 and err.header == ("a", "b")


def test_spaces_are_part_of_the_field():
    # Source: RFC 4180 section 2.4, "Spaces are considered part of a field and
    # should not be ignored."
    assert pairs(b"source,target\n a , b\n") == [(" a ", " b")]


def test_quoted_fields():
    # Source: RFC 4180 section 2.5, fields may be enclosed in double quotes.
    assert pairs(b'"source","target"\n"a","b"\n') == [("a", "b")]


def test_embedded_comma_and_newline():
    # Source: RFC 4180 section 2.6, fields holding commas or line breaks are quoted.
    body = b'source,target\n"x,y","line1\r\nline2"\n"p\nq",r\n'
    assert pairs(body) == [("x,y", "line1\r\nline2"), ("p\nq", "r")]


def test_doubled_quotes():
    # Source: RFC 4180 section 2.7, a quote inside a quoted field is written twice.
    assert pairs(b'source,target\n"say ""hi""",b\n') == [('say "hi"', "b")]


def test_utf8_bom_is_skipped():
    # Source: common practice (spreadsheet exports start UTF-8 CSV with EF BB BF);
    # RFC 4180 does not mention it.
    t, it = edges(b"\xef\xbb\xbfsource,target\r\na,b\r\n")
    assert it.ids == ["a", "b"]


def test_unicode_ids_kept_exactly():
    body = "source,target\nZoë,李雷\n😀,Zoe\u0308\n".encode()
    t, it = edges(body)
    # "Zoë" precomposed and "Zoe" + combining diaeresis are different strings: kept apart.
    assert it.ids == ["Zoë", "李雷", "😀", "Zoe\u0308"]
    assert t.src.tolist() == [0, 2] and t.dst.tolist() == [1, 3]


def test_bare_cr_line_breaks():
    # Source: Python's csv module treats a lone CR as a line break (old Mac files);
    # RFC 4180 section 2.1 only names CRLF.
    assert pairs(b"source,target\ra,b\rc,d\r") == [("a", "b"), ("c", "d")]
    assert fails(b"source,target\ra,b\rc,c\r").line == 3


def test_blank_lines_are_skipped():
    t, it = edges(b"source,target\n\na,b\n\n\nc,d\n\n")
    assert t.records == 2 and it.ids == ["a", "b", "c", "d"]


def test_interning_order_and_reuse_of_previous_ids():
    it = Interner.from_ids(["old", "b"])
    t, _ = edges(b"source,target\nb,new\nnew,old\nz,b\n", it)
    assert it.ids == ["old", "b", "new", "z"]
    assert t.src.tolist() == [1, 2, 3] and t.dst.tolist() == [2, 0, 1]


def test_weight_and_probability_columns():
    t, _ = edges(b"source,target,weight,probability\na,b,2.5,0\nb,c,1e3,1\n")
    assert t.weight.tolist() == [2.5, 1000.0]
    assert t.probability is not None and t.probability.tolist() == [0.0, 1.0]
    assert t.records == 2 and t.src.dtype == np.int32 and t.weight.dtype == np.float64


def test_no_weight_column_gives_ones_and_no_probability():
    t, _ = edges(b"source,target\na,b\n")
    assert t.weight.tolist() == [1.0] and t.probability is None


def test_column_mapping():
    body = b"from,to,count,p,note\na,b,3,0.5,x\n"
    t, it = edges(body, source="from", target="to", weight="count", probability="p",
                  extra_columns="ignore")
    assert it.ids == ["a", "b"] and t.weight.tolist() == [3.0]
    assert t.probability is not None and t.probability.tolist() == [0.5]


def test_self_loops_allowed_when_asked():
    t, _ = edges(b"source,target\na,a\n", allow_self_loops=True)
    assert t.src.tolist() == t.dst.tolist() == [0]


# ------------------------------------------------------------------ bad input


@pytest.mark.parametrize(
    ("body", "line", "column", "reason"),
    [
        (b"source,target,weight\na,b,1\nc,d,x\n", 3, "weight", "positive number"),
        (b"source,target,weight\na,b,1\nc,d,nan\n", 3, "weight", "positive number"),
        (b"source,target,weight\na,b,1\nc,d,inf\n", 3, "weight", "positive number"),
        (b"source,target,weight\na,b,1\nc,d,0\n", 3, "weight", "positive number"),
        (b"source,target,weight\na,b,1\nc,d,-2\n", 3, "weight", "positive number"),
        (b"source,target,weight\na,b,\n", 2, "weight", "positive number"),
        (b"source,target,probability\na,b,0.5\nc,d,1.01\n", 3, "probability", "[0, 1]"),
        (b"source,target,probability\na,b,-0.1\n", 2, "probability", "[0, 1]"),
        (b"source,target,probability\na,b,NaN\n", 2, "probability", "[0, 1]"),
        (b"source,target\na,b\nc,c\n", 3, "target", "self-loop"),
        (b"source,target\na,b\n,c\n", 3, "source", "empty node id"),
        (b"source,target\na,b\nc,\n", 3, "target", "empty node id"),
    ],
)
def test_bad_values_name_line_and_column(body, line, column, reason):
    err = fails(body)
    assert (err.line, err.column) == (line, column)
    assert reason in err.reason


def test_bad_value_after_quoted_multiline_record_counts_physical_lines():
    body = b'source,target,weight\n"a\nb",c,1\nd,e,oops\n'
    err = fails(body)
    assert (err.line, err.value) == (4, "oops")


def test_earliest_bad_record_is_reported():
    # Row 2 (line 3) has a self-loop, row 3 (line 4) a bad weight: line 3 first.
    err = fails(b"source,target,weight\na,b,1\nc,c,1\nd,e,-1\n")
    assert err.line == 3 and "self-loop" in err.reason
    err = fails(b"source,target,weight\na,b,-1\n,c,1\n")
    assert err.line == 2 and err.column == "weight"


def test_wrong_field_count():
    err = fails(b"source,target\na,b\nc,d,e\n")
    assert err.line == 3 and "expected 2 fields" in err.reason and "found 3" in err.reason
    err = fails(b"source,target\na,b\nc\n")
    assert err.line == 3 and "found 1" in err.reason


def test_wrong_field_count_after_quoted_rows():
    err = fails(b'source,target\n"a",b\n"c\nd"\n')
    assert err.line == 3 and "found 1" in err.reason


def test_missing_columns_list_the_header():
    err = fails(b"src,target,weight\na,b,1\n")
    assert isinstance(err, MissingColumn)
    assert err.line == 1 and err.column == "source" and err.header == ("src", "target", "weight")
    assert "src, target, weight" in err.reason


def test_explicitly_named_weight_column_must_exist():
    err = fails(b"source,target\na,b\n", weight="count")
    assert isinstance(err, MissingColumn) and err.column == "count"


def test_unknown_columns_are_named():
    err = fails(b"source,target,colour,size\na,b,red,1\n")
    assert isinstance(err, UnknownColumn)
    assert err.line == 1 and err.column == "colour" and "'size'" in err.reason


def test_header_after_bom_and_blank_lines_reports_its_line():
    err = fails(b"\xef\xbb\xbf\n\nsource,target,x\na,b,c\n")
    assert isinstance(err, UnknownColumn) and err.line == 3


def test_duplicate_header_names():
    err = fails(b"source,target,target\na,b,c\n")
    assert err.line == 1 and err.column == "target" and "duplicate" in err.reason


def test_broken_quoting():
    # Source: RFC 4180 section 2.7 grammar: after a closing quote comes a comma or
    # a line break; anything else is malformed.
    err = fails(b'source,target\na,b\n"x"y,c\n')
    assert err.line == 3 and "broken CSV" in err.reason
    # An opening quote never closed runs to the end of the body.
    err = fails(b'source,target\na,b\n"abc,d\ne,f\n')
    assert "broken CSV" in err.reason and err.line in (3, 4)


def test_invalid_utf8_names_the_line():
    err = fails(b"source,target\na,b\nc,\xffd\n")
    assert err.line == 3 and "UTF-8" in err.reason


def test_nul_character_refused():
    err = fails(b"source,target\na,b\nc,d\x00\n")
    assert err.line == 3 and "NUL" in err.reason


@pytest.mark.parametrize("body", [b"", b"\xef\xbb\xbf", b"\n\n", b"source,target\n",
                                  b"source,target\r\n\r\n"])
def test_empty_uploads(body):
    with pytest.raises(EmptyUpload):
        edges(body)


def test_bad_options():
    with pytest.raises(InvalidOption):
        edges(b"source,target\na,b\n", extra_columns="keep")
    with pytest.raises(InvalidOption):
        edges(b"source,target\na,b\n", source="x", target="x")


def test_failed_read_leaves_the_interner_as_it_was():
    it = Interner.from_ids(["a"])
    with pytest.raises(UploadError):
        edges(b"source,target,weight\na,b,1\nc,d,0\n", it)
    assert it.ids == ["a"] and it.index == {"a": 0}


# ------------------------------------------------------------------ blocks


SPECIAL = ["a", "b", "Z", "é", "中", ",", '"', "\n", "\r\n", " ", "😀", "x"]
PLAIN = ["a", "b", "Z", "é", "中", " ", "😀", "x", "-", "_"]


def _random_ids(rng: random.Random, k: int, alphabet: list[str]) -> list[str]:
    return ["".join(rng.choice(alphabet) for _ in range(rng.randint(1, 4))) for _ in range(k)]


@pytest.mark.parametrize("alphabet", [SPECIAL, PLAIN], ids=["quoted", "plain"])
@pytest.mark.parametrize("block_bytes", [1, 2, 7, 64, 1 << 20])
def test_any_block_size_agrees_with_the_csv_module(block_bytes, alphabet):
    # Source: Python's csv module (RFC 4180 dialect) reading the same text whole,
    # computed in this test. "plain" ids take the split fast path, "quoted" the csv path.
    rng = random.Random(block_bytes)
    pool = list(dict.fromkeys(_random_ids(rng, 40, alphabet)))
    rows = []
    for _ in range(300):
        s, t = rng.sample(pool, 2)
        rows.append([s, t, str(rng.randint(1, 9))])
    out = io.StringIO(newline="")
    w = csv.writer(out, lineterminator=rng.choice(["\n", "\r\n"]))
    w.writerow(["source", "target", "weight"])
    w.writerows(rows)
    text = out.getvalue()
    t, it = edges(text.encode(), block_bytes=block_bytes)
    expected = list(csv.reader(io.StringIO(text, newline="")))[1:]
    got = [[it.ids[s], it.ids[d], repr(float(x))]
           for s, d, x in zip(t.src.tolist(), t.dst.tolist(), t.weight.tolist())]
    assert got == [[s, d, repr(float(x))] for s, d, x in expected]


def test_line_numbers_across_blocks_in_the_fast_path():
    lines = [b"source,target"] + [f"n{i},m{i}".encode() for i in range(5000)]
    lines[4321] = b"n,n"
    err = fails(b"\n".join(lines) + b"\n", block_bytes=256)
    assert err.line == 4322


def test_quoted_field_spanning_many_blocks():
    long_id = "q" * 3000 + "\n" + "r" * 3000
    body = f'source,target\na,"{long_id}"\n"{long_id}",b\n'.encode()
    t, it = edges(body, block_bytes=100, limits=SizeLimits(id_chars=10_000))  # ids past the default limit
    assert it.ids == ["a", long_id, "b"] and t.records == 2


# ------------------------------------------------------------------ memory


def test_streamed_parse_does_not_hold_the_body(tmp_path):
    """200k rows with a wide ignored column: the body is ~50 MB, the result ~3 MB."""
    rows = 200_000
    filler = "f" * 240
    path = tmp_path / "wide.csv"
    with open(path, "w", newline="") as f:
        f.write("source,target,weight,note\n")
        f.writelines(f"u{i % 1000},v{i % 997},{1 + i % 5},{filler}\n" for i in range(rows))
    body = path.stat().st_size
    assert body > 50_000_000
    tracemalloc.start()
    try:
        with open(path, "rb") as fh:
            t = read_edges_csv(fh, Interner(), extra_columns="ignore")
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert t.records == rows and t.weight[:5].tolist() == [1.0, 2.0, 3.0, 4.0, 5.0]
    # Output arrays: 200k * (4 + 4 + 8) bytes = 3.2 MB; one block is ~1 MiB.
    assert peak < 40_000_000, f"peak {peak / 1e6:.1f} MB for a {body / 1e6:.0f} MB body"


# ------------------------------------------------------------------ nodes


def nodes(body: bytes, interner: Interner | None = None, **kw: object):
    it = Interner() if interner is None else interner
    return read_nodes_csv(io.BytesIO(body), it, **kw), it  # type: ignore[arg-type]


def test_node_attributes():
    body = (
        b"id,segment,region,consent,cost,value,label,tier\n"
        b"a,gold,north,yes,1.5,10,Ann,1\n"
        b"b,,south,N,,0,,\n"
        b"c,silver,,,0,,Cy,\n"
    )
    it = Interner.from_ids(["b"])
    t, _ = nodes(body, it)
    assert it.ids == ["b", "a", "c"]
    assert t.index.tolist() == [1, 0, 2] and t.index.dtype == np.int64
    assert t.segment == ["gold", None, "silver"]
    assert t.region == ["north", "south", None]
    assert t.consent.tolist() == [1, 0, -1] and t.consent.dtype == np.int8
    np.testing.assert_array_equal(t.cost, [1.5, np.nan, 0.0])
    np.testing.assert_array_equal(t.value, [10.0, 0.0, np.nan])
    assert t.label == ["Ann", None, "Cy"]
    assert t.extra == {"tier": ["1", None, None]}
    assert t.columns == ("segment", "region", "consent", "cost", "value", "label")
    assert t.records == 3


@pytest.mark.parametrize(
    ("word", "code"),
    [("true", 1), ("TRUE", 1), ("Yes", 1), ("y", 1), ("1", 1),
     ("false", 0), ("No", 0), ("N", 0), ("0", 0), ("", -1)],
)
def test_consent_words(word, code):
    t, _ = nodes(f"id,consent\na,{word}\n".encode())
    assert t.consent.tolist() == [code]


def test_consent_column_absent_differs_from_empty():
    t1, _ = nodes(b"id,segment\na,x\n")
    t2, _ = nodes(b"id,consent\na,\n")
    assert "consent" not in t1.columns and "consent" in t2.columns
    assert t1.consent.tolist() == t2.consent.tolist() == [-1]


def test_repeated_node_id_last_row_wins():
    t, it = nodes(b"id,cost\na,1\nb,2\na,3\n")
    assert it.ids == ["a", "b"]
    assert t.index.tolist() == [1, 0] and t.cost.tolist() == [2.0, 3.0] and t.records == 3


@pytest.mark.parametrize(
    ("body", "line", "column"),
    [
        (b"id,consent\na,yes\nb,maybe\n", 3, "consent"),
        (b"id,cost\na,1\nb,-1\n", 3, "cost"),
        (b"id,value\na,inf\n", 2, "value"),
        (b"id,cost\na,nan\n", 2, "cost"),
        (b"id,cost\na,abc\n", 2, "cost"),
        (b"id,cost\na,1\n,2\n", 3, "id"),
    ],
)
def test_bad_node_values(body, line, column):
    with pytest.raises(UploadError) as info:
        nodes(body)
    assert (info.value.line, info.value.column) == (line, column)


def test_node_file_without_id_column():
    with pytest.raises(MissingColumn) as info:
        nodes(b"name,segment\na,x\n")
    assert info.value.header == ("name", "segment") and info.value.line == 1


def test_node_id_column_mapping_and_field_count():
    t, it = nodes(b"person,segment\n\"a,1\",x\n", id="person")
    assert it.ids == ["a,1"] and t.segment == ["x"]
    with pytest.raises(UploadError) as info:
        nodes(b"id,segment\na,x\nb\n")
    assert info.value.line == 3


def test_node_header_only_is_empty():
    with pytest.raises(EmptyUpload):
        nodes(b"id,segment\n")


# ------------------------------------------------------------------ delimiters and encodings
# (service/intake/dialect.py and encoding.py prepare the body these readers read)

from service.intake.dialect import detect_delimiter, open_csv, parse_delimiter  # noqa: E402
from service.intake import PREFIX_BYTES, InvalidEncoding  # noqa: E402


@pytest.mark.parametrize("sep", [";", "\t", "|"])
@pytest.mark.parametrize("alphabet", [SPECIAL, PLAIN], ids=["quoted", "plain"])
def test_other_delimiters_agree_with_the_csv_module(sep, alphabet):
    # Source: Python's csv module with the same delimiter reading the same text whole,
    # computed in this test; small blocks cross many block boundaries.
    rng = random.Random(7)
    pool = list(dict.fromkeys(_random_ids(rng, 40, alphabet + [sep, ","])))
    rows = [[*rng.sample(pool, 2), str(rng.randint(1, 9))] for _ in range(300)]
    out = io.StringIO(newline="")
    w = csv.writer(out, delimiter=sep, lineterminator="\r\n")
    w.writerow(["source", "target", "weight"])
    w.writerows(rows)
    text = out.getvalue()
    assert detect_delimiter(text[:2000]) == sep
    t, it = edges(text.encode(), delimiter=sep, block_bytes=97)
    expected = list(csv.reader(io.StringIO(text, newline=""), delimiter=sep))[1:]
    got = [[it.ids[s], it.ids[d], x] for s, d, x in zip(t.src.tolist(), t.dst.tolist(), t.weight.tolist())]
    assert got == [[s, d, float(x)] for s, d, x in expected]
    n, it2 = nodes(b"id" + sep.encode() + b"segment\n\"a" + sep.encode() + b"b\"" + sep.encode() + b"gold\n",
                   delimiter=sep)
    assert it2.ids == ["a" + sep + "b"] and n.segment == ["gold"]


@pytest.mark.parametrize(
    "text,expected",
    [
        ("source,target\na,b\n", ","),
        ("source;target;weight\na;b;2,5\nb;c;1,0\n", ";"),  # decimal commas inside the rows
        ('id;name\n1;"Smith; Ann"\n', ";"),
        ("id\nann\n", ","),  # one column: nothing to count, comma
        ("a\tb|c\nx\ty|z\n1\t2\n", "\t"),  # the pipe is not on every line
        ("", ","),
    ],
)
def test_detect_delimiter(text, expected):
    assert detect_delimiter(text) == expected


@pytest.mark.parametrize("word", ["comma", "Semicolon", "TAB", "pipe", ",", ";", "\t", "|", "\\t"])
def test_parse_delimiter_words_and_characters(word):
    assert parse_delimiter(word) in {",", ";", "\t", "|"}


def test_parse_delimiter_refuses_others():
    with pytest.raises(InvalidOption) as info:
        parse_delimiter("space")
    assert info.value.field == "delimiter"


def _prepared(body: bytes, charset: str | None = None, **kw: object):
    src = open_csv(io.BytesIO(body), charset=charset)
    it = Interner()
    return read_edges_csv(src.fh, it, delimiter=src.delimiter, **kw), it, src  # type: ignore[arg-type]


@pytest.mark.parametrize("codec,bom", [("utf-16-le", b"\xff\xfe"), ("utf-16-be", b"\xfe\xff"),
                                       ("utf-32-le", b"\xff\xfe\x00\x00")])
def test_utf16_and_32_with_bom_stream_across_many_blocks(codec, bom):
    # Ids with characters outside the BMP (surrogate pairs in UTF-16) cut anywhere by the
    # 64 KiB reads; expected: the same ids read from the UTF-8 encoding of the same text.
    rng = random.Random(3)
    pool = list(dict.fromkeys(_random_ids(rng, 500, PLAIN)))
    rows = [f"{rng.choice(pool)},{rng.choice(pool)}\n" for _ in range(20_000)]
    text = "source,target\n" + "".join(rows)
    assert len(text.encode(codec)) > 4 * PREFIX_BYTES
    t, it, src = _prepared(bom + text.encode(codec), allow_self_loops=True)
    ref, ref_it = edges(text.encode("utf-8"), allow_self_loops=True)
    assert src.encoding == codec.replace("-le", "le").replace("-be", "be")
    assert it.ids == ref_it.ids and t.src.tolist() == ref.src.tolist() and t.dst.tolist() == ref.dst.tolist()


def test_declared_charset_is_decoded():
    t, it, src = _prepared("source;target\nZoë;Renée\n€;Œuvre\n".encode("cp1252"), "windows-1252")
    assert (src.encoding, src.delimiter) == ("windows-1252", ";")
    assert it.ids == ["Zoë", "Renée", "€", "Œuvre"]


def test_undeclared_non_utf8_names_the_likely_encoding():
    with pytest.raises(InvalidEncoding) as info:
        _prepared("id,name\n1,Zoë Müller\n2,Renée Brontë\n".encode("cp1252"))
    assert info.value.likely == "windows-1252"
    assert "charset=windows-1252" in info.value.reason


def test_bytes_outside_the_declared_charset_name_their_line():
    body = b"source,target\n" + b"a,b\n" * 30_000 + b"c\x81,d\n"  # 0x81: no character in Windows-1252
    with pytest.raises(UploadError) as info:
        _prepared(body, "windows-1252")
    assert info.value.line == 30_002 and "Windows-1252" not in info.value.reason


def test_invalid_utf8_after_the_prefix_still_names_its_line():
    body = b"source,target\n" + b"a,b\n" * 30_000 + b"c\xff,d\n"
    with pytest.raises(UploadError) as info:
        _prepared(body)
    assert info.value.line == 30_002 and "UTF-8" in info.value.reason


def test_transcoding_streams(tmp_path):
    """A ~30 MB UTF-16 body is decoded block by block: memory stays far below its size."""
    path = tmp_path / "wide16.csv"
    filler = "f" * 120
    with open(path, "w", encoding="utf-16", newline="") as f:  # "utf-16" writes a BOM
        f.write("source,target,note\n")
        f.writelines(f"u{i % 1000},v{i % 997},{filler}\n" for i in range(120_000))
    size = path.stat().st_size
    assert size > 28_000_000
    tracemalloc.start()
    try:
        with open(path, "rb") as fh:
            src = open_csv(fh)
            t = read_edges_csv(src.fh, Interner(), extra_columns="ignore", delimiter=src.delimiter)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert t.records == 120_000 and src.encoding == "utf-16le"
    assert peak < 12_000_000, f"peak {peak / 1e6:.1f} MB for a {size / 1e6:.0f} MB body"
