"""Compiled loops for the ingest summary: components and reciprocity in O(n) memory.

Private to :mod:`service.analytics`; :mod:`service.analytics.structure.summary` is the
public face. The summary runs at ingest beside the upload's own arrays, so
nothing here allocates an array of length m: weak components are a union-find
over the edge arrays, strong components an iterative Tarjan search over the
compressed sparse rows ``(indptr, dst)`` of edges sorted by source (intake
merges edges into that order, so the rows are the ``dst`` array as it is), and
reciprocity a binary search of each arc's reverse in those rows.

References
----------
.. [1] R. E. Tarjan (1972). Depth-first search and linear graph algorithms.
   SIAM Journal on Computing 1(2), 146-160.
.. [2] R. E. Tarjan, J. van Leeuwen (1984). Worst-case analysis of set union
   algorithms. Journal of the ACM 31(2), 245-281.
"""

from __future__ import annotations

import numpy as np
from numba import njit
from numpy.typing import NDArray

__all__ = [
    "degrees",
    "is_sorted_by_source",
    "reciprocal_arcs",
    "row_pointer",
    "strong_components",
    "weak_components",
]


@njit(cache=True, nogil=True)
def is_sorted_by_source(src, dst, strict_rows):  # type: ignore[no-untyped-def]
    """True when edges are ordered by source (and, if ``strict_rows``, by target within a source)."""
    for e in range(1, src.shape[0]):
        if src[e] < src[e - 1]:
            return False
        if strict_rows and src[e] == src[e - 1] and dst[e] <= dst[e - 1]:
            return False
    return True


@njit(cache=True, nogil=True)
def degrees(n, src, dst):  # type: ignore[no-untyped-def]
    """(out-degrees, in-degrees, self-loops): counts of each node as source and as target.

    A loop of its own rather than ``numpy.bincount``, which first copies
    int32 input into an int64 array of length m.
    """
    out_deg = np.zeros(n, dtype=np.int64)
    in_deg = np.zeros(n, dtype=np.int64)
    loops = 0
    for e in range(src.shape[0]):
        out_deg[src[e]] += 1
        in_deg[dst[e]] += 1
        loops += src[e] == dst[e]
    return out_deg, in_deg, loops


def row_pointer(out_deg: NDArray[np.int64]) -> NDArray[np.int64]:
    """``indptr`` of the rows of arcs sorted by source: row ``u`` is ``indptr[u]:indptr[u + 1]``.

    >>> row_pointer(np.array([2, 0, 1])).tolist()
    [0, 2, 2, 3]
    """
    indptr = np.zeros(out_deg.shape[0] + 1, dtype=np.int64)
    np.cumsum(out_deg, out=indptr[1:])
    return indptr


@njit(cache=True, nogil=True)
def _find(parent, x):  # type: ignore[no-untyped-def]
    """Root of ``x``, halving the path on the way [2]_."""
    while parent[x] != x:
        parent[x] = parent[parent[x]]
        x = parent[x]
    return x


@njit(cache=True, nogil=True)
def weak_components(n, src, dst):  # type: ignore[no-untyped-def]
    """(number of components, size of the largest) of the graph with edges ``src``-``dst``.

    Union by size with path halving [2]_: O(m alpha(n)) time, two int32
    arrays of length n. Isolated nodes are singleton components.
    """
    parent = np.arange(n, dtype=np.int32)
    size = np.ones(n, dtype=np.int32)
    count = n
    for e in range(src.shape[0]):
        a = _find(parent, src[e])
        b = _find(parent, dst[e])
        if a != b:
            if size[a] < size[b]:
                a, b = b, a
            parent[b] = a
            size[a] += size[b]
            count -= 1
    largest = 0
    for v in range(n):
        if parent[v] == v and size[v] > largest:
            largest = size[v]
    return count, largest


@njit(cache=True, nogil=True)
def strong_components(n, indptr, dst):  # type: ignore[no-untyped-def]
    """(number of strongly connected components, size of the largest).

    Tarjan's algorithm [1]_ with an explicit stack instead of recursion (so
    long paths cannot overflow the call stack): each node gets a visit
    number and a low link; a node whose low link is its own number closes a
    component with the nodes above it on the component stack. O(n + m) time;
    six arrays of length n.
    """
    index = np.full(n, -1, dtype=np.int32)
    low = np.zeros(n, dtype=np.int32)
    on_stack = np.zeros(n, dtype=np.bool_)
    stack = np.empty(n, dtype=np.int32)  # Tarjan's component stack
    call = np.empty(n, dtype=np.int32)  # the depth-first path
    cursor = np.empty(n, dtype=np.int64)  # next arc to look at, per node on the path
    top = 0
    counter = 0
    count = 0
    largest = 0
    for root in range(n):
        if index[root] >= 0:
            continue
        depth = 0
        call[0] = root
        cursor[root] = indptr[root]
        index[root] = low[root] = counter
        counter += 1
        stack[top] = root
        top += 1
        on_stack[root] = True
        while depth >= 0:
            v = call[depth]
            e = cursor[v]
            if e < indptr[v + 1]:
                cursor[v] = e + 1
                w = dst[e]
                if index[w] < 0:  # tree arc: descend
                    index[w] = low[w] = counter
                    counter += 1
                    stack[top] = w
                    top += 1
                    on_stack[w] = True
                    cursor[w] = indptr[w]
                    depth += 1
                    call[depth] = w
                elif on_stack[w] and index[w] < low[v]:
                    low[v] = index[w]
                continue
            # v is finished: close its component or pass its low link up.
            if low[v] == index[v]:
                size = 0
                while True:
                    top -= 1
                    w = stack[top]
                    on_stack[w] = False
                    size += 1
                    if w == v:
                        break
                count += 1
                largest = max(largest, size)
            depth -= 1
            if depth >= 0:
                u = call[depth]
                low[u] = min(low[u], low[v])
    return count, largest


@njit(cache=True, nogil=True)
def reciprocal_arcs(indptr, src, dst):  # type: ignore[no-untyped-def]
    """Non-loop arcs ``u -> v`` whose reverse ``v -> u`` is also an arc.

    The arcs must be sorted by (source, target): the reverse is found by
    binary search in row ``v``. O(m log d) time, no extra memory.
    """
    found = 0
    for e in range(src.shape[0]):
        u, v = src[e], dst[e]
        if u == v:
            continue
        lo, hi = indptr[v], indptr[v + 1]
        while lo < hi:
            mid = (lo + hi) >> 1
            if dst[mid] < u:
                lo = mid + 1
            else:
                hi = mid
        if lo < indptr[v + 1] and dst[lo] == u:
            found += 1
    return found
