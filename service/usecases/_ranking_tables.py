"""Rankings over stored ``scores`` results: orders, percentiles, filters, pages.

The tables behind :mod:`service.usecases.rankings` (which reads them for every
door) and the ``scores`` job (which stores them through :func:`result_arrays`).

A ``scores`` result stores, beside each measure's values, its ranking order
and percentile ranks (:func:`result_arrays`), so a ranking read only slices
arrays. Everything here is numpy over whole arrays; the one per-node Python
step is turning a page (or a CSV chunk) into rows.

Conventions
-----------
- **Order.** Best first: highest score first, except ``constraint`` where the
  lowest (the broker) comes first (:data:`ASCENDING`). Equal scores are
  ordered by the caller's node id (Python string order), so pages are stable.
  Undefined scores (NaN: constraint of an isolated node) come last.
- **Percentile rank** (0..100, in the ranking's direction, so 100 is the
  top): ``100 (below + equal / 2) / N`` over the ``N`` nodes with a defined
  score, ``below`` counting the nodes ranked strictly after, ``equal`` the
  node's ties including itself: the mid-rank convention of
  ``scipy.stats.percentileofscore(kind="mean")``. NaN where the score is.
- **Composite.** ``sum_m w_m p_m / sum_m w_m`` over the caller's weights
  ``w_m > 0`` and the measures' percentile ranks ``p_m`` (an undefined
  percentile counts 0), so it is on the same 0..100 scale; rounded to 9
  decimals so equal mixes tie and fall back to the node-id order.

Loaded arrays and derived orders are kept per result id in
:data:`service.usecases.caches.ranking_cache` (:func:`cached`), under the shared byte
bound of :mod:`service.usecases.caches`; results are immutable, so nothing is ever stale. No database code here: callers pass a ``fetch``
function that reads named arrays.
"""

from __future__ import annotations

import base64
import binascii
import csv
import io
import json
import math
from collections.abc import Callable, Hashable, Iterator, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from service.analytics.graph import GraphArrays
from service.usecases.caches import ranking_cache

__all__ = [
    "ASCENDING",
    "CSV_HEADER",
    "LABEL_MEASURES",
    "NodeTable",
    "Ranking",
    "as_number",
    "cached",
    "clear_cache",
    "columns",
    "community_arrays",
    "composite_scores",
    "csv_chunks",
    "decode_cursor",
    "encode_cursor",
    "filter_mask",
    "id_order",
    "key",
    "parse_weights",
    "percentile_ranks",
    "ranking_order",
    "result_arrays",
    "safe_cell",
]

#: Measures ranked lowest first: low constraint marks a broker.
ASCENDING = frozenset({"constraint"})
#: Measures that are labels, not scores: stored, never ranked.
LABEL_MEASURES = frozenset({"community"})
FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")
CSV_HEADER = ("rank", "node_id", "score", "percentile", "segment", "contactable", "label", "community")
CSV_CHUNK = 10_000


def key(kind: str, measure: str = "") -> str:
    """Stored array name: ``score.<m>`` (float64), ``order.<m>`` (int32),
    ``pct.<m>`` (float64); ``id_order`` (int32); ``community.membership``
    (int32), ``community.size`` and ``community.internal_edges`` (int64)."""
    return f"{kind}.{measure}" if measure else kind


# -- building the stored arrays (in the job) ------------------------------------------


def id_order(ids: Sequence[str]) -> NDArray[np.int32]:
    """Node indices sorted by the caller's id (Python string order)."""
    return np.asarray(sorted(range(len(ids)), key=ids.__getitem__), dtype=np.int32)


def ranking_order(
    values: NDArray[np.float64], by_id: NDArray[np.int32], *, ascending: bool = False
) -> NDArray[np.int32]:
    """Node indices best first; ties by id (``by_id`` from :func:`id_order`); NaN last.

    >>> ranking_order(np.array([1.0, 3.0, 3.0, np.nan]), np.array([3, 2, 1, 0], np.int32)).tolist()
    [2, 1, 0, 3]
    """
    k = values[by_id]
    # A stable sort of the id-ordered keys keeps equal keys in id order; numpy sorts NaN last.
    pos = np.argsort(k if ascending else -k, kind="stable")
    return np.asarray(by_id[pos], dtype=np.int32)


