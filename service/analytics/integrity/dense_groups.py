"""Dense groups: camouflage-resistant densest-block peeling on people and their attributes.

A group of accounts that all know each other, share a few devices or
addresses, or act on the same targets at the same time forms a block far
denser than the rest of the graph. Greedy peeling finds the densest block
within a proven factor; weighting each tie by how rare its target is keeps
ties to popular targets (camouflage) from hiding the block.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import NamedTuple

import numpy as np
from numpy.typing import NDArray

from . import _kernels as K
from .egonet import _simple_csr
from ..errors import EmptyGraph, InvalidParameter
from ..graph import GraphArrays

__all__ = [
    "COLUMN_WEIGHTINGS",
    "DenseGroup",
    "fraudar",
    "fraudar_bipartite",
    "lockstep_groups",
    "shared_attribute_groups",
]

COLUMN_WEIGHTINGS = ("log", "uniform")
Progress = Callable[[float, str], None] | None
# Hooi et al. use 1 / log(x + c) with c = 5 (from memory).
_LOG_SHIFT = 5.0


class DenseGroup(NamedTuple):
    """One dense block: its people, what they share, and how dense it is."""

    members: NDArray[np.int64]  # people (node ids, or row ids of the table)
    targets: NDArray[np.int64]  # shared columns (value ids); empty for the person graph
    density: float  # weighted ties in the block / its size (the peeling objective)
    ties: int  # ties (or person-value links) inside the block
    possible: int  # ties a complete block of that shape would have
    guarantee: float  # the block's density is at least this share of the best block's
    evidence: str


def _check_common(weighting: str, blocks: int, min_size: int) -> None:
    if weighting not in COLUMN_WEIGHTINGS:
        raise InvalidParameter(field="weighting", value=weighting, allowed=list(COLUMN_WEIGHTINGS))
    if blocks < 1:
        raise InvalidParameter(field="blocks", value=blocks, minimum=1)
    if min_size < 1:
        raise InvalidParameter(field="min_size", value=min_size, minimum=1)


def _column_weight(degree: NDArray[np.float64], weighting: str) -> NDArray[np.float64]:
    if weighting == "uniform":
        return np.ones_like(degree)
    return np.asarray(1.0 / np.log(degree + _LOG_SHIFT), np.float64)


def _best_block(
    n: int, indptr: NDArray[np.int64], indices: NDArray[np.int64], data: NDArray[np.float64],
) -> tuple[NDArray[np.int64], float]:
    """Greedy peeling's best suffix: the nodes left when density peaked, and that density."""
    alive = np.diff(indptr) > 0
    if not alive.any():
        return np.zeros(0, np.int64), 0.0
    order, mass = K.peel(n, indptr, indices, data, alive)
    count = order.shape[0]
    density = mass[:count] / (count - np.arange(count))
    # The smallest block among (rounding-level) ties: a union of equally dense pieces
    # is no denser than one of them.
    best = int(np.flatnonzero(density >= density.max() * (1.0 - 1e-9))[-1])
    return np.sort(order[best:]), float(density[best])


def _to_csr(
    n: int, a: NDArray[np.int64], b: NDArray[np.int64], w: NDArray[np.float64]
) -> tuple[NDArray[np.int64], NDArray[np.int64], NDArray[np.float64]]:
    g = GraphArrays(n, False, a.astype(np.int32), b.astype(np.int32), w)
    return _simple_csr(g)


def _span_text(times: NDArray[np.float64] | None, members: NDArray[np.int64]) -> str:
    if times is None or members.size == 0:
        return ""
    t = times[members]
    t = t[np.isfinite(t)]
    if t.size < members.size:
        return ""
    days = float(t.max() - t.min()) / 86400.0
    # A span is evidence only when it is tight: within a week, or within a tenth of the time
    # the whole table spans (our choice). "All created within 2,670 days" says nothing.
    every = times[np.isfinite(times)]
    whole = float(every.max() - every.min()) / 86400.0 if every.size else 0.0
    if days > 7.0 and days > 0.1 * whole:
        return ""
    return f", all created within {max(1, int(np.ceil(days))):,} day{'s' if days > 1 else ''}"


def _shared_text(
    attributes: Sequence[tuple[str, NDArray[np.int64], NDArray[np.int64]]] | None,
    members: NDArray[np.int64],
) -> str:
    """", sharing 2 addresses": values held by two or more members, per attribute table."""
    parts = []
    for label, person, value in attributes or ():
        inside = np.isin(np.asarray(person), members)
        pairs = np.unique(np.column_stack((np.asarray(person)[inside], np.asarray(value)[inside])),
                          axis=0)
        _, holders = np.unique(pairs[:, 1], return_counts=True)
        count = int((holders >= 2).sum())
        if count:
            parts.append(f"{count:,} {label}")
    return ", sharing " + " and ".join(parts) if parts else ""


