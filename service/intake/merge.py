"""Duplicate-edge merging, append/remove deltas, and node removal.

The node-attribute side (:func:`merge_node_table`, :func:`removal_mask`,
:func:`select_node_attributes`) lives in ``_node_merge`` and is re-exported
here, so this module stays the one place to import merging from.

Pure numpy over index arrays. The duplicate merge sorts one uint64 key per
edge that packs both endpoints and the input position, in place, so merging m
edges holds that one array of length m besides its input (and, for a caller
that gives its arrays up, nothing else: the sorted ends go back into the
input and the sorted weights into the keys' memory). Graphs too large to pack
fall back to an argsort of ``src << 32 | dst`` (about five int64 arrays).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
from numpy.typing import NDArray

from service.analytics.graph import GraphArrays

from ._node_merge import merge_node_table, removal_mask, select_node_attributes
from .errors import InvalidOption, UploadError
from .tables import EdgeTable

__all__ = [
    "MergeRule",
    "MERGE_RULES",
    "DeltaStats",
    "merge_duplicates",
    "apply_edge_delta",
    "remove_nodes",
    "removal_mask",
    "select_node_attributes",
    "merge_node_table",
]

MergeRule = Literal["sum", "max", "last"]
MERGE_RULES: tuple[str, ...] = ("sum", "max", "last")

I32 = NDArray[np.int32]
F64 = NDArray[np.float64]


@dataclass(frozen=True)
class DeltaStats:
    """What a delta did.

    ``added``: edges the new version has that the old one had not;
    ``merged``: records folded into an existing edge (or into each other) by
    the rule; ``removed``: old edges dropped; ``not_found``: distinct edges a
    remove delta named that the old version did not have (not an error).
    """

    mode: str
    records: int
    added: int
    merged: int
    removed: int
    not_found: int
    nodes: int
    edges: int


def merge_duplicates(
    src: I32,
    dst: I32,
    weight: F64,
    probability: F64 | None,
    *,
    directed: bool,
    rule: MergeRule = "sum",
    overwrite_input: bool = False,
) -> tuple[I32, I32, F64, F64 | None, int]:
    """Merge repeated edges by a declared rule.

    Parameters
    ----------
    src, dst, weight, probability : the edge records, in input order.
    directed : when false, ``(u, v)`` and ``(v, u)`` are the same edge and
        come out as ``(min, max)``.
    rule : ``"sum"`` adds the weights (weights are interaction counts, so
        repeated records are more interactions) and combines probabilities as
        independent chances, ``1 - prod(1 - p)``; ``"max"`` keeps the largest
        weight and, separately, the largest probability; ``"last"`` keeps the
        weight and probability of the last record in input order.
    overwrite_input : let the merge reorder the input arrays in place and
        return views of them, so no second set of edge arrays is held (the
        inputs hold garbage afterwards). Inputs that are not writable
        contiguous int32 (ends) and float64 (values) are copied regardless.

    Returns
    -------
    (src, dst, weight, probability, merged)
        Unique edges sorted by ``(src, dst)``; ``merged`` is how many records
        were folded into another (input length minus output length).

    Notes
    -----
    Each edge becomes one uint64 key, ``first << (b + p) | second << p |
    position`` with ``b`` bits per node index and ``p`` per input position,
    sorted in place. Keys are unique, so the order is the stable one: input
    order is kept within each group, which is what ``last`` needs, and
    ``sum`` adds in that order. An edge seen once keeps its values bit for
    bit (``1 - (1 - p)`` is not always ``p`` in floating point, so single
    records skip the product). Time O(m log m). Memory, besides the input:
    the keys (8 bytes an edge), whose memory then holds the sorted weights,
    and new end arrays unless ``overwrite_input``; with duplicates, the
    merged output too. When ``2 b + p > 64`` (more than about 2**20 nodes
    with 2**24 edges) or an index is negative, a stable argsort of int64
    keys is used instead.

    Examples
    --------
    >>> import numpy as np
    >>> s, d, w, p, k = merge_duplicates(np.array([1, 0, 2], np.int32),
    ...     np.array([0, 1, 0], np.int32), np.array([1.0, 2.0, 5.0]),
    ...     np.array([0.5, 0.5, 0.1]), directed=False, rule="sum")
    >>> s.tolist(), d.tolist(), w.tolist(), p.tolist(), k
    ([0, 0], [1, 2], [3.0, 5.0], [0.75, 0.1], 1)
    """
    if rule not in MERGE_RULES:
        raise InvalidOption(
            f"duplicates must be one of {', '.join(MERGE_RULES)}, got {rule!r}",
            field="duplicates",
        )
    m = int(np.shape(src)[0])
    if m == 0:
        return (
            np.zeros(0, np.int32),
            np.zeros(0, np.int32),
            np.zeros(0),
            None if probability is None else np.zeros(0),
            0,
        )
    s, d = np.asarray(src), np.asarray(dst)
    w = np.asarray(weight, dtype=np.float64)
    p = None if probability is None else np.asarray(probability, dtype=np.float64)
    packed = _pack_keys(s, d, directed)
    if packed is None:
        return _merge_by_key(s, d, w, p, directed, rule)
    key, node_bits, pos_bits = packed
    key.sort()  # in place; keys are unique (they hold the position), so order is stable
    # Sorted ends go into the caller's arrays when it gives them up (their
    # content went into the keys), else into new ones.
    out_src = _writable(s, overwrite_input)
    out_dst = _writable(d, overwrite_input)
    node_mask, pos_mask = np.uint64((1 << node_bits) - 1), np.uint64((1 << pos_bits) - 1)
    for lo in range(0, m, _CHUNK):
        k = key[lo : lo + _CHUNK]
        out_src[lo : lo + _CHUNK] = k >> np.uint64(node_bits + pos_bits)
        out_dst[lo : lo + _CHUNK] = (k >> np.uint64(pos_bits)) & node_mask
    p_sorted = None
    if p is not None:
        p_sorted = np.empty(m)
        for lo in range(0, m, _CHUNK):
            p_sorted[lo : lo + _CHUNK] = p[(key[lo : lo + _CHUNK] & pos_mask).astype(np.intp)]
    # The weights, read in sorted order, take the keys' place: each chunk of
    # keys is spent once its positions are read.
    w_sorted = key.view(np.float64)
    for lo in range(0, m, _CHUNK):
        w_sorted[lo : lo + _CHUNK] = w[(key[lo : lo + _CHUNK] & pos_mask).astype(np.intp)]
    del key
    same = out_src[1:] == out_src[:-1]
    same &= out_dst[1:] == out_dst[:-1]
    merged = int(np.count_nonzero(same))
    if merged == 0:
        return out_src, out_dst, w_sorted, p_sorted, 0
    first = np.empty(m, dtype=bool)
    first[0] = True
    np.logical_not(same, out=first[1:])
    del same
    groups = _compact(first, out_src, out_dst, w_sorted, p_sorted, rule)
    del first
    return (
        _trim(out_src, groups),
        _trim(out_dst, groups),
        _trim(w_sorted, groups),
        None if p_sorted is None else _trim(p_sorted, groups),
        merged,
    )


_CHUNK = 1 << 16  # elements per step of the chunked passes (temporaries of ~0.5 MB)


def _compact(
    first: NDArray[np.bool_], src: I32, dst: I32, w: F64, p: F64 | None, rule: str
) -> int:
    """Fold each group of sorted records (``first`` marks group starts) into slot ``g``, in place.

    Works chunk by chunk (each chunk ends at a group boundary), so no array
    of one entry per group is built; returns the number of groups.
    """
    m = first.shape[0]
    g = a = 0
    while a < m:
        b = min(a + _CHUNK, m)
        if b < m and not first[b]:  # extend the chunk to the end of its last group
            step = int(np.argmax(first[b:]))
            b = b + step if first[b + step] else m
        starts = np.flatnonzero(first[a:b])
        k = int(starts.size)
        wk, pk = _fold(w[a:b], None if p is None else p[a:b], starts, rule)
        src[g : g + k] = src[a:b][starts]
        dst[g : g + k] = dst[a:b][starts]
        w[g : g + k] = wk
        if p is not None:
            p[g : g + k] = pk
        g, a = g + k, b
    return g


def _trim(a: NDArray[Any], size: int) -> NDArray[Any]:
    """The first ``size`` entries: a view when that is most of ``a``, else a copy
    (so the longer buffer can go)."""
    if size == a.shape[0]:
        return a
    return a[:size].copy() if 4 * size < 3 * a.shape[0] else a[:size]


def _pack_keys(
    src: NDArray[np.integer], dst: NDArray[np.integer], directed: bool
) -> tuple[NDArray[np.uint64], int, int] | None:
    """One uint64 per edge, ``first << (b + p) | second << p | position``; None when it does not fit.

    ``b`` bits hold a node index and ``p`` bits a position; ``(first,
    second)`` is ``(min, max)`` when undirected. Built in chunks, so the keys
    are the only array of length m.
    """
    if not (np.issubdtype(src.dtype, np.integer) and np.issubdtype(dst.dtype, np.integer)):
        return None
    m = int(src.shape[0])
    lo = min(int(src.min()), int(dst.min()))
    hi = max(int(src.max()), int(dst.max()))
    node_bits, pos_bits = max(hi, 1).bit_length(), max(m - 1, 1).bit_length()
    if lo < 0 or 2 * node_bits + pos_bits > 64:
        return None
    key = np.empty(m, dtype=np.uint64)
    for a in range(0, m, _CHUNK):
        b = min(a + _CHUNK, m)
        u = src[a:b].astype(np.uint64)
        v = dst[a:b].astype(np.uint64)
        if not directed:
            u, v = np.minimum(u, v), np.maximum(u, v)
        u <<= np.uint64(node_bits + pos_bits)
        v <<= np.uint64(pos_bits)
        u |= v
        u |= np.arange(a, b, dtype=np.uint64)
        key[a:b] = u
    return key, node_bits, pos_bits


def _writable(a: NDArray[Any], overwrite: bool) -> NDArray[np.int32]:
    """``a`` itself when it may be overwritten (a writable contiguous int32 array), else a new one."""
    if overwrite and a.dtype == np.int32 and a.flags.c_contiguous and a.flags.writeable:
        return a
    return np.empty(a.shape[0], dtype=np.int32)


def _fold(
    w_sorted: F64, p_sorted: F64 | None, starts: NDArray[np.intp], rule: str
) -> tuple[F64, F64 | None]:
    """Fold each group (from ``starts[i]`` to the next start) of sorted records by ``rule``."""
    m = w_sorted.shape[0]
    if rule == "last":
        last = np.empty_like(starts)
        last[:-1] = starts[1:] - 1
        last[-1] = m - 1
        return w_sorted[last], None if p_sorted is None else p_sorted[last]
    if rule == "max":
        return (
            np.maximum.reduceat(w_sorted, starts),
            None if p_sorted is None else np.maximum.reduceat(p_sorted, starts),
        )
    w_out = np.add.reduceat(w_sorted, starts)
    p_out = None
    if p_sorted is not None:
        p_out = 1.0 - np.multiply.reduceat(1.0 - p_sorted, starts)
        single = np.diff(starts, append=m) == 1
        p_out[single] = p_sorted[starts[single]]
    return w_out, p_out


def _merge_by_key(
    src: NDArray[np.integer], dst: NDArray[np.integer], weight: F64, probability: F64 | None,
    directed: bool, rule: str,
) -> tuple[I32, I32, F64, F64 | None, int]:
    """:func:`merge_duplicates` by a stable argsort of int64 keys.

    For edges whose ends and position do not pack into 64 bits, or negative
    indices; about five int64 arrays of length m besides input and output.
    """
    m = int(src.shape[0])
    key = _keys(src, dst, directed)
    order = np.argsort(key, kind="stable")
    key = key[order]
    first = np.empty(m, dtype=bool)
    first[0] = True
    np.not_equal(key[1:], key[:-1], out=first[1:])
    starts = np.flatnonzero(first)
    del first
    out_src = (key[starts] >> 32).astype(np.int32)
    out_dst = (key[starts] & 0xFFFFFFFF).astype(np.int32)
    del key
    merged = m - int(starts.size)
    w_sorted = weight[order]
    p_sorted = None if probability is None else probability[order]
    if merged == 0:
        return out_src, out_dst, w_sorted, p_sorted, 0
    w_out, p_out = _fold(w_sorted, p_sorted, starts, rule)
    return out_src, out_dst, w_out, p_out, merged


def apply_edge_delta(
    base: GraphArrays,
    delta: EdgeTable,
    n_nodes: int,
    *,
    mode: Literal["append", "remove"],
    rule: MergeRule = "sum",
) -> tuple[GraphArrays, DeltaStats]:
    """Make the next version's edges from the current ones and a delta.

    Parameters
    ----------
    base : the current version (its edges unique).
    delta : edges read with an interner started from the base's ids.
    n_nodes : node count of the new version (``len(interner)`` after reading
        the delta and any node part; at least ``base.n``). For a remove delta
        read with a throwaway copy of the interner, pass ``base.n``: unknown
        ids then only count as not found.
    mode : ``"append"`` takes the union and merges repeats by ``rule`` (so
        ``sum`` adds new interactions to old ones and ``last`` lets the delta
        win); ``"remove"`` drops every base edge the delta names (both
        directions when undirected), ignoring the delta's weights.
    rule : see :func:`merge_duplicates`.

    Returns
    -------
    (GraphArrays, DeltaStats)
        Appended versions come out sorted by ``(src, dst)``; a remove keeps
        the base order.

    Raises
    ------
    UploadError
        An append whose probabilities do not match the base (the base has
        explicit probabilities and the delta none, or the other way round).
    InvalidOption
        ``mode``/``rule`` unknown, or ``n_nodes`` smaller than the indices used.

    Examples
    --------
    >>> import numpy as np
    >>> g = GraphArrays(3, True, np.array([0, 1], np.int32), np.array([1, 2], np.int32),
    ...                 np.array([1.0, 1.0]))
    >>> d = EdgeTable(np.array([0, 2], np.int32), np.array([1, 0], np.int32),
    ...               np.array([2.0, 1.0]), None, 2)
    >>> h, st = apply_edge_delta(g, d, 3, mode="append", rule="sum")
    >>> h.src.tolist(), h.dst.tolist(), h.weight.tolist(), st.added, st.merged
    ([0, 1, 2], [1, 2, 0], [3.0, 1.0, 1.0], 1, 1)
    >>> h, st = apply_edge_delta(g, d, 3, mode="remove")
    >>> h.src.tolist(), st.removed, st.not_found
    ([1], 1, 1)
    """
    if mode not in ("append", "remove"):
        raise InvalidOption(f"mode must be 'append' or 'remove', got {mode!r}", field="mode")
    if n_nodes < base.n or (delta.m and mode == "append" and _max_index(delta) >= n_nodes):
        raise InvalidOption(
            f"n_nodes={n_nodes} is smaller than the nodes the edges use", field="n_nodes"
        )
    if mode == "remove":
        return _remove_edges(base, delta, n_nodes)
    prob_base, prob_delta = base.probability, delta.probability
    if base.m and delta.m and (prob_base is None) != (prob_delta is None):
        raise UploadError(
            "this graph has explicit probabilities: the delta must give them too"
            if prob_base is not None
            else "this graph has no probability column: the delta may not add one",
            column="probability",
        )
    prob = None
    if prob_base is not None or prob_delta is not None:
        prob = np.concatenate(
            [p for p in (prob_base, prob_delta) if p is not None]
        )
    src, dst, w, p, merged = merge_duplicates(
        np.concatenate((base.src, delta.src)),
        np.concatenate((base.dst, delta.dst)),
        np.concatenate((base.weight, delta.weight)),
        prob,
        directed=base.directed,
        rule=rule,
        overwrite_input=True,  # the concatenations are ours
    )
    g = GraphArrays(n_nodes, base.directed, src, dst, w, p)
    added = g.m - base.m  # base edges are unique (GraphArrays' contract)
    # delta.records counts records the reader already folded into one edge.
    stats = DeltaStats("append", delta.records, added, delta.records - added, 0, 0, g.n, g.m)
    return g, stats


def _remove_edges(base: GraphArrays, delta: EdgeTable, n: int) -> tuple[GraphArrays, DeltaStats]:
    base_key = _keys(base.src, base.dst, base.directed)
    gone = np.unique(_keys(delta.src, delta.dst, base.directed))
    drop = np.isin(base_key, gone)
    found = int(np.isin(gone, base_key).sum())
    del base_key
    keep = ~drop
    p = None if base.probability is None else base.probability[keep]
    g = GraphArrays(n, base.directed, base.src[keep], base.dst[keep], base.weight[keep], p)
    removed = base.m - g.m
    return g, DeltaStats("remove", delta.records, 0, 0, removed, int(gone.size) - found, n, g.m)


def remove_nodes(
    base: GraphArrays, node_mask_to_remove: NDArray[np.bool_]
) -> tuple[GraphArrays, NDArray[np.int64]]:
    """Drop nodes and every edge touching them; renumber the rest in order.

    Returns
    -------
    (GraphArrays, old_to_new)
        ``old_to_new[i]`` is node ``i``'s new index, or -1 when removed. Apply
        the same compaction to the ids (:meth:`Interner.compact`) and the
        attributes (:func:`select_node_attributes`).

    Examples
    --------
    >>> import numpy as np
    >>> g = GraphArrays(4, False, np.array([0, 1, 2], np.int32),
    ...                 np.array([1, 2, 3], np.int32), np.ones(3))
    >>> h, old_to_new = remove_nodes(g, np.array([False, True, False, False]))
    >>> h.n, h.src.tolist(), h.dst.tolist(), old_to_new.tolist()
    (3, [1], [2], [0, -1, 1, 2])
    """
    mask = np.asarray(node_mask_to_remove, dtype=bool)
    if mask.shape != (base.n,):
        raise InvalidOption(f"the node mask must have length {base.n}", field="nodes")
    keep = ~mask
    old_to_new = np.full(base.n, -1, dtype=np.int64)
    old_to_new[keep] = np.arange(int(keep.sum()), dtype=np.int64)
    e = keep[base.src] & keep[base.dst]
    p = None if base.probability is None else base.probability[e]
    g = GraphArrays(
        int(keep.sum()),
        base.directed,
        old_to_new[base.src[e]].astype(np.int32),
        old_to_new[base.dst[e]].astype(np.int32),
        base.weight[e],
        p,
    )
    return g, old_to_new


# ------------------------------------------------------------------ helpers


def _keys(src: NDArray[np.integer], dst: NDArray[np.integer], directed: bool) -> NDArray[np.int64]:
    """One int64 per edge, ordering edges by (src, dst); (min, max) when undirected."""
    # Declared: numpy's stubs type ufuncs over abstract integer arrays as Any.
    key: NDArray[np.int64]
    if directed:
        key = np.asarray(src).astype(np.int64)
        key <<= 32
        key |= np.asarray(dst).astype(np.int64)
        return key
    key = np.minimum(src, dst).astype(np.int64)
    key <<= 32
    key |= np.maximum(src, dst).astype(np.int64)
    return key


def _max_index(t: EdgeTable) -> int:
    return max(int(t.src.max()), int(t.dst.max()))
