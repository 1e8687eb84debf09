"""Stable grouping of items by a small integer key (a counting sort), compiled.

Private to :mod:`service.analytics`. ``group_order(keys, nkeys)`` equals
``np.argsort(keys, kind="stable")`` for keys in ``0 .. nkeys-1``, in O(len + nkeys) instead
of O(len log len): building the rows of a graph (:func:`.graph.csr`) sorts millions of arcs
by their row, and NumPy's stable sort of int32 is a merge sort. Measured on random rows:
2.1 million arcs over 317,000 rows 0.018 s against 0.196 s, 10 million over 1 million rows
0.142 s against 1.148 s. Keys already in order (an edge list grouped by source) are
detected in one pass and give ``arange``, which NumPy's sort also finds quickly.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from numba import njit
from numpy.typing import NDArray

__all__ = ["group_order"]


@njit(cache=True, nogil=True)
def _order(keys: Any, nkeys: Any) -> Any:  # pragma: no cover - compiled
    m = keys.shape[0]
    ordered = True
    for i in range(1, m):
        if keys[i] < keys[i - 1]:
            ordered = False
            break
    if ordered:
        return np.arange(m, dtype=np.int64)
    pos = np.zeros(nkeys + 1, dtype=np.int64)
    for i in range(m):
        pos[keys[i] + 1] += 1
    for v in range(nkeys):
        pos[v + 1] += pos[v]
    order = np.empty(m, dtype=np.int64)
    for i in range(m):
        k = keys[i]
        order[pos[k]] = i
        pos[k] += 1
    return order


def group_order(keys: NDArray[np.integer[Any]], nkeys: int) -> NDArray[np.int64]:
    """The stable order that groups ``keys`` (each in ``0 .. nkeys-1``) in ascending key
    order: the same as ``np.argsort(keys, kind="stable")``."""
    if keys.shape[0] and (int(keys.min()) < 0 or int(keys.max()) >= nkeys):
        raise ValueError("group_order: a key lies outside 0 .. nkeys-1")
    return _order(np.ascontiguousarray(keys), int(nkeys))  # type: ignore[no-any-return]
