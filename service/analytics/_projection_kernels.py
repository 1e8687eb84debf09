"""Compiled loops behind :mod:`projection` and :mod:`backbone` (private).

The projection is Gustavson's row-by-row sparse product restricted to the
upper triangle: for each person, walk their events and, inside each event,
only the members with a larger id. Each unordered pair is therefore formed
once, half the multiply-adds of the full product B^T D B, and rows come out
already grouped by ``src``; a dense accumulator with a touched list merges
repeated pairs without a global sort.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit


@njit(cache=True, nogil=True)
def event_csr(person, event, weight, n_people, n_events):  # type: ignore[no-untyped-def]
    """Rows grouped by event, members ascending, duplicate rows merged.

    Two stable counting sorts (by person, then by event). A duplicated
    (person, event) row is kept once with the largest of its weights.
    Returns (ptr, members, member_weight, duplicates).
    """
    rows = person.shape[0]
    cnt = np.zeros(n_people + 1, np.int64)
    for r in range(rows):
        cnt[person[r] + 1] += 1
    for i in range(n_people):
        cnt[i + 1] += cnt[i]
    by_person = np.empty(rows, np.int64)
    for r in range(rows):
        p = person[r]
        by_person[cnt[p]] = r
        cnt[p] += 1
    ecnt = np.zeros(n_events + 1, np.int64)
    for r in range(rows):
        ecnt[event[r] + 1] += 1
    for e in range(n_events):
        ecnt[e + 1] += ecnt[e]
    order = np.empty(rows, np.int64)
    for t in range(rows):
        r = by_person[t]
        e = event[r]
        order[ecnt[e]] = r
        ecnt[e] += 1
    ptr = np.zeros(n_events + 1, np.int64)
    members = np.empty(rows, np.int32)
    mweight = np.empty(rows, np.float64)
    k = 0
    t = 0
    for e in range(n_events):
        start = k
        while t < rows and event[order[t]] == e:
            r = order[t]
            p = person[r]
            if k > start and members[k - 1] == p:
                if weight[r] > mweight[k - 1]:
                    mweight[k - 1] = weight[r]
            else:
                members[k] = p
                mweight[k] = weight[r]
                k += 1
            t += 1
        ptr[e + 1] = k
    return ptr, members[:k].copy(), mweight[:k].copy(), rows - k


@njit(cache=True, nogil=True)
def person_csr(ptr, members, n_people):  # type: ignore[no-untyped-def]
    """For each person, their events (ascending) and their position in ``members``."""
    n_events = ptr.shape[0] - 1
    pptr = np.zeros(n_people + 1, np.int64)
    for t in range(members.shape[0]):
        pptr[members[t] + 1] += 1
    for i in range(n_people):
        pptr[i + 1] += pptr[i]
    fill = pptr[:-1].copy()
    pev = np.empty(members.shape[0], np.int32)
    ppos = np.empty(members.shape[0], np.int64)
    for e in range(n_events):
        for t in range(ptr[e], ptr[e + 1]):
            p = members[t]
            pev[fill[p]] = e
            ppos[fill[p]] = t
            fill[p] += 1
    return pptr, pev, ppos


@njit(cache=True, nogil=True)
def upper_pairs(pptr, pev, ppos, ptr, members, mweight, factor, n_people, capacity):  # type: ignore[no-untyped-def]
    """Pairs i < j with weight sum_e factor[e] * w_ie * w_je and their shared-event count.

    Events with ``factor[e] == 0`` are skipped. Output is sorted by (src, dst).
    """
    acc = np.zeros(n_people, np.float64)
    shared = np.zeros(n_people, np.int32)
    touched = np.empty(n_people, np.int32)
    capacity = max(capacity, 16)
    src = np.empty(capacity, np.int32)
    dst = np.empty(capacity, np.int32)
    w = np.empty(capacity, np.float64)
    c = np.empty(capacity, np.int32)
    k = 0
    for i in range(n_people):
        nt = 0
        for s in range(pptr[i], pptr[i + 1]):
            e = pev[s]
            f = factor[e]
            if f == 0.0:
                continue
            pos = ppos[s]
            fi = f * mweight[pos]
            for t in range(pos + 1, ptr[e + 1]):
                j = members[t]
                if shared[j] == 0:
                    touched[nt] = j
                    nt += 1
                acc[j] += fi * mweight[t]
                shared[j] += 1
        if nt == 0:
            continue
        if k + nt > capacity:
            while k + nt > capacity:
                capacity *= 2
            src2 = np.empty(capacity, np.int32)
            dst2 = np.empty(capacity, np.int32)
            w2 = np.empty(capacity, np.float64)
            c2 = np.empty(capacity, np.int32)
            src2[:k] = src[:k]
            dst2[:k] = dst[:k]
            w2[:k] = w[:k]
            c2[:k] = c[:k]
            src, dst, w, c = src2, dst2, w2, c2
        row = np.sort(touched[:nt])
        for q in range(nt):
            j = row[q]
            src[k] = i
            dst[k] = j
            w[k] = acc[j]
            c[k] = shared[j]
            acc[j] = 0.0
            shared[j] = 0
            k += 1
    return src[:k].copy(), dst[:k].copy(), w[:k].copy(), c[:k].copy()


@njit(cache=True, nogil=True)
def _binom_tail_table(n, q, pmf, suffix):  # type: ignore[no-untyped-def]
    """pmf[t] = P(Bin(n, q) = t) for t <= n, suffix[t] = P(Bin(n, q) >= t)."""
    if q <= 0.0:
        pmf[: n + 1] = 0.0
        pmf[0] = 1.0
    elif q >= 1.0:
        pmf[: n + 1] = 0.0
        pmf[n] = 1.0
    else:
        lq = math.log(q)
        l1q = math.log1p(-q)
        lgn = math.lgamma(n + 1.0)
        for t in range(n + 1):
            pmf[t] = math.exp(
                lgn - math.lgamma(t + 1.0) - math.lgamma(n - t + 1.0) + t * lq + (n - t) * l1q
            )
    suffix[n + 1] = 0.0
    for t in range(n, -1, -1):
        suffix[t] = suffix[t + 1] + pmf[t]


@njit(cache=True, nogil=True)
def grouped_tail_exact(q, mult, count):  # type: ignore[no-untyped-def]
    """P(X >= count) for X = sum_b Bin(mult[b], q[b]), exactly.

    Dynamic programme over the groups with the states 0..count-1 kept and
    every larger value absorbed into one ``>= count`` mass, which is summed
    from the top of each binomial so that small tails keep their digits.
    """
    if count <= 0:
        return 1.0
    big = 0
    for b in range(mult.shape[0]):
        if mult[b] > big:
            big = mult[b]
    pmf = np.empty(big + 1, np.float64)
    suffix = np.empty(big + 2, np.float64)
    state = np.zeros(count, np.float64)
    nxt = np.zeros(count, np.float64)
    state[0] = 1.0
    absorbed = 0.0
    for b in range(mult.shape[0]):
        n = mult[b]
        if n == 0 or q[b] <= 0.0:
            continue
        _binom_tail_table(n, q[b], pmf, suffix)
        nxt[:] = 0.0
        for s in range(count):
            ps = state[s]
            if ps == 0.0:
                continue
            top = min(n, count - 1 - s)
            for t in range(top + 1):
                nxt[s + t] += ps * pmf[t]
            need = count - s
            if need <= n:
                absorbed += ps * suffix[need]
        state, nxt = nxt, state
    return min(absorbed, 1.0)


@njit(cache=True, nogil=True)
def grouped_tails(qa, mult, pair_a, pair_b, counts, exact_limit):  # type: ignore[no-untyped-def]
    """Upper tails for many (person class a, person class b, count) triples.

    ``qa[a, g]`` is the probability that a person of class a attends an event
    of group g; the pair's per-event probability is ``qa[a, g] * qa[b, g]``.
    Counts up to ``exact_limit`` use :func:`grouped_tail_exact`; larger ones
    the refined normal approximation (Hong 2013).
    """
    out = np.empty(counts.shape[0], np.float64)
    g = mult.shape[0]
    q = np.empty(g, np.float64)
    for r in range(counts.shape[0]):
        a = pair_a[r]
        b = pair_b[r]
        for t in range(g):
            q[t] = qa[a, t] * qa[b, t]
        c = counts[r]
        if c <= exact_limit:
            out[r] = grouped_tail_exact(q, mult, c)
        else:
            out[r] = refined_normal_tail(q, mult, c)
    return out


@njit(cache=True, nogil=True)
def refined_normal_tail(q, mult, count):  # type: ignore[no-untyped-def]
    """P(X >= count) by the refined normal approximation of Hong (2013)."""
    mu = 0.0
    var = 0.0
    third = 0.0
    for b in range(q.shape[0]):
        p = q[b]
        m = mult[b]
        mu += m * p
        var += m * p * (1.0 - p)
        third += m * p * (1.0 - p) * (1.0 - 2.0 * p)
    if var <= 0.0:
        return 1.0 if mu >= count - 1e-12 else 0.0
    sd = math.sqrt(var)
    gamma = third / (sd * sd * sd)
    x = (count - 0.5 - mu) / sd
    upper = 0.5 * math.erfc(x / math.sqrt(2.0))
    phi = math.exp(-0.5 * x * x) / math.sqrt(2.0 * math.pi)
    val = upper - gamma * (1.0 - x * x) * phi / 6.0
    return min(max(val, 0.0), 1.0)
