"""Duplicate merging, edge deltas, node removal and node-attribute overlays."""

from __future__ import annotations

import io

import numpy as np
import pytest

from service.analytics.graph import GraphArrays, NodeAttributes
from service.intake import (
    EdgeTable,
    Interner,
    InvalidOption,
    NodeTable,
    UploadError,
    apply_edge_delta,
    merge_duplicates,
    merge_node_table,
    read_nodes_csv,
    removal_mask,
    remove_nodes,
    select_node_attributes,
)


def i32(*v: int) -> np.ndarray:
    return np.array(v, dtype=np.int32)


def f64(*v: float) -> np.ndarray:
    return np.array(v, dtype=np.float64)


# Records in input order: (0,1) w1 p.5, (1,0) w2 p.5, (0,1) w4 p.2, (2,1) w3 p.1
SRC, DST = i32(0, 1, 0, 2), i32(1, 0, 1, 1)
W, P = f64(1, 2, 4, 3), f64(0.5, 0.5, 0.2, 0.1)


def test_sum_undirected_by_hand():
    s, d, w, p, merged = merge_duplicates(SRC, DST, W, P, directed=False, rule="sum")
    # Source: hand computation. {0,1} appears 3 times: 1 + 2 + 4 = 7 and
    # 1 - (0.5 * 0.5 * 0.8) = 0.8; {1,2} once, canonicalised to (1, 2).
    assert s.tolist() == [0, 1] and d.tolist() == [1, 2]
    assert w.tolist() == [7.0, 3.0] and merged == 2
    assert p is not None and p[0] == pytest.approx(0.8, abs=1e-15) and p[1] == 0.1


def test_max_directed_by_hand():
    s, d, w, p, merged = merge_duplicates(SRC, DST, W, P, directed=True, rule="max")
    # Source: hand computation. Arcs 0->1 (w 1, 4; p .5, .2), 1->0, 2->1.
    assert list(zip(s.tolist(), d.tolist())) == [(0, 1), (1, 0), (2, 1)]
    assert w.tolist() == [4.0, 2.0, 3.0] and merged == 1
    # Weight and probability maxima are taken separately (4 came with p .2).
    assert p is not None and p.tolist() == [0.5, 0.5, 0.1]


def test_last_undirected_by_hand():
    s, d, w, p, merged = merge_duplicates(SRC, DST, W, P, directed=False, rule="last")
    # Source: hand computation. The last {0,1} record is the third: w 4, p .2.
    assert w.tolist() == [4.0, 3.0] and p is not None and p.tolist() == [0.2, 0.1]
    assert merged == 2


def test_single_records_keep_their_values_exactly():
    p0 = 0.1  # 1 - (1 - 0.1) == 0.09999999999999998 in binary floating point
    _, _, _, p, _ = merge_duplicates(i32(0, 2, 2), i32(1, 3, 3), f64(1, 1, 1), f64(p0, 0.5, 0.5),
                                     directed=True, rule="sum")
    assert p is not None and p[0] == p0


def test_no_duplicates_only_sorts():
    s, d, w, p, merged = merge_duplicates(i32(2, 0), i32(0, 1), f64(5, 6), None,
                                          directed=True, rule="sum")
    assert (s.tolist(), d.tolist(), w.tolist(), p, merged) == ([0, 2], [1, 0], [6.0, 5.0], None, 0)


def test_empty_input():
    s, d, w, p, merged = merge_duplicates(i32(), i32(), f64(), f64(), directed=False, rule="max")
    assert s.size == d.size == w.size == 0 and p is not None and merged == 0


def _reference(src, dst, w, p, directed, rule):
    """Dictionary fold in input order: the obvious implementation, for cross-checking."""
    out: dict[tuple[int, int], list[float]] = {}
    for u, v, x, q in zip(src.tolist(), dst.tolist(), w.tolist(), p.tolist()):
        k = (u, v) if directed else (min(u, v), max(u, v))
        if k not in out:
            out[k] = [x, q]
        elif rule == "sum":
            out[k] = [out[k][0] + x, 1 - (1 - out[k][1]) * (1 - q)]
        elif rule == "max":
            out[k] = [max(out[k][0], x), max(out[k][1], q)]
        else:
            out[k] = [x, q]
    return sorted(out.items())