def percentile_ranks(values: NDArray[np.float64], order: NDArray[np.int32]) -> NDArray[np.float64]:
    """Mid-rank percentile of each node in the ranking ``order`` (see the module notes).

    >>> v = np.array([5.0, 1.0, 5.0, 2.0])
    >>> percentile_ranks(v, ranking_order(v, np.arange(4, dtype=np.int32))).tolist()
    [75.0, 12.5, 75.0, 37.5]
    """
    n = values.shape[0]
    out = np.full(n, np.nan, dtype=np.float64)
    valid = int(np.count_nonzero(~np.isnan(values)))
    if valid == 0:
        return out
    ranked = values[order[:valid]]
    # Equal scores share a percentile even when two computations of the same value differ in
    # the last bits (1/3 reached by two sums of floats): within 1e-9 relative is equal.
    differs = ~np.isclose(ranked[1:], ranked[:-1], rtol=1e-9, atol=0.0)
    starts = np.concatenate(([0], np.flatnonzero(differs) + 1))
    lengths = np.diff(np.append(starts, valid))
    below = valid - starts - lengths
    out[order[:valid]] = np.repeat(100.0 * (below + 0.5 * lengths) / valid, lengths)
    return out


def community_arrays(
    g: GraphArrays, membership: NDArray[np.int32]
) -> tuple[NDArray[np.int64], NDArray[np.int64]]:
    """Size and internal edge count of each community label ``0..k-1``.

    Internal edges are linked pairs inside the community on the undirected
    simple view (reciprocal arcs count once, self-loops not at all), as
    :func:`service.analytics.structure.communities.community_summary` counts them.
    """
    mem = np.asarray(membership, dtype=np.int64)
    k = int(mem.max()) + 1 if mem.size else 0
    sizes = np.bincount(mem, minlength=k).astype(np.int64)
    lo = np.minimum(g.src, g.dst).astype(np.int64)
    hi = np.maximum(g.src, g.dst).astype(np.int64)
    keep = lo != hi
    pairs = np.sort(lo[keep] * g.n + hi[keep])  # np.sort + mask: several times faster than np.unique here
    pairs = pairs[np.concatenate(([True], pairs[1:] != pairs[:-1]))] if pairs.size else pairs
    a, b = pairs // max(g.n, 1), pairs % max(g.n, 1)
    inside = mem[a] == mem[b]
    internal = np.bincount(mem[a[inside]], minlength=k).astype(np.int64)
    return sizes, internal


def result_arrays(
    g: GraphArrays, ids: Sequence[str], values: dict[str, NDArray[np.float64]],
    progress: Callable[[float], None] | None = None,
) -> dict[str, NDArray[Any]]:
    """Every array a ``scores`` result stores (names from :func:`key`)."""
    by_id = id_order(ids)
    out: dict[str, NDArray[Any]] = {key("id_order"): by_id}
    for i, (name, v) in enumerate(values.items()):
        v = np.asarray(v, dtype=np.float64)
        if name in LABEL_MEASURES:
            membership = v.astype(np.int32)
            sizes, internal = community_arrays(g, membership)
            out[key("community", "membership")] = membership
            out[key("community", "size")] = sizes
            out[key("community", "internal_edges")] = internal
            continue
        order = ranking_order(v, by_id, ascending=name in ASCENDING)
        out[key("score", name)] = v
        out[key("order", name)] = order
        out[key("pct", name)] = percentile_ranks(v, order)
        if progress is not None:
            progress((i + 1) / len(values))
    return out


# -- reading ----------------------------------------------------------------------------


