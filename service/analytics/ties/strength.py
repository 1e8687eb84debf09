"""Tie strength per edge and the neighbour index that recommendations walk.

:func:`tie_strength` scores every edge from three signals: how much the two
people's circles overlap (Onnela et al. 2007), whether the tie runs both ways
(directed graphs), and how many interactions it carries (weighted graphs).
:func:`neighbour_index` does one pass over the graph and keeps what the
per-person requests in :mod:`service.analytics.ties.recommend` need: the
undirected neighbour CSR with a tie strength per entry, degrees, and the
directed in/out CSRs when the graph is directed.
"""

from __future__ import annotations

import threading
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import NDArray

from . import _kernels as K
from .._grouping import group_order
from ..errors import InvalidParameter
from ..graph import Csr, GraphArrays, csr

__all__ = [
    "DEFAULT_SHARES",
    "TieStrength",
    "NeighbourIndex",
    "tie_strength",
    "neighbour_index",
]

DEFAULT_SHARES: dict[str, float] = {"weight": 0.4, "overlap": 0.4, "reciprocity": 0.2}


@dataclass(frozen=True, eq=False)
class TieStrength:
    """Tie-strength components per edge of the input graph (aligned with ``g.src``).

    Attributes
    ----------
    common : int32, common neighbours n_ij in the undirected view.
    overlap : float64 in [0, 1], Onnela neighbourhood overlap.
    reciprocal : bool, an arc runs each way (always True when undirected).
    weight_score : float64 in [0, 1), w / (w + median w) over pair weights.
    strength : float64 in [0, 1], the combined score.
    shares : the (weight, overlap, reciprocity) shares actually used, summing to 1.
    """

    common: NDArray[np.int32]
    overlap: NDArray[np.float64]
    reciprocal: NDArray[np.bool_]
    weight_score: NDArray[np.float64]
    strength: NDArray[np.float64]
    shares: tuple[float, float, float]


class _ScratchPool:
    """Per-thread work arrays of length n, reused across requests (not pickled)."""

    def __init__(self, n: int) -> None:
        self.n = n
        self._local = threading.local()

    def get(self) -> Any:
        s = getattr(self._local, "s", None)
        if s is None:
            n = self.n
            s = _Scratch(
                acc=np.zeros(n), cnt=np.zeros(n, np.int32), flag=np.zeros(n, np.uint8),
                touched=np.zeros(n, np.int32), r=np.zeros(n), inq=np.zeros(n, np.uint8),
                queue=np.zeros(n, np.int32),
            )
            self._local.s = s
        return s

    def __getstate__(self) -> dict[str, int]:
        return {"n": self.n}

    def __setstate__(self, state: dict[str, int]) -> None:
        self.__init__(state["n"])  # type: ignore[misc]


@dataclass
class _Scratch:
    acc: NDArray[np.float64]
    cnt: NDArray[np.int32]
    flag: NDArray[np.uint8]
    touched: NDArray[np.int32]
    r: NDArray[np.float64]
    inq: NDArray[np.uint8]
    queue: NDArray[np.int32]


@dataclass(frozen=True, eq=False)
class NeighbourIndex:
    """What per-person recommendation requests need, built once per graph version.

    Attributes
    ----------
    n, directed : as in the graph.
    indptr, indices : undirected simple neighbour CSR (self-loops dropped,
        each neighbour once, rows sorted ascending).
    strength : float64 tie strength of each CSR entry (same for both directions).
    degree : int64 undirected degree.
    by_degree : int32 nodes by degree descending, then index ascending.
    ties : the per-edge :class:`TieStrength` of the input graph.
    out_csr, in_csr : directed out/in-neighbour CSRs (data = weight), or None.
    """

    n: int
    directed: bool
    indptr: NDArray[np.int64]
    indices: NDArray[np.int32]
    strength: NDArray[np.float64]
    degree: NDArray[np.int64]
    by_degree: NDArray[np.int32]
    ties: TieStrength
    out_csr: Csr | None = None
    in_csr: Csr | None = None
    _pool: _ScratchPool = field(default=None, repr=False)  # type: ignore[assignment]

    def __post_init__(self) -> None:
        if self._pool is None:
            object.__setattr__(self, "_pool", _ScratchPool(self.n))

    def neighbours(self, node: int) -> NDArray[np.int32]:
        """Sorted undirected neighbours of ``node``."""
        return self.indices[self.indptr[node] : self.indptr[node + 1]]

    def scratch(self) -> Any:
        """This thread's work arrays (all zero between requests)."""
        return self._pool.get()


