"""Node-side merging: attribute overlays for a new version, and node removals.

Private to :mod:`service.intake.merge`, which re-exports the public names:
:func:`merge_node_table` lays a node table over the previous version's
attributes, :func:`removal_mask` turns a node remove delta into a mask, and
:func:`select_node_attributes` keeps the attributes of the nodes that stay.
Segment and region are codes into sorted label tuples; labels no longer used
are dropped. Pure numpy over index arrays, like the edge side.
"""

from __future__ import annotations

from typing import Literal, TypeVar

import numpy as np
from numpy.typing import NDArray

from service.analytics.graph import NodeAttributes

from .errors import InvalidOption
from .tables import NodeTable

__all__ = ["merge_node_table", "removal_mask", "select_node_attributes"]

_S = TypeVar("_S", bound=np.generic)


def removal_mask(table: NodeTable, n: int) -> tuple[NDArray[np.bool_], int]:
    """The nodes a remove delta names, as a mask over the version's ``n`` nodes.

    Read the delta with a copy of the version's interner
    (:meth:`Interner.copy`): ids it did not know get indices ``>= n`` and
    are counted as not found (not an error).

    Returns
    -------
    (mask, not_found)

    Examples
    --------
    >>> import numpy as np
    >>> t = NodeTable(np.array([1, 3]), [None] * 2, [None] * 2, np.array([-1, -1], np.int8),
    ...               np.full(2, np.nan), np.full(2, np.nan), [None] * 2)
    >>> mask, missing = removal_mask(t, 3)
    >>> mask.tolist(), missing
    ([False, True, False], 1)
    """
    idx = np.asarray(table.index, dtype=np.int64)
    known = idx[idx < n]
    mask = np.zeros(n, dtype=bool)
    mask[known] = True
    return mask, int(idx.size - known.size)


def select_node_attributes(attrs: NodeAttributes, keep: NDArray[np.bool_]) -> NodeAttributes:
    """The attributes of the nodes where ``keep`` is true, renumbered in order.

    Category labels no longer used are dropped.
    """
    keep = np.asarray(keep, dtype=bool)
    if keep.shape != (attrs.n,):
        raise InvalidOption(f"the node mask must have length {attrs.n}", field="nodes")
    seg, seg_labels = _prune(attrs.segment[keep], attrs.segment_labels)
    reg, reg_labels = _prune(attrs.region[keep], attrs.region_labels)
    rows = np.flatnonzero(keep).tolist()
    consent = attrs.consent[keep]
    return NodeAttributes(
        n=len(rows),
        segment=seg,
        segment_labels=seg_labels,
        region=reg,
        region_labels=reg_labels,
        consent=consent,
        cost=attrs.cost[keep],
        value=attrs.value[keep],
        has_consent_data=bool((consent != -1).any()),
        extra={k: [v[i] for i in rows] for k, v in attrs.extra.items()},
    )


