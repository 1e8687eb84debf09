"""Compiled loops for ego-network features and densest-block peeling.

Private to :mod:`service.analytics`; :mod:`service.analytics.integrity.egonet` and
:mod:`service.analytics.integrity.dense_groups` are the public faces. All loops take a
simple undirected graph as symmetric compressed sparse rows ``(indptr,
indices, data)`` with the columns of each row sorted and no self-loops.

References
----------
.. [1] T. Schank, D. Wagner (2005). Finding, counting and listing all
   triangles in large graphs, an experimental study. WEA 2005, LNCS 3503
   (the forward algorithm over a degree order).
.. [2] M. Charikar (2000). Greedy approximation algorithms for finding dense
   components in a graph. APPROX 2000, LNCS 1913, 84-95.
"""

from __future__ import annotations

import numpy as np
from numba import njit

__all__ = ["contact_components", "ego_triangles", "ego_eigenvalues", "peel", "symmetric_csr", "tie_triangle_mean"]


@njit(cache=True, nogil=True)
def symmetric_csr(n, lo, hi, w):  # type: ignore[no-untyped-def]
    """Symmetric CSR of the ties ``lo[e] < hi[e]``, given sorted by ``(lo, hi)`` without repeats.

    One counting pass: row ``r`` receives its smaller neighbours (ties where
    ``hi = r``, met in increasing ``lo``) before its larger ones, so every
    row comes out sorted.
    """
    indptr = np.zeros(n + 1, np.int64)
    for e in range(lo.shape[0]):
        indptr[lo[e] + 1] += 1
        indptr[hi[e] + 1] += 1
    for r in range(n):
        indptr[r + 1] += indptr[r]
    fill = indptr[:-1].copy()
    indices = np.empty(indptr[n], np.int64)
    data = np.empty(indptr[n], np.float64)
    for e in range(lo.shape[0]):
        a = lo[e]
        b = hi[e]
        indices[fill[a]] = b
        data[fill[a]] = w[e]
        fill[a] += 1
        indices[fill[b]] = a
        data[fill[b]] = w[e]
        fill[b] += 1
    return indptr, indices, data


@njit(cache=True, nogil=True)
def ego_triangles(n, out_ptr, out_idx, out_w):  # type: ignore[no-untyped-def]
    """Triangles at each node and the weight of the edge opposite each node in them.

    ``(out_ptr, out_idx, out_w)`` holds each edge once, oriented from the lower
    to the higher node of a degree order, columns sorted within a row. Every
    triangle is found once, from its lowest node (forward algorithm [1]_).
    """
    tri = np.zeros(n, np.int64)
    opposite = np.zeros(n, np.float64)
    stamp = np.full(n, -1, np.int64)
    wt = np.zeros(n, np.float64)
    for u in range(n):
        for p in range(out_ptr[u], out_ptr[u + 1]):
            stamp[out_idx[p]] = u
            wt[out_idx[p]] = out_w[p]
        for p in range(out_ptr[u], out_ptr[u + 1]):
            v = out_idx[p]
            wuv = out_w[p]
            for q in range(out_ptr[v], out_ptr[v + 1]):
                x = out_idx[q]
                if stamp[x] == u:
                    tri[u] += 1
                    tri[v] += 1
                    tri[x] += 1
                    opposite[u] += out_w[q]
                    opposite[v] += wt[x]
                    opposite[x] += wuv
    return tri, opposite


@njit(cache=True, nogil=True)
def tie_triangle_mean(n, out_ptr, out_idx, values):  # type: ignore[no-untyped-def]
    """Per node, ``sum_j t_ij values[j, c]`` (each column ``c``) and ``sum_j t_ij`` over its ties ``i - j``.

    ``t_ij`` is the number of triangles on the tie (common contacts of ``i``
    and ``j``), counted by the forward algorithm over ``(out_ptr, out_idx)``
    as in :func:`ego_triangles`, so the cost is O(m^1.5), never a 2-path product.
    """
    ties = np.zeros(out_idx.shape[0], np.int64)
    stamp = np.full(n, -1, np.int64)
    where = np.zeros(n, np.int64)
    for u in range(n):
        for p in range(out_ptr[u], out_ptr[u + 1]):
            stamp[out_idx[p]] = u
            where[out_idx[p]] = p
        for p in range(out_ptr[u], out_ptr[u + 1]):
            v = out_idx[p]
            for q in range(out_ptr[v], out_ptr[v + 1]):
                x = out_idx[q]
                if stamp[x] == u:
                    ties[p] += 1
                    ties[q] += 1
                    ties[where[x]] += 1
    cols = values.shape[1]
    mass = np.zeros((n, cols), np.float64)
    total = np.zeros(n, np.float64)
    for u in range(n):
        for p in range(out_ptr[u], out_ptr[u + 1]):
            v = out_idx[p]
            t = ties[p]
            total[u] += t
            total[v] += t
            for c in range(cols):
                mass[u, c] += t * values[v, c]
                mass[v, c] += t * values[u, c]
    return mass, total


