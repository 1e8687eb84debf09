"""Compiled loops for tie strength, link prediction and exposure (private).

Every kernel walks the undirected neighbour CSR of
:class:`service.analytics.ties.strength.NeighbourIndex` (rows sorted, no self-loops,
no duplicates) or the arc CSR of a ``DiffusionGraph``. Per-request kernels
write into caller-owned scratch arrays of length n and report which entries
they touched, so the caller resets only those: a request costs its
neighbourhood, not the graph.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

__all__ = [
    "CN",
    "AA",
    "RA",
    "JACCARD",
    "WAA",
    "PA",
    "common_counts",
    "pair_scores",
    "two_hop",
    "ppr_push",
    "ppr_pair_scores",
    "explain_shared",
    "lookup_strength",
    "gather_arcs",
    "reduce_exposure",
]

# Method codes shared by pair_scores and two_hop.
CN, AA, RA, JACCARD, WAA, PA = 0, 1, 2, 3, 4, 5


@njit(cache=True, nogil=True)
def common_counts(indptr, indices, lo, hi):  # type: ignore[no-untyped-def]
    """Common neighbours of each pair by merging the two sorted rows."""
    out = np.zeros(lo.shape[0], dtype=np.int32)
    for e in range(lo.shape[0]):
        i, iend = indptr[lo[e]], indptr[lo[e] + 1]
        j, jend = indptr[hi[e]], indptr[hi[e] + 1]
        c = 0
        while i < iend and j < jend:
            a, b = indices[i], indices[j]
            if a == b:
                c += 1
                i += 1
                j += 1
            elif a < b:
                i += 1
            else:
                j += 1
        out[e] = c
    return out


@njit(cache=True, nogil=True)
def pair_scores(indptr, indices, degree, strength, u, v, code):  # type: ignore[no-untyped-def]
    """Neighbourhood similarity of each pair ``(u[e], v[e])`` (method ``code``)."""
    out = np.zeros(u.shape[0], dtype=np.float64)
    for e in range(u.shape[0]):
        x, y = u[e], v[e]
        if code == PA:
            out[e] = float(degree[x]) * float(degree[y])
            continue
        i, iend = indptr[x], indptr[x + 1]
        j, jend = indptr[y], indptr[y + 1]
        c = 0
        s = 0.0
        while i < iend and j < jend:
            a, b = indices[i], indices[j]
            if a == b:
                c += 1
                k = degree[a]
                if code == AA and k > 1:
                    s += 1.0 / math.log(k)
                elif code == RA:
                    s += 1.0 / k
                elif code == WAA and k > 1:
                    s += 0.5 * (strength[i] + strength[j]) / math.log(k)
                i += 1
                j += 1
            elif a < b:
                i += 1
            else:
                j += 1
        if code == CN:
            out[e] = c
        elif code == JACCARD:
            union = degree[x] + degree[y] - c
            out[e] = c / union if union > 0 else 0.0
        else:
            out[e] = s
    return out


@njit(cache=True, nogil=True)
def two_hop(  # type: ignore[no-untyped-def]
    indptr, indices, degree, strength, x, code, eligible, use_eligible, acc, cnt, flag, touched
):
    """Accumulate scores of every node two hops from ``x`` into ``acc``/``cnt``.

    ``x`` and its neighbours are skipped (flagged during the walk, cleared
    after). Returns how many entries of ``touched`` name candidates.
    """
    flag[x] = 1
    for i in range(indptr[x], indptr[x + 1]):
        flag[indices[i]] = 1
    m = 0
    for i in range(indptr[x], indptr[x + 1]):
        z = indices[i]
        k = degree[z]
        if k < 2:
            continue
        if code == AA:
            f = 1.0 / math.log(k)
        elif code == RA:
            f = 1.0 / k
        elif code == WAA:
            f = 0.5 / math.log(k)
        else:
            f = 1.0
        for j in range(indptr[z], indptr[z + 1]):
            y = indices[j]
            if flag[y]:
                continue
            if use_eligible and not eligible[y]:
                continue
            if cnt[y] == 0:
                touched[m] = y
                m += 1
            cnt[y] += 1
            if code == WAA:
                acc[y] += f * (strength[i] + strength[j])
            else:
                acc[y] += f
    flag[x] = 0
    for i in range(indptr[x], indptr[x + 1]):
        flag[indices[i]] = 0
    return m


@njit(cache=True, nogil=True)
def ppr_push(  # type: ignore[no-untyped-def]
    indptr, indices, degree, s, alpha, eps, p, r, seen, inq, queue, touched
):
    """Forward push from ``s`` (Andersen, Chung, Lang 2006), non-lazy walk.

    Pushes node u while ``r[u] >= eps * degree[u]``: ``p[u] += alpha r[u]``
    and ``(1 - alpha) r[u]`` is shared equally among u's neighbours. On exit
    every residual is below ``eps * degree``. Returns the number of touched
    nodes (``p`` or ``r`` nonzero) listed in ``touched``.
    """
    n = degree.shape[0]
    seen[s] = 1
    touched[0] = s
    m = 1
    r[s] = 1.0
    if degree[s] == 0:
        # An isolated source keeps all its mass (teleport always returns to it).
        p[s] = 1.0
        r[s] = 0.0
        return m
    head = 0
    size = 1
    queue[0] = s
    inq[s] = 1
    while size > 0:
        u = queue[head]
        head += 1
        if head == n:
            head = 0
        size -= 1
        inq[u] = 0
        ru = r[u]
        du = degree[u]
        if ru < eps * du:
            continue
        p[u] += alpha * ru
        r[u] = 0.0
        share = (1.0 - alpha) * ru / du
        for i in range(indptr[u], indptr[u + 1]):
            v = indices[i]
            if not seen[v]:
                seen[v] = 1
                touched[m] = v
                m += 1
            r[v] += share
            if not inq[v] and r[v] >= eps * degree[v]:
                tail = head + size
                if tail >= n:
                    tail -= n
                queue[tail] = v
                inq[v] = 1
                size += 1
    return m


@njit(cache=True, nogil=True)
def ppr_pair_scores(  # type: ignore[no-untyped-def]
    indptr, indices, degree, alpha, eps, sources, ptr, partner, pair, scores, p, r, seen, inq,
    queue, touched
):
    """For each source, push once and add ``p[partner]`` to ``scores[pair]``."""
    for t in range(sources.shape[0]):
        m = ppr_push(indptr, indices, degree, sources[t], alpha, eps, p, r, seen, inq, queue,
                     touched)
        for q in range(ptr[t], ptr[t + 1]):
            scores[pair[q]] += p[partner[q]]
        for q in range(m):
            w = touched[q]
            p[w] = 0.0
            r[w] = 0.0
            seen[w] = 0


@njit(cache=True, nogil=True)
def explain_shared(indptr, indices, strength, x, cands, k):  # type: ignore[no-untyped-def]
    """The ``k`` strongest shared contacts of ``x`` and each candidate.

    A contact z is ranked by the weaker of its two ties (x-z, z-y), then by
    their sum, then by index. Returns (node, tie to x, tie to y, count).
    """
    c = cands.shape[0]
    oz = np.full((c, k), -1, dtype=np.int32)
    ox = np.zeros((c, k), dtype=np.float64)
    oy = np.zeros((c, k), dtype=np.float64)
    cnt = np.zeros(c, dtype=np.int32)
    for e in range(c):
        y = cands[e]
        i, iend = indptr[x], indptr[x + 1]
        j, jend = indptr[y], indptr[y + 1]
        filled = 0
        while i < iend and j < jend:
            a, b = indices[i], indices[j]
            if a == b:
                cnt[e] += 1
                sx, sy = strength[i], strength[j]
                lo, tot = min(sx, sy), sx + sy
                # insertion into the small sorted buffer
                pos = filled
                while pos > 0:
                    px, py = ox[e, pos - 1], oy[e, pos - 1]
                    plo, ptot = min(px, py), px + py
                    if lo > plo or (lo == plo and tot > ptot):
                        pos -= 1
                    else:
                        break
                if pos < k:
                    last = min(filled, k - 1)
                    for q in range(last, pos, -1):
                        oz[e, q] = oz[e, q - 1]
                        ox[e, q] = ox[e, q - 1]
                        oy[e, q] = oy[e, q - 1]
                    oz[e, pos] = a
                    ox[e, pos] = sx
                    oy[e, pos] = sy
                    if filled < k:
                        filled += 1
                i += 1
                j += 1
            elif a < b:
                i += 1
            else:
                j += 1
    return oz, ox, oy, cnt


@njit(cache=True, nogil=True)
def lookup_strength(indptr, indices, strength, u, v):  # type: ignore[no-untyped-def]
    """Tie strength of each pair (u[e], v[e]) by binary search in row u; 0 if absent."""
    out = np.zeros(u.shape[0], dtype=np.float64)
    for e in range(u.shape[0]):
        lo, hi = indptr[u[e]], indptr[u[e] + 1]
        t = v[e]
        while lo < hi:
            mid = (lo + hi) >> 1
            if indices[mid] < t:
                lo = mid + 1
            else:
                hi = mid
        if lo < indptr[u[e] + 1] and indices[lo] == t:
            out[e] = strength[lo]
    return out


@njit(cache=True, nogil=True)
def gather_arcs(  # type: ignore[no-untyped-def]
    out_indptr, out_indices, out_prob, adopters, is_adopter, eligible, use_eligible, total
):
    """Arcs from adopters to eligible non-adopters: (target, adopter, probability)."""
    tgt = np.empty(total, dtype=np.int32)
    src = np.empty(total, dtype=np.int32)
    prob = np.empty(total, dtype=np.float64)
    m = 0
    for a in range(adopters.shape[0]):
        u = adopters[a]
        for i in range(out_indptr[u], out_indptr[u + 1]):
            v = out_indices[i]
            if is_adopter[v]:
                continue
            if use_eligible and not eligible[v]:
                continue
            tgt[m] = v
            src[m] = u
            prob[m] = out_prob[i]
            m += 1
    return tgt[:m], src[:m], prob[:m]


@njit(cache=True, nogil=True)
def reduce_exposure(tgt, src, prob, tie, asker_ok, lt):  # type: ignore[no-untyped-def]
    """Per target (arcs grouped by target): exposure, contacts and best asker.

    IC: 1 - prod(1 - p); LT: min(1, sum p). The asker is the permitted
    adopter with the strongest tie, then the highest probability, then the
    lowest index; -1 when no adopter in reach may be asked.
    """
    m = tgt.shape[0]
    groups = 0
    for e in range(m):
        if e == 0 or tgt[e] != tgt[e - 1]:
            groups += 1
    node = np.empty(groups, dtype=np.int32)
    expo = np.empty(groups, dtype=np.float64)
    count = np.empty(groups, dtype=np.int32)
    ask = np.empty(groups, dtype=np.int32)
    ask_tie = np.zeros(groups, dtype=np.float64)
    ask_prob = np.zeros(groups, dtype=np.float64)
    g = -1
    surv = 1.0
    total = 0.0
    for e in range(m):
        if e == 0 or tgt[e] != tgt[e - 1]:
            if g >= 0:
                expo[g] = min(1.0, total) if lt else 1.0 - surv
            g += 1
            node[g] = tgt[e]
            count[g] = 0
            ask[g] = -1
            surv = 1.0
            total = 0.0
        count[g] += 1
        surv *= 1.0 - prob[e]
        total += prob[e]
        if asker_ok[src[e]]:
            b = ask[g]
            if (
                b < 0
                or tie[e] > ask_tie[g]
                or (tie[e] == ask_tie[g] and prob[e] > ask_prob[g])
                or (tie[e] == ask_tie[g] and prob[e] == ask_prob[g] and src[e] < b)
            ):
                ask[g] = src[e]
                ask_tie[g] = tie[e]
                ask_prob[g] = prob[e]
    if g >= 0:
        expo[g] = min(1.0, total) if lt else 1.0 - surv
    return node, expo, count, ask, ask_tie, ask_prob