@pytest.mark.parametrize("rule", ["sum", "max", "last"])
@pytest.mark.parametrize("directed", [True, False])
def test_agrees_with_a_dictionary_fold(rule, directed):
    # Source: the dictionary fold above, computed in this test.
    rng = np.random.default_rng(7)
    m = 2000
    src = rng.integers(0, 30, m).astype(np.int32)
    dst = rng.integers(0, 30, m).astype(np.int32)
    w = rng.integers(1, 5, m).astype(np.float64)
    p = rng.random(m)
    s, d, ww, pp, merged = merge_duplicates(src, dst, w, p, directed=directed, rule=rule)
    ref = _reference(src, dst, w, p, directed, rule)
    assert list(zip(s.tolist(), d.tolist())) == [k for k, _ in ref]
    np.testing.assert_allclose(ww, [r[1][0] for r in ref], rtol=1e-12)
    np.testing.assert_allclose(pp, [r[1][1] for r in ref], rtol=1e-12, atol=1e-15)
    assert merged == m - len(ref)


def test_large_indices_do_not_collide():
    big = 2**31 - 2
    s, d, _, _, merged = merge_duplicates(i32(big, 0, big), i32(0, big, 1), f64(1, 1, 1), None,
                                          directed=True, rule="sum")
    assert list(zip(s.tolist(), d.tolist())) == [(0, big), (big, 0), (big, 1)] and merged == 0


def test_unknown_rule():
    with pytest.raises(InvalidOption) as info:
        merge_duplicates(SRC, DST, W, None, directed=True, rule="mean")  # type: ignore[arg-type]
    assert info.value.field == "duplicates"


# ------------------------------------------------------------------ deltas


def base_graph(directed: bool = False, prob: bool = False) -> GraphArrays:
    # 0-1 (w 2), 1-2 (w 1), 2-3 (w 5)
    return GraphArrays(4, directed, i32(0, 1, 2), i32(1, 2, 3), f64(2, 1, 5),
                       f64(0.5, 0.1, 0.2) if prob else None)


def delta(src, dst, w, p=None) -> EdgeTable:
    return EdgeTable(i32(*src), i32(*dst), f64(*w), None if p is None else f64(*p), len(src))


def test_append_sum_adds_interactions():
    g, st = apply_edge_delta(base_graph(), delta((1, 4), (0, 0), (3, 1)), 5, mode="append",
                             rule="sum")
    # Source: hand computation. 1-0 is edge {0,1}: 2 + 3 = 5; 4-0 is new.
    assert g.n == 5 and list(zip(g.src.tolist(), g.dst.tolist())) == [(0, 1), (0, 4), (1, 2),
                                                                     (2, 3)]
    assert g.weight.tolist() == [5.0, 1.0, 1.0, 5.0]
    assert (st.mode, st.records, st.added, st.merged, st.edges, st.nodes) == (
        "append", 2, 1, 1, 4, 5)


def test_append_last_lets_the_delta_win_and_max_keeps_larger():
    d = delta((0, 3), (1, 2), (1, 9))
    g, _ = apply_edge_delta(base_graph(), d, 4, mode="append", rule="last")
    assert g.weight.tolist() == [1.0, 1.0, 9.0]
    g, _ = apply_edge_delta(base_graph(), d, 4, mode="append", rule="max")
    assert g.weight.tolist() == [2.0, 1.0, 9.0]


def test_append_directed_keeps_reverse_arcs_apart():
    g, st = apply_edge_delta(base_graph(directed=True), delta((1,), (0,), (1,)), 4,
                             mode="append", rule="sum")
    assert g.m == 4 and st.added == 1 and st.merged == 0