def parse_weights(text: str, available: Sequence[str]) -> dict[str, float]:
    """``"pagerank:0.5,degree:0.2"`` -> ``{"pagerank": 0.5, "degree": 0.2}``.

    Raises ValueError with a readable message for a malformed pair, an
    unknown or label measure, a repeated name, or a weight that is not a
    positive finite number.
    """
    out: dict[str, float] = {}
    for part in (p.strip() for p in text.split(",")):
        name, sep, raw = part.partition(":")
        name = name.strip()
        if not sep or not name:
            raise ValueError(f"weights: expected measure:weight pairs, got {part!r}")
        if name not in available or name in LABEL_MEASURES:
            raise ValueError(f"weights: {name!r} is not a ranked measure of this result; "
                             f"expected one of {', '.join(m for m in available if m not in LABEL_MEASURES)}")
        if name in out:
            raise ValueError(f"weights: {name!r} is given twice")
        try:
            w = float(raw)
        except ValueError:
            raise ValueError(f"weights: {raw.strip()!r} is not a number (for {name})") from None
        if not (np.isfinite(w) and w > 0):
            raise ValueError(f"weights: the weight of {name} must be a positive number")
        out[name] = w
    return out


def composite_scores(pcts: dict[str, NDArray[np.float64]], weights: dict[str, float]) -> NDArray[np.float64]:
    """Weighted mean of percentile ranks (undefined ones count 0), rounded to 9 decimals
    so that equal mixes tie exactly (and are then ordered by node id).

    >>> composite_scores({"a": np.array([100.0, 0.0]), "b": np.array([np.nan, 50.0])},
    ...                  {"a": 3.0, "b": 1.0}).tolist()
    [75.0, 12.5]
    """
    total = sum(weights.values())
    acc: NDArray[np.float64] | None = None
    for name, w in weights.items():
        part = np.nan_to_num(pcts[name], nan=0.0) * (w / total)
        acc = part if acc is None else acc + part
    assert acc is not None
    return np.round(acc, 9)


@dataclass(frozen=True, eq=False)
class NodeTable:
    """What a ranking row shows of a version's nodes (no edges)."""

    ids: list[str]
    segment: NDArray[np.int32]
    segment_labels: tuple[str, ...]
    consent: NDArray[np.int8]
    contactable: NDArray[np.bool_]
    labels: list[str | None] | None

    def nbytes(self) -> int:
        return sum(len(s) + 60 for s in self.ids) + 8 * len(self.ids) * (2 if self.labels else 1)


def filter_mask(
    nodes: NodeTable, *, segments: Sequence[str] = (), contactable: bool | None = None,
    membership: NDArray[np.int32] | None = None, community: int | None = None,
) -> NDArray[np.bool_] | None:
    """Who passes the filters (None: everyone). Unknown segment labels raise ValueError."""
    mask: NDArray[np.bool_] | None = None
    if segments:
        lookup = {s: i for i, s in enumerate(nodes.segment_labels)}
        unknown = [s for s in segments if s not in lookup]
        if unknown:
            known = ", ".join(nodes.segment_labels[:20]) or "(none: the version has no segments)"
            raise ValueError(f"unknown segment {unknown[0]!r}; this version's segments: {known}")
        mask = np.isin(nodes.segment, np.array([lookup[s] for s in segments], dtype=np.int32))
    if contactable is not None:
        m = nodes.contactable == contactable
        mask = m if mask is None else mask & m
    if community is not None and membership is not None:
        m = membership == community
        mask = m if mask is None else mask & m
    return mask


@dataclass(frozen=True, eq=False)
class Ranking:
    """One measure (or composite) ready to page: values, percentiles, order best first."""

    values: NDArray[np.float64]
    pct: NDArray[np.float64]
    order: NDArray[np.int32]


def as_number(x: float) -> float | None:
    """A JSON number: NaN (undefined) becomes None."""
    return None if math.isnan(x) else x