@njit(cache=True, nogil=True)
def ego_eigenvalues(n, indptr, indices, data, max_edges, dense_limit, max_iter, rtol):  # type: ignore[no-untyped-def]
    """Largest eigenvalue of each node's weighted ego adjacency, and whether it converged.

    The ego of ``i`` is ``i``, its neighbours and every edge among them. The
    matrix is non-negative and symmetric, so its principal eigenvalue is its
    spectral radius: power iteration estimates it as ``||A x|| / ||x||`` (the
    square root of the Rayleigh quotient of ``A^2``), which converges even when
    the ego is bipartite (a star, where ``-lambda`` is also an eigenvalue).
    A star ego has the closed form ``sqrt(sum w^2)``; an ego of at most
    ``dense_limit`` people whose iteration has not settled after 200 steps
    is solved by LAPACK (``eigvalsh`` on the dense matrix) instead.
    """
    lam = np.zeros(n, np.float64)
    converged = np.ones(n, np.bool_)
    local = np.full(n, -1, np.int64)
    stamp = np.full(n, -1, np.int64)
    ea = np.empty(max_edges, np.int64)
    eb = np.empty(max_edges, np.int64)
    ew = np.empty(max_edges, np.float64)
    maxdeg = 0
    for i in range(n):
        maxdeg = max(maxdeg, indptr[i + 1] - indptr[i])
    x = np.empty(maxdeg + 1, np.float64)
    y = np.empty(maxdeg + 1, np.float64)
    for i in range(n):
        d = indptr[i + 1] - indptr[i]
        if d == 0:
            continue
        stamp[i] = i
        local[i] = 0
        k = 0
        for p in range(indptr[i], indptr[i + 1]):
            v = indices[p]
            stamp[v] = i
            local[v] = p - indptr[i] + 1
            ea[k] = 0
            eb[k] = local[v]
            ew[k] = data[p]
            k += 1
        for p in range(indptr[i], indptr[i + 1]):
            v = indices[p]
            for q in range(indptr[v], indptr[v + 1]):
                u = indices[q]
                if u > v and stamp[u] == i and u != i:
                    ea[k] = local[v]
                    eb[k] = local[u]
                    ew[k] = data[q]
                    k += 1
        size = d + 1
        if k == d:
            # A star (no ties among the contacts): lambda = sqrt(sum of w^2) exactly.
            s = 0.0
            for e in range(k):
                s += ew[e] * ew[e]
            lam[i] = np.sqrt(s)
            continue
        small = size <= dense_limit
        norm = 0.0
        for j in range(size):
            x[j] = 1.0
        norm = np.sqrt(size)
        for j in range(size):
            x[j] /= norm
        est = 0.0
        ok = False
        for _ in range(min(max_iter, 200) if small else max_iter):
            for j in range(size):
                y[j] = 0.0
            for e in range(k):
                y[ea[e]] += ew[e] * x[eb[e]]
                y[eb[e]] += ew[e] * x[ea[e]]
            s = 0.0
            for j in range(size):
                s += y[j] * y[j]
            new = np.sqrt(s)
            if new == 0.0:
                est = 0.0
                ok = True
                break
            for j in range(size):
                x[j] = y[j] / new
            if abs(new - est) <= rtol * new:
                est = new
                ok = True
                break
            est = new
        if not ok and small:
            a = np.zeros((size, size), np.float64)
            for e in range(k):
                a[ea[e], eb[e]] = ew[e]
                a[eb[e], ea[e]] = ew[e]
            est = np.linalg.eigvalsh(a)[-1]
            ok = True
        lam[i] = est
        converged[i] = ok
    return lam, converged


@njit(cache=True, nogil=True)
def _heap_push(keys, vals, size, key, val):  # type: ignore[no-untyped-def]
    j = size
    keys[j] = key
    vals[j] = val
    while j > 0:
        parent = (j - 1) >> 1
        if keys[parent] <= keys[j]:
            break
        keys[parent], keys[j] = keys[j], keys[parent]
        vals[parent], vals[j] = vals[j], vals[parent]
        j = parent
    return size + 1


@njit(cache=True, nogil=True)
def _heap_pop(keys, vals, size):  # type: ignore[no-untyped-def]
    key = keys[0]
    val = vals[0]
    size -= 1
    keys[0] = keys[size]
    vals[0] = vals[size]
    j = 0
    while True:
        a = 2 * j + 1
        if a >= size:
            break
        b = a + 1
        c = b if b < size and keys[b] < keys[a] else a
        if keys[j] <= keys[c]:
            break
        keys[c], keys[j] = keys[j], keys[c]
        vals[c], vals[j] = vals[j], vals[c]
        j = c
    return key, val, size


