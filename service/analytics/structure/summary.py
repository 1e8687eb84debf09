"""Graph summary computed at ingest: size, density, components, reciprocity, degrees.

Everything here is vectorised numpy plus the compiled loops of
:mod:`service.analytics.structure._summary_kernels` for components and reciprocity, so a
10-million-edge graph is summarised in about a second without building an
igraph graph (which costs more than the whole summary on graphs that size),
and with no temporary of length m (the summary runs at ingest, beside the
upload's own arrays).
"""

from __future__ import annotations

from typing import Any

import numpy as np
from numpy.typing import NDArray

from ._summary_kernels import (
    degrees,
    is_sorted_by_source,
    reciprocal_arcs,
    row_pointer,
    strong_components,
    weak_components,
)
from ..graph import GraphArrays

__all__ = ["graph_summary"]


def graph_summary(g: GraphArrays) -> dict[str, Any]:
    """Summarise a graph: size, density, components, reciprocity and degrees.

    Parameters
    ----------
    g : GraphArrays
        The graph. Edges are assumed unique (merged at intake).

    Returns
    -------
    dict
        ``nodes``, ``edges`` (stored edges, self-loops included), ``directed``,
        ``weighted`` (any weight != 1), ``self_loops``, ``density``,
        ``weak_components``, ``largest_weak_share`` (fraction of nodes in the
        largest weakly connected component), ``strong_components`` and
        ``largest_strong_share`` (directed only, else None), ``reciprocity``
        (directed only, else None), ``degree_min``, ``degree_median``,
        ``degree_max`` (total degree), ``in_degree_max`` and ``out_degree_max``
        (directed only, else None).

    Notes
    -----
    Density excludes self-loops from the edge count: ``m' / (n (n - 1))`` for
    directed graphs and ``2 m' / (n (n - 1))`` for undirected ones, with ``m'``
    the number of non-loop edges; it is 0 when ``n < 2`` (as NetworkX's
    ``density``, which equals this on graphs without self-loops).

    Reciprocity is the share of non-loop arcs ``u -> v`` whose reverse
    ``v -> u`` also exists. On a graph without self-loops this is NetworkX's
    ``overall_reciprocity``; NetworkX keeps self-loops in its denominator,
    we leave them out of both numerator and denominator. None when there is no
    non-loop arc.

    Total degree counts a self-loop twice on undirected graphs and once as in-
    and once as out-degree on directed ones (igraph and NetworkX convention).
    Isolated nodes are singleton components.

    Weak components come from a union-find with union by size and path
    halving [2]_, strong components from Tarjan's depth-first search [1]_ run
    with an explicit stack, reciprocity from a binary search of each arc's
    reverse in its row.

    Cost: O(n + m log d) time (d the largest out-degree) and O(n) memory
    beyond the input when the arcs come sorted by (source, target), as intake
    stores them; other input pays one O(m log m) sort and O(m) memory.

    References
    ----------
    .. [1] R. E. Tarjan (1972). Depth-first search and linear graph
       algorithms. SIAM Journal on Computing 1(2), 146-160.
    .. [2] R. E. Tarjan, J. van Leeuwen (1984). Worst-case analysis of set
       union algorithms. Journal of the ACM 31(2), 245-281.

    Examples
    --------
    >>> import numpy as np
    >>> g = from_edges([(0, 1), (1, 0), (1, 2), (2, 2)], n=4, directed=True)
    >>> s = graph_summary(g)
    >>> s["self_loops"], s["density"], s["reciprocity"], s["strong_components"]
    (1, 0.25, 0.6666666666666666, 3)
    >>> s["weak_components"], s["largest_weak_share"]
    (2, 0.75)
    """
    n, m = int(g.n), g.m
    # int32 throughout: the summary runs at ingest, beside the upload's own
    # arrays, so every temporary of length m counts against the memory goal.
    src = np.asarray(g.src, dtype=np.int32)
    dst = np.asarray(g.dst, dtype=np.int32)
    out_deg, in_deg, loops = degrees(n, src, dst)
    self_loops = int(loops)
    m_simple = m - self_loops

    if n < 2:
        density = 0.0
    elif g.directed:
        density = m_simple / (n * (n - 1))
    else:
        density = 2.0 * m_simple / (n * (n - 1))

    total = out_deg + in_deg

    weak_count, weak_share = _weak(n, src, dst)
    if g.directed:
        strong_count, strong_share, reciprocity = _directed(n, src, dst, out_deg, m_simple)
    else:
        strong_count, strong_share, reciprocity = None, None, None

    return {
        "nodes": n,
        "edges": m,
        "directed": bool(g.directed),
        "weighted": bool(g.weighted),
        "self_loops": self_loops,
        "density": float(density),
        "weak_components": weak_count,
        "largest_weak_share": weak_share,
        "strong_components": strong_count,
        "largest_strong_share": strong_share,
        "reciprocity": reciprocity,
        "degree_min": int(total.min()) if n else None,
        "degree_median": float(np.median(total)) if n else None,
        "degree_max": int(total.max()) if n else None,
        "in_degree_max": int(in_deg.max()) if (n and g.directed) else None,
        "out_degree_max": int(out_deg.max()) if (n and g.directed) else None,
    }


def _weak(n: int, src: NDArray[np.int32], dst: NDArray[np.int32]) -> tuple[int, float | None]:
    """Number of weakly connected components and the largest one's share of nodes."""
    if n == 0:
        return 0, None
    count, largest = weak_components(n, src, dst)
    return int(count), int(largest) / n


def _directed(
    n: int, src: NDArray[np.int32], dst: NDArray[np.int32], out_deg: NDArray[np.int64], m_simple: int
) -> tuple[int, float | None, float | None]:
    """Strong components (count, largest share) and reciprocity of a directed graph.

    Both run over the rows of the arcs sorted by (source, target). Intake
    hands them over in that order, so the row pointer is a cumulative count
    and ``dst`` serves as the rows as it is; other input pays one sort.
    """
    if n == 0:
        return 0, None, None
    if not is_sorted_by_source(src, dst, True):
        order = np.lexsort((dst, src))
        src, dst = src[order], dst[order]
        del order
    indptr = row_pointer(out_deg)
    count, largest = strong_components(n, indptr, dst)
    # Arcs are unique, so each reciprocated non-loop arc is counted once.
    reciprocity = None if m_simple == 0 else int(reciprocal_arcs(indptr, src, dst)) / m_simple
    return int(count), int(largest) / n, reciprocity
