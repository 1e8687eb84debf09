"""The counting sort that groups arcs by row gives NumPy's stable argsort, item for item.

Reference: ``numpy.argsort(kind="stable")`` (NumPy's documented stable sort: equal keys keep
their input order).
"""

from __future__ import annotations

import numpy as np
import pytest

from service.analytics._grouping import group_order
from service.analytics.graph import csr


@pytest.mark.parametrize("dtype", [np.int32, np.int64])
@pytest.mark.parametrize("case", ["random", "sorted", "reversed", "few keys", "one key"])
def test_group_order_equals_numpy_stable_argsort(dtype, case):
    rng = np.random.default_rng(7)
    nkeys = {"few keys": 3, "one key": 1}.get(case, 1000)
    keys = rng.integers(0, nkeys, 20_000).astype(dtype)
    if case == "sorted":
        keys.sort()
    elif case == "reversed":
        keys = np.sort(keys)[::-1]  # a reversed view: not contiguous
    got = group_order(keys, nkeys)
    assert got.dtype == np.int64
    assert np.array_equal(got, np.argsort(keys, kind="stable"))


def test_group_order_edge_cases():
    assert group_order(np.zeros(0, np.int32), 5).shape == (0,)
    assert group_order(np.zeros(0, np.int32), 0).shape == (0,)
    assert group_order(np.array([4, 0, 4, 0], np.int32), 5).tolist() == [1, 3, 0, 2]
    with pytest.raises(ValueError, match="outside"):
        group_order(np.array([0, 5], np.int32), 5)
    with pytest.raises(ValueError, match="outside"):
        group_order(np.array([-1, 2], np.int64), 5)


def test_two_passes_give_the_order_of_the_combined_key():
    # What the forward kernels' prepared graph relies on: stable by target, then stable by
    # source, is the stable order of source * n + target (duplicates keep input order).
    rng = np.random.default_rng(3)
    n = 300
    src = rng.integers(0, n, 5000)
    dst = rng.integers(0, n, 5000)
    by_dst = group_order(dst, n)
    two = by_dst[group_order(src[by_dst], n)]
    assert np.array_equal(two, np.argsort(src * n + dst, kind="stable"))


def test_csr_rows_match_scipy():
    # scipy.sparse builds the same rows (its CSR keeps duplicates in input order too).
    from scipy.sparse import coo_matrix

    rng = np.random.default_rng(5)
    n, m = 200, 3000
    rows = rng.integers(0, n, m).astype(np.int32)
    cols = rng.integers(0, n, m).astype(np.int32)
    data = rng.random(m)
    got = csr(n, rows, cols, data)
    ref = coo_matrix((data, (rows, cols)), shape=(n, n)).tocsr()  # sums duplicates: compare dense
    dense = np.zeros((n, n))
    for v in range(n):
        a, b = got.indptr[v], got.indptr[v + 1]
        np.add.at(dense[v], got.indices[a:b], got.data[a:b])
    assert np.allclose(dense, ref.toarray())
    assert np.array_equal(np.diff(got.indptr), np.bincount(rows, minlength=n))