@njit(cache=True, nogil=True)
def peel(n, indptr, indices, data, alive):  # type: ignore[no-untyped-def]
    """Greedy peeling [2]_: repeatedly remove the live node of least weighted degree.

    Only nodes with ``alive`` set take part. Returns the removal order and
    ``mass[k]``, the total edge weight among the nodes still present after
    ``k`` removals (so ``mass[0]`` is the whole graph's). A binary heap with
    stale entries skipped gives O(m log n).
    """
    prio = np.zeros(n, np.float64)
    live = alive.copy()
    total = 0.0
    count = 0
    for u in range(n):
        if not live[u]:
            continue
        count += 1
        for p in range(indptr[u], indptr[u + 1]):
            if live[indices[p]]:
                prio[u] += data[p]
        total += prio[u]
    total /= 2.0
    cap = count + indptr[n] + 1
    keys = np.empty(cap, np.float64)
    vals = np.empty(cap, np.int64)
    size = 0
    for u in range(n):
        if live[u]:
            size = _heap_push(keys, vals, size, prio[u], u)
    order = np.empty(count, np.int64)
    mass = np.empty(count + 1, np.float64)
    mass[0] = total
    k = 0
    while k < count:
        key, u, size = _heap_pop(keys, vals, size)
        if not live[u] or key != prio[u]:
            continue
        live[u] = False
        order[k] = u
        total -= prio[u]
        k += 1
        mass[k] = max(total, 0.0)
        for p in range(indptr[u], indptr[u + 1]):
            v = indices[p]
            if live[v]:
                prio[v] -= data[p]
                size = _heap_push(keys, vals, size, prio[v], v)
    return order, mass



@njit(cache=True, nogil=True)
def _find(parent, a):  # type: ignore[no-untyped-def]
    """Root of ``a`` in the union-find forest ``parent``, halving the path on the way."""
    while parent[a] != a:
        parent[a] = parent[parent[a]]
        a = parent[a]
    return a


@njit(cache=True, nogil=True)
def _slot(indptr, indices, row, col):  # type: ignore[no-untyped-def]
    """Position of ``col`` in the sorted row ``row`` of a symmetric CSR."""
    lo = indptr[row]
    return lo + np.searchsorted(indices[lo:indptr[row + 1]], col)


@njit(cache=True, nogil=True)
def contact_components(n, indptr, indices, out_ptr, out_idx):  # type: ignore[no-untyped-def]
    """Connected components of every person's contact graph, in one pass over the triangles.

    The contact graph of ``i`` holds ``i``'s contacts and the ties among
    them (``i`` left out). Slot ``s`` of row ``i`` of the symmetric CSR
    ``(indptr, indices)`` stands for one contact of ``i``; each triangle
    ``(u, v, x)``, found once from its lowest node by the forward algorithm
    over ``(out_ptr, out_idx)`` [1]_, ties ``v`` to ``x`` among ``u``'s
    contacts, ``u`` to ``x`` among ``v``'s and ``u`` to ``v`` among ``x``'s.
    Union-find over the slots counts the merges per person; the components
    number the contacts less the merges. O(m^1.5) like the triangle count,
    plus a binary search per tie.
    """
    parent = np.arange(indptr[n])
    merges = np.zeros(n, np.int64)
    fwd = np.empty(out_idx.shape[0], np.int64)  # slot of the forward tie p in its lower row
    rev = np.empty(out_idx.shape[0], np.int64)  # and in its upper row
    for u in range(n):
        for p in range(out_ptr[u], out_ptr[u + 1]):
            fwd[p] = _slot(indptr, indices, u, out_idx[p])
            rev[p] = _slot(indptr, indices, out_idx[p], u)
    stamp = np.full(n, -1, np.int64)
    where = np.zeros(n, np.int64)
    for u in range(n):
        for p in range(out_ptr[u], out_ptr[u + 1]):
            stamp[out_idx[p]] = u
            where[out_idx[p]] = p
        for p in range(out_ptr[u], out_ptr[u + 1]):
            v = out_idx[p]
            for q in range(out_ptr[v], out_ptr[v + 1]):
                x = out_idx[q]
                if stamp[x] != u:
                    continue
                r = where[x]
                for k in range(3):
                    if k == 0:  # at u: v and x
                        ego, a, b = u, fwd[p], fwd[r]
                    elif k == 1:  # at v: u and x
                        ego, a, b = v, rev[p], fwd[q]
                    else:  # at x: u and v
                        ego, a, b = x, rev[r], rev[q]
                    ra = _find(parent, a)
                    rb = _find(parent, b)
                    if ra != rb:
                        parent[rb] = ra
                        merges[ego] += 1
    out = np.empty(n, np.int64)
    for i in range(n):
        out[i] = indptr[i + 1] - indptr[i] - merges[i]
    return out
