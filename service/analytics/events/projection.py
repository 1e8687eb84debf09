"""Who is tied to whom, from a table of (person, event) rows.

:func:`project_events` turns the two-mode table into a one-mode weighted
graph of people: plain co-occurrence counts, Newman's collaboration
weighting (2001), or the directed resource-allocation projection of Zhou,
Ren, Medo and Zhang (2007), optionally with exponential time decay and a cap
on event size. The intake layer interns ids to 0..n-1 before calling it.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
from numpy.typing import ArrayLike, NDArray

from . import _kernels as K
from .._chunks import ChunkSizer, map_ordered, thread_count
from ..errors import EmptyGraph, InvalidParameter

__all__ = [
    "PROJECTIONS",
    "DEFAULT_MAX_EVENT_SIZE",
    "DEFAULT_MAX_PAIR_SLOTS",
    "Projection",
    "EventTable",
    "UnknownProjection",
    "SingleParticipantEvent",
    "ProjectionTooLarge",
    "EmptyProjection",
    "event_table",
    "project_events",
    "project_table",
]

ProjectionName = Literal["count", "newman", "resource_allocation"]
PROJECTIONS: tuple[str, ...] = ("count", "newman", "resource_allocation")
DEFAULT_MAX_EVENT_SIZE = 100
DEFAULT_MAX_PAIR_SLOTS = 500_000_000


class UnknownProjection(InvalidParameter):
    """There is no projection of that name; ``choices`` lists the known ones."""


class SingleParticipantEvent(InvalidParameter):
    """An event has only one participant, so it ties no pair of people."""


class ProjectionTooLarge(InvalidParameter):
    """The kept events would form more candidate pairs than the limit allows."""


class EmptyProjection(EmptyGraph):
    """No pair of people shares a kept event, so the projection has no ties."""


@dataclass(frozen=True, eq=False)
class EventTable:
    """The (person, event) table after merging duplicate rows, grouped both ways.

    Attributes
    ----------
    n_people, n_events : id ranges (ids are 0..n-1).
    ptr, members, member_weight : event -> its people (ascending), CSR.
    person_ptr, person_events, person_pos : person -> their events, CSR;
        ``person_pos`` indexes ``members``.
    event_time : latest row time per event (NaN when no times were given).
    rows, duplicate_rows : rows read and rows merged into an earlier one.
    """

    n_people: int
    n_events: int
    ptr: NDArray[np.int64]
    members: NDArray[np.int32]
    member_weight: NDArray[np.float64]
    person_ptr: NDArray[np.int64]
    person_events: NDArray[np.int32]
    person_pos: NDArray[np.int64]
    event_time: NDArray[np.float64]
    rows: int
    duplicate_rows: int

    @property
    def event_size(self) -> NDArray[np.int64]:
        """Distinct participants per event."""
        return np.diff(self.ptr)

    @property
    def person_degree(self) -> NDArray[np.int64]:
        """Distinct events per person."""
        return np.diff(self.person_ptr)


@dataclass(frozen=True, eq=False)
class Projection:
    """A weighted graph of people projected from an event table.

    Undirected projections hold each pair once with ``src < dst``, sorted;
    the resource-allocation projection holds arcs ``src -> dst``.

    Attributes
    ----------
    src, dst : int32 person ids; weight : float64 tie weight.
    shared : int32 number of kept events the two people share.
    strength, degree : float64 and int64 per person, sum of tie weights and
        number of ties (undirected projections; None for directed ones).
    method : the projection's name; directed : arcs rather than pairs.
    n_people : id range of people.
    rows, duplicate_rows : table rows read and rows merged as duplicates.
    events : events with at least one row; largest_event : its participants.
    max_event_size, oversized : the cap and what was done above it.
    events_over_cap : events above the cap (dropped or down-weighted).
    events_single : one-participant events skipped.
    people_in_events : people with at least one row.
    people_without_ties : of those, people who have no tie in the projection.
    """

    src: NDArray[np.int32]
    dst: NDArray[np.int32]
    weight: NDArray[np.float64]
    shared: NDArray[np.int32]
    strength: NDArray[np.float64] | None
    degree: NDArray[np.int64] | None
    method: str
    directed: bool
    n_people: int
    rows: int
    duplicate_rows: int
    events: int
    largest_event: int
    max_event_size: int | None
    oversized: str
    events_over_cap: int
    events_single: int
    people_in_events: int
    people_without_ties: int

    @property
    def pairs(self) -> int:
        """Number of ties (arcs when directed)."""
        return int(self.src.shape[0])

    @property
    def events_dropped(self) -> int:
        """Events left out because they were above the cap."""
        return self.events_over_cap if self.oversized == "drop" else 0

    @property
    def events_downweighted(self) -> int:
        """Events kept at a reduced weight because they were above the cap."""
        return self.events_over_cap if self.oversized == "downweight" else 0


def _int_ids(values: ArrayLike, name: str, limit: int | None) -> tuple[NDArray[np.int64], int]:
    arr = np.asarray(values)
    if arr.ndim != 1:
        raise InvalidParameter(field=name, reason=f"{name} must be a one-dimensional array")
    if arr.size and not np.issubdtype(arr.dtype, np.integer):
        raise InvalidParameter(field=name, reason=f"{name} ids must be whole numbers")
    arr = arr.astype(np.int64, copy=False)
    if arr.size and int(arr.min()) < 0:
        raise InvalidParameter(field=name, value=int(arr.min()), reason=f"{name} ids start at 0")
    top = int(arr.max()) + 1 if arr.size else 0
    if limit is not None:
        if top > limit:
            raise InvalidParameter(field=name, value=top - 1, limit=limit - 1,
                                   reason=f"a {name} id is above the largest allowed id")
        top = limit
    return arr, top


def _float_column(values: ArrayLike | None, name: str, rows: int) -> NDArray[np.float64] | None:
    if values is None:
        return None
    arr = np.asarray(values, dtype=np.float64)
    if arr.shape != (rows,):
        raise InvalidParameter(field=name, rows=rows, reason=f"{name} needs one value per row")
    if not np.all(np.isfinite(arr)):
        raise InvalidParameter(field=name, reason=f"{name} must be finite numbers")
    return arr


def event_table(person: ArrayLike, event: ArrayLike, *, weight: ArrayLike | None = None,
                time: ArrayLike | None = None, n_people: int | None = None,
                n_events: int | None = None) -> EventTable:
    """Group a (person, event) table both ways, merging duplicate rows.

    Parameters
    ----------
    person, event : array_like of int
        One row per participation, ids 0..n-1.
    weight : array_like of float, optional
        Positive weight of each participation (1 when omitted).
    time : array_like of float, optional
        Time of each row in seconds; an event's time is its latest row time.
    n_people, n_events : int, optional
        Id ranges; ids at or above them are refused.

    Returns
    -------
    EventTable

    Raises
    ------
    InvalidParameter
        Arrays of unequal length, negative or out-of-range ids, weights not
        positive, times not finite.

    Notes
    -----
    A (person, event) pair listed twice counts once, with the larger weight:
    being recorded twice at one event is not meeting its people twice.
    Linear time: two counting sorts.

    References
    ----------
    .. [1] F. G. Gustavson (1978). Two fast algorithms for sparse matrices:
       multiplication and permuted transposition. ACM TOMS 4(3), 250-269.

    Examples
    --------
    >>> t = event_table([0, 1, 1, 2], [0, 0, 0, 1])
    >>> t.event_size.tolist(), t.duplicate_rows
    ([2, 1], 1)
    """
    p, n_p = _int_ids(person, "person", n_people)
    e, n_e = _int_ids(event, "event", n_events)
    if p.shape != e.shape:
        raise InvalidParameter(field="event", reason="person and event need the same number of rows")
    rows = int(p.shape[0])
    w = _float_column(weight, "weight", rows)
    if w is not None and rows and float(w.min()) <= 0.0:
        raise InvalidParameter(field="weight", reason="weights must be above 0")
    t = _float_column(time, "time", rows)
    ptr, members, mweight, dup = K.event_csr(
        p, e, w if w is not None else np.ones(rows), n_p, n_e)
    pptr, pev, ppos = K.person_csr(ptr, members, n_p)
    etime = np.full(n_e, np.nan)
    if t is not None and rows:
        etime = np.full(n_e, -np.inf)
        np.maximum.at(etime, e, t)
        etime[np.isneginf(etime)] = np.nan
    return EventTable(n_people=n_p, n_events=n_e, ptr=ptr, members=members,
                      member_weight=mweight, person_ptr=pptr, person_events=pev,
                      person_pos=ppos, event_time=etime, rows=rows, duplicate_rows=int(dup))


def _event_factors(table: EventTable, method: str, *, half_life: float | None,
                   t_ref: float | None, max_event_size: int | None, oversized: str,
                   singletons: str) -> tuple[NDArray[np.float64], int, int]:
    size = table.event_size
    f = np.ones(table.n_events)
    if method == "newman":
        f = np.divide(1.0, size - 1, out=np.zeros(table.n_events), where=size > 1)
    elif method == "resource_allocation":
        f = np.divide(1.0, size, out=np.zeros(table.n_events), where=size > 0)
    single = size == 1
    n_single = int(single.sum())
    if n_single and singletons == "refuse":
        first = int(np.flatnonzero(single)[0])
        raise SingleParticipantEvent(events=n_single, example_event=first)
    f[size < 2] = 0.0
    over = np.zeros(table.n_events, bool)
    if max_event_size is not None:
        over = size > max_event_size
        if oversized == "drop":
            f[over] = 0.0
        else:
            f[over] *= (max_event_size - 1) / (size[over] - 1)
    if half_life is not None:
        times = table.event_time
        used = size > 0
        ref = float(np.nanmax(times[used])) if t_ref is None else float(t_ref)
        with np.errstate(over="ignore"):
            f = f * np.exp2(-(ref - np.where(used, times, ref)) / half_life)
    return f, int(over.sum()), n_single


def project_events(person: ArrayLike, event: ArrayLike, *, method: str = "count",
                   weight: ArrayLike | None = None, time: ArrayLike | None = None,
                   half_life: float | None = None, t_ref: float | None = None,
                   max_event_size: int | None = DEFAULT_MAX_EVENT_SIZE,
                   oversized: Literal["drop", "downweight"] = "drop",
                   singletons: Literal["refuse", "skip"] = "refuse",
                   n_people: int | None = None, n_events: int | None = None,
                   max_pair_slots: int = DEFAULT_MAX_PAIR_SLOTS, threads: int | None = None,
                   progress: Callable[[float], None] | None = None) -> Projection:
    """Project a (person, event) table onto people.

    ``method`` chooses the weight each shared event e with n_e participants
    adds to a tie:

    - ``"count"``: 1 per shared event (co-occurrence count).
    - ``"newman"``: 1 / (n_e - 1) to each pair of its participants [1]_.
    - ``"resource_allocation"``: directed; the arc j -> i gets
      (1 / k_j) * sum over shared events of 1 / n_e, where k_j is the number
      of j's kept events: the share of j's resource that reaches i after
      flowing person -> event -> person [2]_.

    Parameters
    ----------
    person, event : array_like of int
        One row per participation, ids 0..n-1.
    method : {"count", "newman", "resource_allocation"}
    weight : array_like of float, optional
        Positive participation weights; a shared event adds its weight times
        w_ie * w_je (the product B^T D B of the weighted incidence matrix).
        Not defined for ``"resource_allocation"``.
    time, half_life : optional
        Row times in seconds and a half-life in seconds. An event at time t
        counts 2 ** (-(t_ref - t) / half_life); an event's time is its latest
        row time.
    t_ref : float, optional
        Reference time; the latest event time when omitted (an event after
        ``t_ref`` counts more than 1).
    max_event_size : int or None
        Cap on distinct participants per event (default 100, see Notes).
    oversized : {"drop", "downweight"}
        Leave events above the cap out, or keep them with every contribution
        multiplied by (cap - 1) / (n_e - 1).
    singletons : {"refuse", "skip"}
        An event with one participant ties nobody: refuse the table, or skip it.
    n_people, n_events : int, optional
        Id ranges; ids at or above them are refused.
    max_pair_slots : int
        Limit on sum over kept events of n_e (n_e - 1) / 2, the work and the
        worst-case memory of the projection.

    Returns
    -------
    Projection

    Raises
    ------
    UnknownProjection
        ``method`` is not one of :data:`PROJECTIONS`.
    SingleParticipantEvent
        An event has one participant and ``singletons="refuse"``.
    ProjectionTooLarge
        The kept events would form more than ``max_pair_slots`` pairs.
    EmptyProjection
        No two people share a kept event.
    InvalidParameter
        Bad ids, weights, times or options.

    Notes
    -----
    Duplicated (person, event) rows count once. Pairs are formed per person
    over their events, only towards larger ids (Gustavson's row-wise product
    on the upper triangle), so the cost is sum_e n_e (n_e - 1) / 2 additions
    and the memory is the distinct pairs plus O(rows + people).

    Default cap of 100: an event of n people makes n (n - 1) / 2 pairs, so a
    cap c bounds the work by rows * (c - 1) / 2 whatever the size tail; and
    sharing an event with a hundred or more people says little about knowing
    each other (leaving out very large collaborations is common practice in
    co-authorship studies). Newman's weighting already gives an event's
    participants a total of 1 each whatever its size; ``"downweight"``
    reduces that total to (cap - 1) / (n_e - 1) for events above the cap, and
    for plain counts makes each participant's total from such an event equal
    to that of an event at the cap.

    With time decay the resource-allocation rows no longer sum to one.

    References
    ----------
    .. [1] M. E. J. Newman (2001). Scientific collaboration networks. II.
       Shortest paths, weighted networks, and centrality. Phys. Rev. E 64,
       016132.
    .. [2] T. Zhou, J. Ren, M. Medo, Y.-C. Zhang (2007). Bipartite network
       projection and personal recommendation. Phys. Rev. E 76, 046115.

    Examples
    --------
    >>> g = project_events([0, 1, 2, 0, 1, 3, 2, 3], [0, 0, 0, 1, 1, 1, 2, 2],
    ...                    method="newman")
    >>> list(zip(g.src.tolist(), g.dst.tolist(), g.weight.round(3).tolist()))
    [(0, 1, 1.0), (0, 2, 0.5), (0, 3, 0.5), (1, 2, 0.5), (1, 3, 0.5), (2, 3, 1.0)]
    """
    if method not in PROJECTIONS:
        raise UnknownProjection(name=method, choices=list(PROJECTIONS))
    if oversized not in ("drop", "downweight"):
        raise InvalidParameter(field="oversized", value=oversized, choices=["drop", "downweight"])
    if singletons not in ("refuse", "skip"):
        raise InvalidParameter(field="singletons", value=singletons, choices=["refuse", "skip"])
    if max_event_size is not None and max_event_size < 2:
        raise InvalidParameter(field="max_event_size", value=max_event_size,
                               reason="the cap must allow at least 2 participants")
    if (time is None) != (half_life is None):
        raise InvalidParameter(field="half_life",
                               reason="time decay needs both row times and a half-life")
    if half_life is not None and not (np.isfinite(half_life) and half_life > 0):
        raise InvalidParameter(field="half_life", value=half_life, reason="must be above 0")
    if weight is not None and method == "resource_allocation":
        raise InvalidParameter(field="weight",
                               reason="participation weights are not defined for resource allocation")
    table = event_table(person, event, weight=weight, time=time, n_people=n_people,
                        n_events=n_events)
    return project_table(table, method=method, half_life=half_life, t_ref=t_ref,
                         max_event_size=max_event_size, oversized=oversized,
                         singletons=singletons, max_pair_slots=max_pair_slots, threads=threads,
                         progress=progress)


def _upper_pairs(table: EventTable, factor: NDArray[np.float64], *, threads: int,
                 progress: Callable[[float], None] | None) -> tuple[
                     NDArray[np.int32], NDArray[np.int32], NDArray[np.float64], NDArray[np.int32],
                     NDArray[np.float64], NDArray[np.int64]]:
    """The projection's pairs i < j, sorted by (i, j), with weight and shared-event count, and
    each person's strength and degree.

    People are taken in rounds of about a quarter second (:class:`ChunkSizer`), each round
    split into contiguous ranges of people with equal room, one per thread. Each range writes
    its rows into the room :func:`K.person_slots` reserves for it, and the rows are then moved
    down end to end, so the arrays hold the single-thread result whatever the split.
    """
    n = table.n_people
    slots = K.person_slots(table.person_ptr, table.person_events, table.person_pos, table.ptr, factor, n)
    room = np.zeros(n + 1, np.int64)
    np.cumsum(slots, out=room[1:])
    capacity = max(int(room[-1]), 1)
    src = np.empty(capacity, np.int32)
    dst = np.empty(capacity, np.int32)
    w = np.empty(capacity, np.float64)
    c = np.empty(capacity, np.int32)
    strength = np.zeros(n, np.float64)
    degree = np.zeros(n, np.int64)
    scratch = [(np.zeros((n, 2), np.float64), np.empty(n, np.int32)) for _ in range(threads)]
    sizer = ChunkSizer(first=1 << 20)
    i, k = 0, 0
    while i < n:
        t0 = time.perf_counter()
        budget = sizer.next(int(room[-1] - room[i]))
        end = max(i + 1, min(n, int(np.searchsorted(room, room[i] + budget, side="right")) - 1))
        marks = np.searchsorted(room, np.linspace(room[i], room[end], threads + 1)[1:-1])
        cuts = [i, *sorted({int(b) for b in marks if i < b < end}), end]
        calls = [(a, b, int(room[a]), table.person_ptr, table.person_events, table.person_pos, table.ptr,
                  table.members, table.member_weight, factor, src, dst, w, c, strength, degree, *scratch[q])
                 for q, (a, b) in enumerate(zip(cuts[:-1], cuts[1:]))]
        written = map_ordered(K.upper_pairs_rows, calls)
        for a, count in zip(cuts[:-1], written):
            if int(room[a]) != k:
                K.move_down(src, dst, w, c, int(room[a]), k, int(count))
            k += int(count)
        sizer.took(int(room[end] - room[i]), time.perf_counter() - t0)
        i = end
        if progress is not None:
            progress(i / n)
    del scratch
    K.column_sums(dst[:k], w[:k], strength, degree)
    # Views, not copies (pages past k that a range wrote before its rows moved down stay resident).
    return src[:k], dst[:k], w[:k], c[:k], strength, degree


def project_table(table: EventTable, *, method: str, half_life: float | None = None,
                  t_ref: float | None = None, max_event_size: int | None = DEFAULT_MAX_EVENT_SIZE,
                  oversized: str = "drop", singletons: str = "refuse",
                  max_pair_slots: int = DEFAULT_MAX_PAIR_SLOTS, threads: int | None = None,
                  progress: Callable[[float], None] | None = None) -> Projection:
    """:func:`project_events` on an already grouped :class:`EventTable`.

    The pairs are formed on ``threads`` threads (default: :func:`thread_count`), in timed
    rounds; ``progress(fraction)`` is called after each round (a job's cancel point). The
    result does not depend on the thread count.
    """
    if method not in PROJECTIONS:
        raise UnknownProjection(name=method, choices=list(PROJECTIONS))
    f, n_over, n_single = _event_factors(table, method, half_life=half_life, t_ref=t_ref,
                                         max_event_size=max_event_size, oversized=oversized,
                                         singletons=singletons)
    size = table.event_size
    kept = f > 0
    slots = int((size[kept] * (size[kept] - 1) // 2).sum())
    largest = int(size.max()) if size.size else 0
    if slots > max_pair_slots:
        raise ProjectionTooLarge(pair_slots=slots, limit=max_pair_slots, largest_event=largest,
                                 max_event_size=max_event_size)
    src, dst, w, shared, strength, degree = _upper_pairs(table, f, threads=thread_count(threads),
                                                         progress=progress)
    in_events = table.person_degree > 0
    people_in_events = int(in_events.sum())
    common: dict[str, Any] = dict(n_people=table.n_people, rows=table.rows, duplicate_rows=table.duplicate_rows,
                  events=int((size > 0).sum()), largest_event=largest,
                  max_event_size=max_event_size, oversized=oversized, events_over_cap=n_over,
                  events_single=n_single, people_in_events=people_in_events)
    if src.shape[0] == 0:
        raise EmptyProjection(pairs=0, **common)
    tied = np.zeros(table.n_people, bool)
    tied[src] = True
    tied[dst] = True
    without = int((in_events & ~tied).sum())
    directed = method == "resource_allocation"
    if directed:
        # k_j counts j's kept events, as in the bipartite degree of Zhou et al.
        kept_deg = np.bincount(table.members[np.repeat(kept, size)],
                               minlength=table.n_people).astype(np.float64)
        fwd = w / kept_deg[src]
        back = w / kept_deg[dst]
        src, dst = np.concatenate([src, dst]), np.concatenate([dst, src])
        w = np.concatenate([fwd, back])
        shared = np.concatenate([shared, shared])
    return Projection(src=src, dst=dst, weight=w, shared=shared,
                      strength=None if directed else strength,
                      degree=None if directed else degree, method=method,
                      directed=directed, people_without_ties=without, **common)