def fraudar(
    g: GraphArrays,
    *,
    weighting: str = "log",
    blocks: int = 1,
    min_size: int = 3,
    created: NDArray[np.float64] | None = None,
    attributes: Sequence[tuple[str, NDArray[np.int64], NDArray[np.int64]]] | None = None,
    progress: Progress = None,
) -> tuple[DenseGroup, ...]:
    """The densest groups of people in the person graph by greedy peeling [1]_ [2]_.

    Parameters
    ----------
    g : GraphArrays
        The person graph, read as simple and undirected (directions merged,
        self-loops dropped, parallel ties summed).
    weighting : {"log", "uniform"}, keyword-only
        ``"log"`` weighs each tie by the mean of ``1 / log(d + 5)`` over its two
        ends (``d`` the degree), so ties to very popular people count less;
        ``"uniform"`` counts every tie once (Charikar's average degree).
    blocks : int, keyword-only
        How many groups to find: after each, its inner ties are removed and
        the peeling repeated.
    min_size : int, keyword-only
        Smaller blocks are not reported.
    created : array of float, optional
        Sign-up time of each person in seconds; adds the time span to the evidence.
    attributes : sequence of (label, person, value), optional
        Attribute tables (``label`` in plain words, "addresses"); the evidence
        counts the values two or more members share.
    progress : callable(fraction, message), optional
        Called before each block; it may raise ``Cancelled`` to stop.

    Returns
    -------
    tuple of DenseGroup
        At most ``blocks`` groups, densest first as found.

    Raises
    ------
    EmptyGraph
        When ``g`` has no ties.
    InvalidParameter
        For an unknown weighting or out-of-range option.

    Notes
    -----
    Peeling removes the person with the least weighted ties to those still
    present, one at a time, and keeps the remaining set of highest density
    ``f(S) / |S|`` (``f`` the weighted ties inside); O(m log n) with a heap.
    That set's density is at least half the densest set's under the same
    weights [1]_ [2]_; ``guarantee`` reports this 1/2. The tie weights
    generalise the column weights of [2]_ to an undirected graph, where each
    tie is both a row and a column entry.

    References
    ----------
    .. [1] M. Charikar (2000). Greedy approximation algorithms for finding
       dense components in a graph. APPROX 2000, LNCS 1913, 84-95.
    .. [2] B. Hooi, H. A. Song, A. Beutel, N. Shah, K. Shin, C. Faloutsos
       (2016). FRAUDAR: bounding graph fraud in the face of camouflage.
       KDD 2016, 895-904.

    Examples
    --------
    >>> src = np.array([0, 0, 0, 1, 1, 2, 3], np.int32)
    >>> dst = np.array([1, 2, 3, 2, 3, 3, 4], np.int32)
    >>> (grp,) = fraudar(GraphArrays(5, False, src, dst, np.ones(7)), weighting="uniform")
    >>> grp.members.tolist(), grp.density, grp.evidence
    ([0, 1, 2, 3], 1.5, '4 accounts, 6 of the 6 possible ties among them')
    """
    _check_common(weighting, blocks, min_size)
    if g.n == 0 or g.m == 0:
        raise EmptyGraph(nodes=g.n, edges=g.m)
    indptr, indices, data = _simple_csr(g)
    deg = np.diff(indptr).astype(np.float64)
    rows = np.repeat(np.arange(g.n), np.diff(indptr))
    cw = _column_weight(deg, weighting)
    w = (cw[rows] + cw[indices]) / 2.0
    ties = np.ones(indices.shape[0], np.float64)
    present = np.ones(indices.shape[0], np.bool_)
    found: list[DenseGroup] = []
    for b in range(blocks):
        if progress is not None:
            progress(b / blocks, f"dense group {b + 1} of at most {blocks}")
        keep = present & (rows < indices)
        sub = _to_csr(g.n, rows[keep], indices[keep], w[keep])
        members, density = _best_block(g.n, *sub)
        if members.size < min_size:
            break
        inside = np.zeros(g.n, np.bool_)
        inside[members] = True
        within = present & inside[rows] & inside[indices]
        k = int(members.size)
        t = int(ties[within].sum()) // 2
        possible = k * (k - 1) // 2
        text = f"{k:,} accounts, {t:,} of the {possible:,} possible ties among them"
        found.append(DenseGroup(members, np.zeros(0, np.int64), density, t, possible, 0.5,
                                text + _span_text(created, members)
                                + _shared_text(attributes, members)))
        present &= ~within
    return tuple(found)