def test_append_probabilities_must_match_the_base():
    with pytest.raises(UploadError) as info:
        apply_edge_delta(base_graph(prob=True), delta((0,), (3,), (1,)), 4, mode="append")
    assert info.value.column == "probability"
    with pytest.raises(UploadError):
        apply_edge_delta(base_graph(), delta((0,), (3,), (1,), (0.5,)), 4, mode="append")
    g, _ = apply_edge_delta(base_graph(prob=True), delta((1,), (0,), (1,), (0.5,)), 4,
                            mode="append", rule="sum")
    # Source: hand computation, 1 - (1 - 0.5)(1 - 0.5) = 0.75 on edge {0,1}.
    assert g.probability is not None and g.probability.tolist() == [0.75, 0.1, 0.2]


def test_remove_undirected_both_orientations_and_not_found():
    d = delta((1, 3, 0, 0), (0, 2, 3, 3), (1, 1, 1, 1))
    g, st = apply_edge_delta(base_graph(), d, 4, mode="remove")
    # {0,1} and {2,3} go; {0,3} (named twice) is not in the base.
    assert list(zip(g.src.tolist(), g.dst.tolist())) == [(1, 2)] and g.weight.tolist() == [1.0]
    assert (st.removed, st.not_found, st.edges, st.nodes) == (2, 1, 1, 4)


def test_remove_directed_needs_the_same_direction():
    g, st = apply_edge_delta(base_graph(directed=True, prob=True), delta((1, 1), (0, 2), (1, 1)),
                             4, mode="remove")
    assert g.m == 2 and st.removed == 1 and st.not_found == 1
    assert g.probability is not None and g.probability.tolist() == [0.5, 0.2]


def test_remove_with_ids_unknown_to_the_base():
    # A remove delta read with a copy of the interner may mention new indices (4, 5).
    g, st = apply_edge_delta(base_graph(), delta((4, 0), (5, 1), (1, 1)), 4, mode="remove")
    assert g.n == 4 and st.removed == 1 and st.not_found == 1


def test_delta_bad_options():
    with pytest.raises(InvalidOption):
        apply_edge_delta(base_graph(), delta((0,), (1,), (1,)), 4, mode="upsert")  # type: ignore[arg-type]
    with pytest.raises(InvalidOption):
        apply_edge_delta(base_graph(), delta((0,), (9,), (1,)), 4, mode="append")
    with pytest.raises(InvalidOption):
        apply_edge_delta(base_graph(), delta((0,), (1,), (1,)), 3, mode="append")


# ------------------------------------------------------------------ nodes


def test_remove_nodes_compacts_indices():
    g = base_graph(prob=True)
    h, old_to_new = remove_nodes(g, np.array([False, False, True, False]))
    # Node 2 goes with edges 1-2 and 2-3; node 3 becomes 2.
    assert old_to_new.tolist() == [0, 1, -1, 2]
    assert (h.n, h.src.tolist(), h.dst.tolist(), h.weight.tolist()) == (3, [0], [1], [2.0])
    assert h.probability is not None and h.probability.tolist() == [0.5]
    assert h.src.dtype == np.int32
    with pytest.raises(InvalidOption):
        remove_nodes(g, np.array([True]))


def table(index, *, segment=None, region=None, consent=None, cost=None, value=None, label=None,
          extra=None, columns=()) -> NodeTable:
    k = len(index)
    return NodeTable(
        index=np.array(index, dtype=np.int64),
        segment=segment or [None] * k,
        region=region or [None] * k,
        consent=np.array(consent or [-1] * k, dtype=np.int8),
        cost=np.array(cost or [np.nan] * k),
        value=np.array(value or [np.nan] * k),
        label=label or [None] * k,
        extra=extra or {},
        columns=tuple(columns),
        records=k,
    )


def test_replace_builds_codes_into_sorted_labels():
    t = table([3, 0, 1], segment=["silver", "gold", "silver"], consent=[1, 0, -1],
              cost=[1.0, 2.0, np.nan], label=["C", "A", None], extra={"tier": ["x", None, "y"]},
              columns=("segment", "consent", "cost", "label"))
    a = merge_node_table(None, t, 5, mode="replace")
    assert a.n == 5 and a.segment_labels == ("gold", "silver")
    assert a.segment.tolist() == [0, 1, -1, 1, -1] and a.segment.dtype == np.int32
    assert a.region.tolist() == [-1] * 5 and a.region_labels == ()
    assert a.consent.tolist() == [0, -1, -1, 1, -1] and a.has_consent_data
    np.testing.assert_array_equal(a.cost, [2.0, np.nan, np.nan, 1.0, np.nan])
    assert a.extra["tier"] == [None, "y", None, "x", None]
    assert a.extra["label"] == ["A", None, None, "C", None]


