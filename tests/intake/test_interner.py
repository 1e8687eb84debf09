"""Interner: dense numbering in order of first appearance."""

from __future__ import annotations

import numpy as np
import pytest

from service.intake import Interner, UploadError


def test_first_appearance_order_and_exact_ids():
    it = Interner()
    assert [it.intern(s) for s in ["b", " b", "B", "b", "ß", "ss"]] == [0, 1, 2, 0, 3, 4]
    assert it.ids == ["b", " b", "B", "ß", "ss"] and len(it) == 5
    assert it.index == {"b": 0, " b": 1, "B": 2, "ß": 3, "ss": 4}


def test_intern_many_matches_one_at_a_time():
    keys = ["x", "y", "x", "z", "w", "y", "z", "v"]
    a, b = Interner.from_ids(["z"]), Interner.from_ids(["z"])
    got = a.intern_many(keys)
    assert got.dtype == np.int32
    assert got.tolist() == [b.intern(k) for k in keys] and a.ids == b.ids


def test_empty_id_refused():
    it = Interner.from_ids(["a"])
    with pytest.raises(UploadError):
        it.intern("")
    with pytest.raises(UploadError):
        it.intern_many(["a", "b", ""])
    assert it.ids == ["a"]


def test_from_ids_checks_and_lookup_does_not_add():
    it = Interner.from_ids(["p", "q"])
    assert it.get("q") == 1 and it.get("r") is None and "p" in it and "r" not in it
    assert len(it) == 2
    with pytest.raises(ValueError):
        Interner.from_ids(["p", "p"])
    with pytest.raises(ValueError):
        Interner.from_ids(["p", ""])


def test_copy_truncate_and_compact():
    it = Interner.from_ids(["a", "b", "c"])
    cp = it.copy()
    cp.intern("d")
    assert it.ids == ["a", "b", "c"] and cp.ids == ["a", "b", "c", "d"]
    cp.truncate(2)
    assert cp.ids == ["a", "b"] and cp.index == {"a": 0, "b": 1}
    small = it.compact(np.array([True, False, True]))
    assert small.ids == ["a", "c"] and small.index == {"a": 0, "c": 1}
    with pytest.raises(ValueError):
        it.compact(np.array([True]))
