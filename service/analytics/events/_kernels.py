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
def person_slots(pptr, pev, ppos, ptr, factor, n_people):  # type: ignore[no-untyped-def]
    """Per person, the pairs their row of the projection can hold at most (members after
    them in their kept events): the room :func:`upper_pairs_rows` writes into."""
    out = np.zeros(n_people, np.int64)
    for i in range(n_people):
        total = 0
        for s in range(pptr[i], pptr[i + 1]):
            e = pev[s]
            if factor[e] != 0.0:
                total += ptr[e + 1] - ppos[s] - 1
        out[i] = total
    return out


@njit(cache=True, nogil=True)
def upper_pairs_rows(i0, i1, at, pptr, pev, ppos, ptr, members, mweight, factor,  # type: ignore[no-untyped-def]
                     src, dst, w, c, strength, degree, work, touched):
    """The projection's rows for people ``i0 .. i1 - 1``, written from index ``at``: pairs
    i < j with weight sum_e factor[e] * w_ie * w_je and their shared-event count, sorted by
    (i, j). Events with ``factor[e] == 0`` are skipped. A dense accumulator (weight and
    count side by side in one row of ``work``, so an update touches one cache line) with a
    touched list merges repeated pairs without a global sort.

    The caller reserves room from :func:`person_slots`; ``work`` (n_people x 2, zero) and
    ``touched`` (n_people) are this call's scratch and come back as they went in. Sets
    ``strength[i]`` and ``degree[i]`` to the sum and count of person i's row (the pairs
    where i is the smaller id; :func:`column_sums` adds the others). Returns the pairs
    written. Rows of different people are independent, so ranges of people run
    on different threads give, put end to end, the single-thread rows bit for bit.
    """
    k = at
    for i in range(i0, i1):
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
                if work[j, 1] == 0.0:
                    touched[nt] = j
                    nt += 1
                work[j, 0] += fi * mweight[t]
                work[j, 1] += 1.0
        strength[i] = 0.0
        degree[i] = nt
        if nt == 0:
            continue
        row = touched[:nt]
        row.sort()
        si = 0.0
        for q in range(nt):
            j = row[q]
            wj = work[j, 0]
            src[k] = i
            dst[k] = j
            w[k] = wj
            c[k] = np.int32(work[j, 1])
            work[j, 0] = 0.0
            work[j, 1] = 0.0
            si += wj
            k += 1
        strength[i] = si
    return k - at


@njit(cache=True, nogil=True)
def column_sums(dst, w, strength, degree):  # type: ignore[no-untyped-def]
    """Add each tie to its larger end's strength and degree, in tie order (one thread, so the
    sums do not depend on how the rows were split)."""
    for e in range(dst.shape[0]):
        j = dst[e]
        strength[j] += w[e]
        degree[j] += 1


@njit(cache=True, nogil=True)
def move_down(src, dst, w, c, frm, to, count):  # type: ignore[no-untyped-def]
    """Move ``count`` pairs from index ``frm`` down to ``to`` (``to <= frm``), front first."""
    for q in range(count):
        src[to + q] = src[frm + q]
        dst[to + q] = dst[frm + q]
        w[to + q] = w[frm + q]
        c[to + q] = c[frm + q]


@njit(cache=True, nogil=True)
def _log_binom_pmf(n, q, t):  # type: ignore[no-untyped-def]
    return (math.lgamma(n + 1.0) - math.lgamma(t + 1.0) - math.lgamma(n - t + 1.0)
            + t * math.log(q) + (n - t) * math.log1p(-q))


@njit(cache=True, nogil=True)
def _binom_head(n, q, count, pmf, tail):  # type: ignore[no-untyped-def]
    """pmf[t] = P(Bin(n, q) = t) for t < count; tail[r] = P(Bin(n, q) >= r) for r <= count.

    The tail at ``count`` is summed upwards from ``count`` when ``count`` is
    above the mean (small tails keep their digits), else taken as one minus
    the head; smaller r add pmf terms downwards, so no difference is formed.
    Work O(count) plus the terms of the upward sum.
    """
    for t in range(count):
        if t > n or q <= 0.0:
            pmf[t] = 1.0 if (t == 0 and q <= 0.0) else 0.0
        elif q >= 1.0:
            pmf[t] = 1.0 if t == n else 0.0
        else:
            pmf[t] = math.exp(_log_binom_pmf(n, q, t))
    if count > n or q <= 0.0:
        top = 0.0
    elif q >= 1.0:
        top = 1.0
    elif count > n * q:
        term = math.exp(_log_binom_pmf(n, q, count))
        top = 0.0
        t = count
        ratio = q / (1.0 - q)
        while term > 0.0 and t <= n:
            top += term
            if term < 1e-17 * top:
                break
            term *= (n - t) / (t + 1.0) * ratio
            t += 1
    else:
        head = 0.0
        for t in range(count):
            head += pmf[t]
        top = max(1.0 - head, 0.0)
    tail[count] = min(top, 1.0)
    for r in range(count - 1, -1, -1):
        tail[r] = min(tail[r + 1] + pmf[r], 1.0)