def merge_node_table(
    previous: NodeAttributes | None,
    table: NodeTable,
    n: int,
    *,
    mode: Literal["replace", "append"] = "replace",
) -> NodeAttributes:
    """Per-node attribute arrays for a version of ``n`` nodes.

    Parameters
    ----------
    previous : the current version's attributes (None for a first upload).
    table : node records read with the version's interner.
    n : node count of the new version (``>= previous.n``).
    mode : ``"replace"`` keeps only ``table``'s attributes (everything else
        missing); ``"append"`` starts from ``previous`` and overwrites, for
        the listed nodes, the columns the table has (an empty cell in a given
        column clears that node's value); other columns and nodes are kept.

    Returns
    -------
    NodeAttributes
        Segment and region become codes into sorted label tuples (unused
        labels dropped). ``has_consent_data`` is true when any consent is
        known. ``label`` has no array of its own in NodeAttributes: it is
        kept in ``extra["label"]``.

    Examples
    --------
    >>> import numpy as np
    >>> t = NodeTable(np.array([2, 0]), ["b", "a"], [None, None], np.array([1, -1], np.int8),
    ...               np.array([1.0, np.nan]), np.array([np.nan] * 2), [None, None],
    ...               {}, ("segment", "consent", "cost"), 2)
    >>> a = merge_node_table(None, t, 3)
    >>> a.segment.tolist(), a.segment_labels, a.consent.tolist(), a.has_consent_data
    ([0, -1, 1], ('a', 'b'), [-1, -1, 1], True)
    """
    if mode not in ("replace", "append"):
        raise InvalidOption(f"mode must be 'replace' or 'append', got {mode!r}", field="mode")
    idx = np.asarray(table.index, dtype=np.int64)
    if (previous is not None and n < previous.n) or (idx.size and int(idx.max()) >= n):
        raise InvalidOption(f"n={n} is smaller than the nodes the table uses", field="n")
    start = previous if mode == "append" and previous is not None else NodeAttributes.empty(n)
    seg, seg_labels = _pad_codes(start.segment, n), start.segment_labels
    reg, reg_labels = _pad_codes(start.region, n), start.region_labels
    consent = _pad(start.consent, n, -1)
    cost = _pad(start.cost, n, np.nan)
    value = _pad(start.value, n, np.nan)
    extra = {k: list(v) + [None] * (n - len(v)) for k, v in start.extra.items()}
    cols = set(table.columns)
    if "segment" in cols:
        seg, seg_labels = _overlay(seg, seg_labels, idx, table.segment)
    if "region" in cols:
        reg, reg_labels = _overlay(reg, reg_labels, idx, table.region)
    if "consent" in cols:
        consent[idx] = table.consent
    if "cost" in cols:
        cost[idx] = table.cost
    if "value" in cols:
        value[idx] = table.value
    columns = dict(table.extra)
    if "label" in cols:
        columns["label"] = table.label
    rows = idx.tolist()
    for name, cells in columns.items():
        col = extra.setdefault(name, [None] * n)
        for i, cell in zip(rows, cells):
            col[i] = cell
    return NodeAttributes(
        n=n,
        segment=seg,
        segment_labels=seg_labels,
        region=reg,
        region_labels=reg_labels,
        consent=consent,
        cost=cost,
        value=value,
        has_consent_data=bool((consent != -1).any()),
        extra=extra,
    )


# ------------------------------------------------------------------ helpers


def _pad(a: NDArray[_S], n: int, fill: float) -> NDArray[_S]:
    out = np.full(n, fill, dtype=a.dtype)
    out[: a.shape[0]] = a
    return out


def _pad_codes(a: NDArray[np.int32], n: int) -> NDArray[np.int32]:
    return _pad(a, n, -1).astype(np.int32)


def _overlay(
    codes: NDArray[np.int32],
    labels: tuple[str, ...],
    idx: NDArray[np.int64],
    values: list[str | None],
) -> tuple[NDArray[np.int32], tuple[str, ...]]:
    """Set the listed nodes' categories; re-sort the labels and drop unused ones."""
    merged = sorted(set(labels).union(v for v in values if v is not None))
    pos = {label: i for i, label in enumerate(merged)}
    lut = np.array([pos[label] for label in labels] + [-1], dtype=np.int32)
    out = lut[codes]  # code -1 picks the trailing -1
    out[idx] = np.array([-1 if v is None else pos[v] for v in values], dtype=np.int32)
    return _prune(out, tuple(merged))


def _prune(
    codes: NDArray[np.int32], labels: tuple[str, ...]
) -> tuple[NDArray[np.int32], tuple[str, ...]]:
    used = np.unique(codes[codes >= 0])
    if used.size == len(labels):
        return codes.astype(np.int32), labels
    lut = np.full(len(labels) + 1, -1, dtype=np.int32)
    lut[used] = np.arange(used.size, dtype=np.int32)
    return lut[codes], tuple(labels[i] for i in used.tolist())