def fraudar_bipartite(
    rows: NDArray[np.int64],
    cols: NDArray[np.int64],
    *,
    n_rows: int,
    n_cols: int,
    weighting: str = "log",
    blocks: int = 1,
    min_size: int = 3,
    row_label: str = "accounts",
    column_label: str = "shared values",
    created: NDArray[np.float64] | None = None,
    progress: Progress = None,
) -> tuple[DenseGroup, ...]:
    """FRAUDAR's densest blocks of a people-by-value table [1]_.

    Parameters
    ----------
    rows, cols : array of int
        One entry per link: person ``rows[i]`` has value ``cols[i]`` (a device,
        an address, a target at a time). Repeated pairs count once; values
        held by one person only are left out (they tie nobody together).
    n_rows, n_cols : int, keyword-only
        Number of people and of distinct values.
    weighting : {"log", "uniform"}, keyword-only
        Column weights ``1 / log(x + 5)`` with ``x`` the number of people
        holding the value, as in [1]_, or 1.
    blocks, min_size, created, progress : keyword-only
        As in :func:`fraudar`; ``min_size`` counts people.
    row_label, column_label : str, keyword-only
        Plain words for the evidence ("accounts", "addresses").

    Returns
    -------
    tuple of DenseGroup
        People (``members``), values (``targets``) and density ``f(S)/|S|``
        with ``S`` the people and values of the block together.

    Raises
    ------
    InvalidParameter
        When ids are out of range, arrays differ in length, or no value is
        held by two or more people (nothing is shared, so no group exists).

    Notes
    -----
    People and values are peeled alike, least weighted links first, keeping
    the densest remainder; the result's density is at least half the best
    block's under the same weights, and camouflage (links from the block to
    other values) cannot lower the block's density [1]_.

    References
    ----------
    .. [1] B. Hooi, H. A. Song, A. Beutel, N. Shah, K. Shin, C. Faloutsos
       (2016). FRAUDAR: bounding graph fraud in the face of camouflage.
       KDD 2016, 895-904.

    Examples
    --------
    >>> r = np.array([0, 0, 1, 1, 2, 2, 3]); c = np.array([0, 1, 0, 1, 0, 1, 2])
    >>> (grp,) = fraudar_bipartite(r, c, n_rows=4, n_cols=3, column_label="addresses")
    >>> grp.members.tolist(), grp.targets.tolist()
    ([0, 1, 2], [0, 1])
    >>> grp.evidence
    '3 accounts sharing 2 addresses (6 of the 6 possible links)'
    """
    _check_common(weighting, blocks, min_size)
    r = np.asarray(rows, np.int64)
    c = np.asarray(cols, np.int64)
    if r.shape != c.shape:
        raise InvalidParameter("rows and columns differ in length", rows=r.size, columns=c.size)
    if r.size and (r.min() < 0 or r.max() >= n_rows or c.min() < 0 or c.max() >= n_cols):
        raise InvalidParameter("an id is outside the table", n_rows=n_rows, n_cols=n_cols)
    pairs = np.unique(r * max(n_cols, 1) + c)
    r, c = pairs // max(n_cols, 1), pairs % max(n_cols, 1)
    holders = np.bincount(c, minlength=n_cols)
    if not (holders >= 2).any():
        raise InvalidParameter("no value is shared by two or more people", links=int(r.size),
                               people=int(np.unique(r).size), values=int(np.unique(c).size))
    w = _column_weight(holders.astype(np.float64), weighting)[c]
    shared = holders[c] >= 2  # a value held by one person ties nobody to anybody
    r, c, w = r[shared], c[shared], w[shared]
    n = n_rows + n_cols
    present = np.ones(r.size, np.bool_)
    found: list[DenseGroup] = []
    for b in range(blocks):
        if progress is not None:
            progress(b / blocks, f"dense group {b + 1} of at most {blocks}")
        sub = _to_csr(n, r[present], c[present] + n_rows, w[present])
        nodes, density = _best_block(n, *sub)
        people, values = nodes[nodes < n_rows], nodes[nodes >= n_rows] - n_rows
        if people.size < min_size or values.size == 0:
            break
        within = present & np.isin(r, people) & np.isin(c, values)
        links, possible = int(within.sum()), int(people.size * values.size)
        text = (f"{people.size:,} {row_label} sharing {values.size:,} {column_label} "
                f"({links:,} of the {possible:,} possible links)")
        found.append(DenseGroup(people, values, density, links, possible, 0.5,
                                text + _span_text(created, people)))
        present &= ~within
    return tuple(found)