def columns(
    idx: NDArray[np.int32], ranking: Ranking, nodes: NodeTable, membership: NDArray[np.int32] | None,
    shown: Callable[[float], float] | None = None,
) -> tuple[list[Any], ...]:
    """Columns of the rows ``idx`` (node indices): node_id, score, percentile (4 decimals),
    segment, contactable, label, community; NaN becomes None. ``shown`` rounds scores and
    percentiles for the caller (the API's rounding rule); None leaves them whole."""
    rows = idx.tolist()
    keep: Callable[[float], float] = shown or (lambda x: x)
    seg_labels, labels = nodes.segment_labels, nodes.labels
    none = [None] * len(rows)
    return (
        [nodes.ids[i] for i in rows],
        [as_number(keep(x)) for x in ranking.values[idx].tolist()],
        [as_number(keep(x)) for x in np.round(ranking.pct[idx], 4).tolist()],
        [seg_labels[s] if s >= 0 else None for s in nodes.segment[idx].tolist()],
        nodes.contactable[idx].tolist(),
        [labels[i] for i in rows] if labels else none,
        membership[idx].tolist() if membership is not None else none,
    )


def csv_chunks(
    order: NDArray[np.int32], ranking: Ranking, nodes: NodeTable, membership: NDArray[np.int32] | None,
    shown: Callable[[float], float] | None = None,
) -> Iterator[str]:
    """The ranking ``order`` as RFC 4180 CSV text, :data:`CSV_HEADER` first, in chunks;
    text cells pass through :func:`safe_cell`."""
    buf = io.StringIO()
    out = csv.writer(buf, lineterminator="\r\n")
    out.writerow(CSV_HEADER)
    for start in range(0, order.shape[0], CSV_CHUNK):
        nid, sc, p, sg, ct, lb, cm = columns(order[start:start + CSV_CHUNK], ranking, nodes, membership, shown)
        out.writerows(zip(
            range(start + 1, start + len(nid) + 1), [safe_cell(s) for s in nid], sc, p,
            [safe_cell(s) for s in sg], ["true" if c else "false" for c in ct], [safe_cell(s) for s in lb], cm,
        ))
        yield buf.getvalue()
        buf.seek(0)
        buf.truncate()
    yield buf.getvalue()


def safe_cell(text: str | None) -> str | None:
    """Text a spreadsheet would run as a formula gets a leading apostrophe (OWASP CSV injection)."""
    if text is not None and text.startswith(FORMULA_STARTS):
        return "'" + text
    return text


def encode_cursor(result_id: str, position: int, query: str, nodes: str | None = None) -> str:
    """``nodes``: the version whose people the page shows, when it is not the result's own
    (a later version with the same edges reusing the result)."""
    parts: list[object] = [result_id, position, query] + ([nodes] if nodes is not None else [])
    raw = json.dumps(parts, separators=(",", ":")).encode()
    return base64.urlsafe_b64encode(raw).decode().rstrip("=")


def decode_cursor(cursor: str) -> tuple[str, int, str, str | None]:
    """(result id, position, query digest, nodes version id or None); ValueError when it is
    not one we issued."""
    try:
        rid, pos, query, *rest = json.loads(base64.urlsafe_b64decode(cursor + "=" * (-len(cursor) % 4)))
        nodes = rest[0] if rest else None
        if not (isinstance(rid, str) and isinstance(pos, int) and isinstance(query, str) and pos >= 0
                and len(rest) <= 1 and (nodes is None or isinstance(nodes, str))):
            raise ValueError
        return rid, pos, query, nodes
    except (ValueError, TypeError, binascii.Error):
        raise ValueError("cursor is not one this service issued") from None


# -- the cache --------------------------------------------------------------------------


def cached(cache_key: Hashable, build: Callable[[], Any]) -> Any:
    """``build()`` once per key while it stays in the cache (concurrent callers wait for it)."""
    return ranking_cache.get(cache_key, build)


def clear_cache() -> None:
    """Forget every cached ranking array (tests)."""
    ranking_cache.clear()