class _Pairs:
    """The undirected simple view: unique pairs lo < hi and each edge's pair."""

    def __init__(self, g: GraphArrays) -> None:
        n = g.n
        src = g.src.astype(np.int64)
        dst = g.dst.astype(np.int64)
        self.loop = src == dst
        keep = ~self.loop
        lo, hi = np.minimum(src, dst)[keep], np.maximum(src, dst)[keep]
        keys, inv = np.unique(lo * n + hi, return_inverse=True)
        self.count = int(keys.shape[0])
        self.lo = (keys // n).astype(np.int32) if n else keys.astype(np.int32)
        self.hi = (keys % n).astype(np.int32) if n else keys.astype(np.int32)
        self.edge_pair = np.full(g.m, -1, dtype=np.int64)
        self.edge_pair[keep] = inv
        # A pair's interaction count is the total over its arcs, both ways.
        self.weight = np.bincount(inv, weights=g.weight[keep], minlength=self.count)
        if g.directed:
            fwd = src[keep] < dst[keep]
            has_fwd = np.bincount(inv[fwd], minlength=self.count) > 0
            has_bwd = np.bincount(inv[~fwd], minlength=self.count) > 0
            self.reciprocal = has_fwd & has_bwd
        else:
            self.reciprocal = np.ones(self.count, dtype=bool)

    def adjacency(self, n: int) -> tuple[NDArray[np.int64], NDArray[np.int32], NDArray[np.int64]]:
        """Undirected CSR with sorted rows, and the pair id of each entry."""
        # Pairs are sorted by (lo, hi). Listing the (hi -> lo) entries first and
        # then the (lo -> hi) ones, a stable sort by row leaves every row sorted:
        # its smaller neighbours come first, in order, then its larger ones.
        rows = np.concatenate((self.hi, self.lo))
        cols = np.concatenate((self.lo, self.hi))
        pid = np.concatenate((np.arange(self.count), np.arange(self.count)))
        order = group_order(rows, n)
        indptr = np.zeros(n + 1, dtype=np.int64)
        np.cumsum(np.bincount(rows, minlength=n), out=indptr[1:])
        return indptr, np.ascontiguousarray(cols[order]), pid[order]


def _check_shares(weight: float, overlap: float, reciprocity: float) -> None:
    for name, value in (
        ("weight_share", weight), ("overlap_share", overlap), ("reciprocity_share", reciprocity)
    ):
        if not np.isfinite(value) or value < 0:
            raise InvalidParameter(f"{name} must be a finite number >= 0", field=name)
    if weight + overlap + reciprocity <= 0:
        raise InvalidParameter("the three shares must not all be 0", field="weight_share")


def _pair_ties(
    g: GraphArrays, pairs: _Pairs, indptr: NDArray[np.int64], indices: NDArray[np.int32],
    shares: tuple[float, float, float],
) -> tuple[NDArray[np.int32], NDArray[np.float64], NDArray[np.float64], NDArray[np.float64],
           tuple[float, float, float]]:
    _check_shares(*shares)
    common = K.common_counts(indptr, indices, pairs.lo, pairs.hi)
    degree = np.diff(indptr)
    denom = degree[pairs.lo] + degree[pairs.hi] - 2 - common
    overlap = np.zeros(pairs.count)
    np.divide(common, denom, out=overlap, where=denom > 0)
    median = float(np.median(pairs.weight)) if pairs.count else 1.0
    weight_score = pairs.weight / (pairs.weight + (median if median > 0 else 1.0))
    # A signal that is the same on every tie by construction carries no
    # information: its share goes to the others, pro rata.
    ws, os_, rs = shares
    eff = (ws if g.weighted else 0.0, os_, rs if g.directed else 0.0)
    if sum(eff) <= 0:
        eff = shares
    total = sum(eff)
    eff = (eff[0] / total, eff[1] / total, eff[2] / total)
    strength = eff[0] * weight_score + eff[1] * overlap + eff[2] * pairs.reciprocal
    return common, overlap, weight_score, np.clip(strength, 0.0, 1.0), eff


def _per_edge(pairs: _Pairs, values: NDArray[Any], fill: Any) -> NDArray[Any]:
    out = np.full(pairs.edge_pair.shape[0], fill, dtype=values.dtype)
    keep = ~pairs.loop
    out[keep] = values[pairs.edge_pair[keep]]
    return out


def _build(
    g: GraphArrays, shares: tuple[float, float, float]
) -> tuple[_Pairs, NDArray[np.int64], NDArray[np.int32], NDArray[np.int64], TieStrength,
           NDArray[np.float64]]:
    pairs = _Pairs(g)
    indptr, indices, pid = pairs.adjacency(g.n)
    common, overlap, wscore, strength, eff = _pair_ties(g, pairs, indptr, indices, shares)
    ties = TieStrength(
        common=_per_edge(pairs, common, 0),
        overlap=_per_edge(pairs, overlap, 0.0),
        reciprocal=_per_edge(pairs, pairs.reciprocal, False),
        weight_score=_per_edge(pairs, wscore, 0.0),
        strength=_per_edge(pairs, strength, 0.0),
        shares=eff,
    )
    return pairs, indptr, indices, pid, ties, strength


def tie_strength(
    g: GraphArrays,
    *,
    weight_share: float = DEFAULT_SHARES["weight"],
    overlap_share: float = DEFAULT_SHARES["overlap"],
    reciprocity_share: float = DEFAULT_SHARES["reciprocity"],
) -> TieStrength:
    """Strength of every tie from overlap, reciprocity and interaction count.

    The neighbourhood overlap of a tie (i, j) is [1]_

    .. math:: O_{ij} = n_{ij} / ((k_i - 1) + (k_j - 1) - n_{ij})

    with n_ij the common neighbours and k the degrees in the undirected view.
    The strength is the convex combination

    .. math:: s = a_w \\, w/(w + \\tilde w) + a_o \\, O + a_r \\, [\\text{reciprocal}]

    with w the pair's total interaction count (both directions) and
    :math:`\\tilde w` the median over all pairs.

    Parameters
    ----------
    g : the graph.
    weight_share, overlap_share, reciprocity_share : the shares a_w, a_o, a_r
        (>= 0, normalised to sum 1). Defaults 0.4 / 0.4 / 0.2: our choice,
        not taken from a paper.

    Returns
    -------
    TieStrength
        Per-edge arrays aligned with ``g.src``; ``shares`` holds the shares used.

    Raises
    ------
    InvalidParameter
        A share is negative or not finite, or all three are 0.

    Notes
    -----
    - O_ij is undefined when k_i = k_j = 1 (an isolated pair); it is 0 here.
    - Reciprocity is constant in an undirected graph, and the weight score in
      a graph without weights (all 1); their shares then go to the remaining
      signals pro rata. (If nothing remains, the shares are used as given.)
    - w / (w + median) is 1/2 at the median weight, scale-free (the same for
      counts in any unit), and tends to 1 for heavy ties without a maximum
      being needed.
    - Self-loops are not ties: all their components are 0.
    - Cost: one sorted-row merge per edge, O(sum over edges of k_i + k_j).

    References
    ----------
    .. [1] J.-P. Onnela, J. Saramaki, J. Hyvonen, G. Szabo, D. Lazer, K. Kaski,
       J. Kertesz, A.-L. Barabasi (2007). Structure and tie strengths in mobile
       communication networks. PNAS 104(18), 7332-7336. doi:10.1073/pnas.0610245104
    .. [2] M. Granovetter (1973). The strength of weak ties. Am. J. Sociol. 78(6).

    Examples
    --------
    Two triangles joined by the bridge 2-3:

    >>> import numpy as np
    >>> g = from_edges([(0, 1), (0, 2), (1, 2), (2, 3), (3, 4), (3, 5), (4, 5)])
    >>> tie_strength(g).overlap.tolist()
    [1.0, 0.5, 0.5, 0.0, 0.5, 0.5, 1.0]
    """
    shares = (float(weight_share), float(overlap_share), float(reciprocity_share))
    return _build(g, shares)[4]


def neighbour_index(
    g: GraphArrays,
    *,
    weight_share: float = DEFAULT_SHARES["weight"],
    overlap_share: float = DEFAULT_SHARES["overlap"],
    reciprocity_share: float = DEFAULT_SHARES["reciprocity"],
) -> NeighbourIndex:
    """Build the :class:`NeighbourIndex` of ``g`` in one pass.

    Parameters
    ----------
    g : the graph.
    weight_share, overlap_share, reciprocity_share : passed to :func:`tie_strength`.

    Returns
    -------
    NeighbourIndex

    Raises
    ------
    InvalidParameter
        Bad shares (see :func:`tie_strength`).

    Notes
    -----
    Cost: sorting the 2P adjacency entries (P undirected pairs) plus the
    per-edge merge of :func:`tie_strength`. Memory: 12 bytes per adjacency
    entry (two per tie), 20 bytes per node, 29 bytes per input edge for the
    tie arrays, and 30 bytes per node for each thread's request scratch
    arrays (allocated on that thread's first request).

    References
    ----------
    .. [1] J.-P. Onnela et al. (2007). PNAS 104(18). doi:10.1073/pnas.0610245104

    Examples
    --------
    >>> import numpy as np
    >>> g = from_edges([(0, 1), (0, 2), (1, 2), (2, 3)])
    >>> ix = neighbour_index(g)
    >>> ix.neighbours(2).tolist(), ix.degree.tolist()
    ([0, 1, 3], [2, 2, 3, 1])
    """
    shares = (float(weight_share), float(overlap_share), float(reciprocity_share))
    _, indptr, indices, pid, ties, pair_strength = _build(g, shares)
    degree = np.diff(indptr)
    by_degree = np.lexsort((np.arange(g.n), -degree)).astype(np.int32)
    out_csr = in_csr = None
    if g.directed:
        out_csr = csr(g.n, g.src, g.dst, g.weight)
        in_csr = csr(g.n, g.dst, g.src, g.weight)
    return NeighbourIndex(
        n=g.n,
        directed=g.directed,
        indptr=indptr,
        indices=indices,
        strength=np.ascontiguousarray(pair_strength[pid]),
        degree=degree,
        by_degree=by_degree,
        ties=ties,
        out_csr=out_csr,
        in_csr=in_csr,
    )