def shared_attribute_groups(
    person: NDArray[np.int64],
    value: NDArray[np.int64],
    *,
    n_people: int,
    label: str = "shared values",
    blocks: int = 3,
    min_size: int = 3,
    created: NDArray[np.float64] | None = None,
) -> tuple[DenseGroup, ...]:
    """Groups of people who share devices, addresses or payment details.

    ``value`` holds any integer codes (one per distinct device, address, ...);
    they are renumbered, then the table is peeled by :func:`fraudar_bipartite`
    with the log column weights of [1]_, so a value held by very many people
    (a shared office address) counts for less.

    Raises
    ------
    InvalidParameter
        When the table is empty or no value is shared by two people.

    References
    ----------
    .. [1] B. Hooi, H. A. Song, A. Beutel, N. Shah, K. Shin, C. Faloutsos
       (2016). FRAUDAR: bounding graph fraud in the face of camouflage.
       KDD 2016, 895-904.

    Examples
    --------
    >>> p = np.array([0, 1, 2, 0, 1, 2, 3]); v = np.array([70, 70, 70, 90, 90, 90, 55])
    >>> (grp,) = shared_attribute_groups(p, v, n_people=4, label="addresses")
    >>> grp.evidence
    '3 accounts sharing 2 addresses (6 of the 6 possible links)'
    """
    p = np.asarray(person, np.int64)
    if p.size == 0:
        raise InvalidParameter("the attribute table is empty", links=0)
    codes, col = np.unique(np.asarray(value), return_inverse=True)
    return fraudar_bipartite(p, col.ravel().astype(np.int64), n_rows=n_people, n_cols=codes.size,
                             blocks=blocks, min_size=min_size, column_label=label, created=created)


def lockstep_groups(
    person: NDArray[np.int64],
    target: NDArray[np.int64],
    time: NDArray[np.float64],
    *,
    n_people: int,
    window: float,
    blocks: int = 3,
    min_size: int = 3,
    created: NDArray[np.float64] | None = None,
) -> tuple[DenseGroup, ...]:
    """People who acted on the same targets within the same time window (lockstep) [1]_.

    Each action ``(person, target, time)`` (times in seconds) becomes links to the columns
    ``(target, floor(time / window))`` and ``(target, floor(time / window +
    1/2))``; the second, shifted grid keeps a burst that straddles a window
    edge together. The people-by-column table is peeled by
    :func:`fraudar_bipartite` [2]_.

    Raises
    ------
    InvalidParameter
        When ``window <= 0``, arrays differ in length, or no two people acted
        on the same target within a window.

    References
    ----------
    .. [1] A. Beutel, W. Xu, V. Guruswami, C. Palow, C. Faloutsos (2013).
       CopyCatch: stopping group attacks by spotting lockstep behavior in
       social networks. WWW 2013, 119-130.
    .. [2] B. Hooi et al. (2016). FRAUDAR. KDD 2016.

    Examples
    --------
    >>> p = np.array([0, 1, 2, 0, 1, 2, 3]); t = np.array([5, 5, 5, 6, 6, 6, 5])
    >>> s = np.array([0., 60., 120., 30., 90., 100., 9e6])
    >>> (grp,) = lockstep_groups(p, t, s, n_people=4, window=3600.0)
    >>> grp.members.tolist(), grp.evidence
    ([0, 1, 2], '3 accounts acted on the same 2 targets within 1 hour of each other')
    """
    if not window > 0:
        raise InvalidParameter(field="window", value=window, allowed="greater than 0")
    p = np.asarray(person, np.int64)
    tg = np.asarray(target, np.int64)
    tm = np.asarray(time, np.float64)
    if not (p.shape == tg.shape == tm.shape):
        raise InvalidParameter("person, target and time differ in length",
                               person=p.size, target=tg.size, time=tm.size)
    if p.size == 0 or not np.isfinite(tm).all():
        raise InvalidParameter("the action log is empty or has missing times", actions=int(p.size))
    buckets = [np.floor(tm / window).astype(np.int64), np.floor(tm / window + 0.5).astype(np.int64)]
    keys = np.concatenate([np.column_stack((tg, b, np.full(p.size, i))) for i, b in enumerate(buckets)])
    codes, col = np.unique(keys, axis=0, return_inverse=True)
    groups = fraudar_bipartite(np.concatenate((p, p)), col.ravel().astype(np.int64),
                               n_rows=n_people, n_cols=codes.shape[0], blocks=blocks,
                               min_size=min_size, created=created)
    out = []
    for grp in groups:
        targets = np.unique(codes[grp.targets, 0])
        text = (f"{grp.members.size:,} accounts acted on the same {targets.size:,} "
                f"target{'s' if targets.size > 1 else ''} within {_duration(window)} of each other")
        out.append(grp._replace(evidence=text + _span_text(created, grp.members)))
    return tuple(out)


def _duration(seconds: float) -> str:
    for unit, size in (("day", 86400.0), ("hour", 3600.0), ("minute", 60.0)):
        if seconds >= size:
            value = seconds / size
            return f"{value:,.3g} {unit}{'s' if value != 1 else ''}"
    return f"{seconds:,.3g} seconds"