def test_replace_ignores_previous_and_append_overlays():
    prev = merge_node_table(None, table([0, 1, 2], segment=["a", "b", "c"], consent=[1, 1, 0],
                                        extra={"tier": ["1", "2", "3"]},
                                        columns=("segment", "consent")), 3)
    t = table([1, 3], segment=["z", None], cost=[5.0, 6.0], columns=("segment", "cost"))
    r = merge_node_table(prev, t, 4, mode="replace")
    assert r.segment_labels == ("z",) and r.segment.tolist() == [-1, 0, -1, -1]
    assert r.consent.tolist() == [-1] * 4 and not r.has_consent_data and "tier" not in r.extra
    a = merge_node_table(prev, t, 4, mode="append")
    # Node 1's segment becomes "z", node 3 (new) gets an explicit empty segment;
    # "b" is no longer used, so the labels are re-sorted and pruned.
    assert a.segment_labels == ("a", "c", "z") and a.segment.tolist() == [0, 2, 1, -1]
    assert a.consent.tolist() == [1, 1, 0, -1] and a.has_consent_data  # not in t: kept
    np.testing.assert_array_equal(a.cost, [np.nan, 5.0, np.nan, 6.0])
    assert a.extra["tier"] == ["1", "2", "3", None]


def test_no_consent_data_means_everyone_contactable():
    a = merge_node_table(None, table([0], segment=["x"], columns=("segment",)), 2)
    assert not a.has_consent_data and a.contactable().tolist() == [True, True]


def test_merge_node_table_checks_sizes_and_mode():
    prev = NodeAttributes.empty(3)
    with pytest.raises(InvalidOption):
        merge_node_table(prev, table([0]), 2, mode="append")
    with pytest.raises(InvalidOption):
        merge_node_table(None, table([5]), 3)
    with pytest.raises(InvalidOption):
        merge_node_table(None, table([0]), 3, mode="upsert")  # type: ignore[arg-type]


def test_select_node_attributes_after_remove_nodes():
    a = merge_node_table(None, table([0, 1, 2], region=["n", "s", "n"], consent=[-1, 1, -1],
                                     extra={"tier": ["1", "2", "3"]},
                                     columns=("region", "consent")), 3)
    keep = np.array([True, False, True])
    b = select_node_attributes(a, keep)
    assert b.n == 2 and b.region_labels == ("n",) and b.region.tolist() == [0, 0]
    assert b.consent.tolist() == [-1, -1] and not b.has_consent_data
    assert b.extra == {"tier": ["1", "3"]}


def test_erase_people_end_to_end():
    """part=nodes&mode=remove: ids -> mask -> graph, ids and attributes compacted together."""
    ids = Interner.from_ids(["ann", "bob", "cy", "dee"])
    g = base_graph()
    attrs = merge_node_table(None, table([0, 1, 2, 3], consent=[1, 0, 1, 1],
                                         columns=("consent",)), 4)
    gone = read_nodes_csv(io.BytesIO(b"id\nbob\nzed\n"), ids.copy())
    mask, missing = removal_mask(gone, g.n)
    assert mask.tolist() == [False, True, False, False] and missing == 1
    h, old_to_new = remove_nodes(g, mask)
    new_ids = ids.compact(~mask)
    new_attrs = select_node_attributes(attrs, ~mask)
    assert new_ids.ids == ["ann", "cy", "dee"] and len(ids) == 4
    assert [(new_ids.ids[s], new_ids.ids[d]) for s, d in zip(h.src.tolist(), h.dst.tolist())] == [
        ("cy", "dee")]
    assert new_attrs.consent.tolist() == [1, 1, 1] and old_to_new.tolist() == [0, -1, 1, 2]
