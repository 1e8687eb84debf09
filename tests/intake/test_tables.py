"""Shared value rules and the edge/node collectors."""

from __future__ import annotations

import math

import numpy as np
import pytest

from service.intake import EdgeOptions, EmptyUpload, InvalidOption, Interner, UploadError
from service.intake.tables import (
    EdgeSink,
    NodeSink,
    json_id,
    parse_amount,
    parse_consent,
    parse_extra,
    parse_label,
    to_floats,
)


def test_edge_options_defaults_and_checks():
    o = EdgeOptions()
    assert (o.weight_column, o.probability_column) == ("weight", "probability")
    assert o.known == {"source", "target", "weight", "probability"}
    with pytest.raises(InvalidOption):
        EdgeOptions(source="a", target="a")
    with pytest.raises(InvalidOption):
        EdgeOptions(weight="source")
    with pytest.raises(InvalidOption):
        EdgeOptions(target="")
    with pytest.raises(InvalidOption) as info:
        EdgeOptions(extra_columns="drop")  # type: ignore[arg-type]
    assert info.value.field == "extra_columns"


def test_to_floats_marks_unparsable_as_nan():
    out = to_floats(["1", " 2.5 ", "x", "", True, None, 3, 10**400])
    assert out[:2].tolist() == [1.0, 2.5] and out[6] == 3.0
    assert all(math.isnan(v) for v in out[[2, 3, 4, 5, 7]])


def test_value_parsers():
    assert [parse_consent(v) for v in (True, False, 1, 0, " Yes ", "n", "", None)] == [
        1, 0, 1, 0, 1, 0, -1, -1]
    for bad in ("maybe", 2, 1.0, "t", []):
        with pytest.raises(ValueError):
            parse_consent(bad)
    assert parse_amount("0") == 0.0 and parse_amount(2) == 2.0 and math.isnan(parse_amount(""))
    for bad in ("-1", -0.5, "inf", float("nan"), True, "x"):
        with pytest.raises(ValueError):
            parse_amount(bad)
    assert parse_label("a") == "a" and parse_label(5) == "5" and parse_label("") is None
    with pytest.raises(ValueError):
        parse_label(True)
    assert parse_extra([1, "é"]) == '[1, "é"]' and parse_extra(False) == "false"
    assert json_id(12) == "12" and json_id("x") == "x"
    for bad in (True, 1.0, None, "a\x00"):
        with pytest.raises(ValueError):
            json_id(bad)


def test_edge_sink_backfills_weights_and_reports_the_earliest_fault():
    sink = EdgeSink(Interner(), EdgeOptions())
    sink.add(["a", "b"], None, None, lambda i: 10 + i)
    sink.add(["b", "c", "c", "d"], [2.0, 3.0], None, lambda i: 20 + i)
    t = sink.table()
    assert t.weight.tolist() == [1.0, 2.0, 3.0] and t.records == 3
    sink = EdgeSink(Interner(), EdgeOptions())
    with pytest.raises(UploadError) as info:
        # record 0 fine, record 1 empty target, record 2 bad weight: record 1 first
        sink.add(["a", "b", "c", "", "e", "f"], ["1", "1", "-1"], None, lambda i: 100 + i)
    assert (info.value.line, info.value.column) == (101, "target")
    with pytest.raises(EmptyUpload):
        EdgeSink(Interner(), EdgeOptions()).table()


def test_node_sink_last_record_wins_and_tracks_columns():
    sink = NodeSink(Interner())
    sink.add("a", {"cost": "1"}, 2)
    sink.add("b", {"tier": "x"}, 3)
    sink.add("a", {"cost": "", "segment": "s"}, 4)
    t = sink.table()
    assert t.index.tolist() == [1, 0] and t.records == 3
    assert math.isnan(t.cost[0]) and math.isnan(t.cost[1])  # b: no cost; a: emptied by row 4
    assert t.segment == [None, "s"] and t.extra == {"tier": ["x", None]}
    assert t.columns == ("segment", "cost")
    assert len(NodeSink(Interner()).table(allow_empty=True)) == 0
    with pytest.raises(UploadError) as info:
        sink.add("c", {"consent": "perhaps"}, 9)
    assert (info.value.line, info.value.column, info.value.value) == (9, "consent", "perhaps")
    assert np.asarray(t.consent).tolist() == [-1, -1]