@njit(cache=True, nogil=True)
def grouped_tail_exact(q, mult, count):  # type: ignore[no-untyped-def]
    """P(X >= count) for X = sum_b Bin(mult[b], q[b]), exactly.

    Dynamic programme over the groups with the states 0..count-1 kept and
    every larger value absorbed into one ``>= count`` mass. Work
    O(groups * count^2).
    """
    if count <= 0:
        return 1.0
    pmf = np.empty(count + 1, np.float64)
    tail = np.empty(count + 1, np.float64)
    state = np.zeros(count, np.float64)
    nxt = np.zeros(count, np.float64)
    state[0] = 1.0
    absorbed = 0.0
    for b in range(mult.shape[0]):
        n = mult[b]
        if n == 0 or q[b] <= 0.0:
            continue
        _binom_head(n, q[b], count, pmf, tail)
        nxt[:] = 0.0
        for s in range(count):
            ps = state[s]
            if ps == 0.0:
                continue
            for t in range(count - s):
                nxt[s + t] += ps * pmf[t]
            absorbed += ps * tail[count - s]
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


@njit(cache=True, nogil=True)
def node_stats(src, dst, w, n, directed):  # type: ignore[no-untyped-def]
    """Strength and degree per node: rows (s_out, k_out, s_in, k_in), or (s, k, s, k)."""
    st = np.zeros((n, 4), np.float64)
    for e in range(src.shape[0]):
        a = src[e]
        b = dst[e]
        st[a, 0] += w[e]
        st[a, 1] += 1.0
        if directed:
            st[b, 2] += w[e]
            st[b, 3] += 1.0
        else:
            st[b, 0] += w[e]
            st[b, 1] += 1.0
    if not directed:
        for v in range(n):
            st[v, 2] = st[v, 0]
            st[v, 3] = st[v, 1]
    return st


@njit(cache=True, nogil=True)
def disparity_p_range(e0, e1, src, dst, w, st, both, keep_degree_one, p, forced):  # type: ignore[no-untyped-def]
    """Disparity-filter p-value of ties ``e0 .. e1 - 1`` into ``p``, and into ``forced``
    whether a degree-one rule keeps the tie (each tie alone).

    ``st`` from :func:`node_stats`: the source is tested on (s, k) in columns
    0-1, the target on columns 2-3. (1 - p)^(k - 1) is taken as
    exp((k - 1) log1p(-p)) so small shares keep their digits at large degree.

    Ties are sorted by source, so the source's row is read in order, but the
    target's is a random row: a cache miss each on graphs of millions of people.
    The targets' rows of a block of ties are therefore read first, in a loop of
    loads alone that the processor overlaps, and then used (measured on 58
    million ties: 2.7 s against 8.5 to 10 s reading them inside the test).
    """
    block = 256
    s_b = np.empty(block, np.float64)
    k_b = np.empty(block, np.float64)
    for b0 in range(e0, e1, block):
        b1 = min(b0 + block, e1)
        for e in range(b0, b1):
            b = dst[e]
            s_b[e - b0] = st[b, 2]
            k_b[e - b0] = st[b, 3]
        for e in range(b0, b1):
            a = src[e]
            ka = st[a, 1]
            kb = k_b[e - b0]
            pa = 1.0
            if ka > 1.0:
                pa = math.exp((ka - 1.0) * math.log1p(-min(w[e] / st[a, 0], 1.0)))
            pb = 1.0
            if kb > 1.0:
                pb = math.exp((kb - 1.0) * math.log1p(-min(w[e] / s_b[e - b0], 1.0)))
            if both:
                # An endpoint with one tie has no test: the other endpoint decides.
                if ka == 1.0:
                    pa = pb
                if kb == 1.0:
                    pb = pa
                p[e] = max(pa, pb)
            else:
                p[e] = min(pa, pb)
            if keep_degree_one and (ka == 1.0 or kb == 1.0):
                forced[e] = True
