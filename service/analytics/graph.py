"""The in-memory graph every analytics function takes, and edge-probability models.

A stored version arrives here as plain numpy arrays (:class:`GraphArrays`,
:class:`NodeAttributes`); :func:`to_igraph` builds the igraph graph the
centrality code uses, and :func:`arcs` / :func:`csr` give the directed arc
arrays and compressed sparse rows the compiled diffusion kernels walk.

Node identity inside analytics is the integer index ``0..n-1``; the caller's
string ids live one layer up and never enter this package.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Literal, NamedTuple

import numpy as np
from numpy.typing import NDArray

from ._grouping import group_order
from .errors import InvalidParameter

if TYPE_CHECKING:
    import igraph  # no type hints: mypy sees igraph.Graph as Any (pyproject override)

__all__ = [
    "GraphArrays",
    "from_edges",
    "NodeAttributes",
    "Arcs",
    "Csr",
    "ProbabilityScheme",
    "PROBABILITY_SCHEMES",
    "to_igraph",
    "arcs",
    "csr",
    "edge_probabilities",
    "check_lt_weights",
    "DiffusionGraph",
    "diffusion_graph",
]

ProbabilityScheme = Literal[
    "weighted_cascade", "uniform", "trivalency", "per_interaction", "normalized", "explicit"
]
PROBABILITY_SCHEMES: tuple[str, ...] = (
    "weighted_cascade",
    "uniform",
    "trivalency",
    "per_interaction",
    "normalized",
    "explicit",
)
TRIVALENCY_VALUES: NDArray[np.float64] = np.array([0.1, 0.01, 0.001])


@dataclass(frozen=True, eq=False)
class GraphArrays:
    """A graph as edge arrays over nodes ``0..n-1``.

    Edges are unique (duplicates were merged at intake). For an undirected
    graph each edge is listed once, with ``src <= dst`` not guaranteed.

    Attributes
    ----------
    n : number of nodes (isolated nodes included).
    directed : whether ``src -> dst`` is an arc or an undirected edge.
    src, dst : int32 arrays of length m.
    weight : float64 interaction counts (> 0; 1 when the upload had none).
    probability : float64 explicit per-edge probabilities in [0, 1], or None.
    """

    n: int
    directed: bool
    src: NDArray[np.int32]
    dst: NDArray[np.int32]
    weight: NDArray[np.float64]
    probability: NDArray[np.float64] | None = None

    @property
    def m(self) -> int:
        return int(self.src.shape[0])

    @property
    def weighted(self) -> bool:
        return bool(self.m) and not bool(np.all(self.weight == 1.0))


def from_edges(
    edges: Sequence[tuple[int, int]],
    *,
    n: int | None = None,
    directed: bool = False,
    weights: Sequence[float] | None = None,
    probabilities: Sequence[float] | None = None,
) -> GraphArrays:
    """A :class:`GraphArrays` from ``(u, v)`` pairs of node indices, for small graphs.

    Parameters
    ----------
    edges : pairs of node indices in ``0..n-1``; each edge at most once (for an
        undirected graph, ``(u, v)`` and ``(v, u)`` are the same edge).
    n : number of nodes; default one more than the largest index (isolated
        nodes at the end need ``n``).
    directed : whether each pair is an arc ``u -> v``.
    weights, probabilities : one value per edge (default: weight 1, no probabilities).

    Raises
    ------
    InvalidParameter
        A negative or too large index, a repeated edge, or a list of the wrong length.

    Examples
    --------
    >>> g = from_edges([(0, 1), (1, 2)], n=4)
    >>> g.n, g.m, g.directed, g.src.tolist(), g.weight.tolist()
    (4, 2, False, [0, 1], [1.0, 1.0])
    """
    pairs = np.asarray(list(edges), dtype=np.int64).reshape(-1, 2)
    size = int(pairs.max()) + 1 if pairs.size else 0
    n = size if n is None else int(n)
    if pairs.size and (pairs.min() < 0 or size > n):
        raise InvalidParameter(f"node indices must lie in 0..{n - 1}", field="edges")
    keys = pairs if directed else np.sort(pairs, axis=1)
    if len(np.unique(keys, axis=0)) != len(keys):
        raise InvalidParameter("an edge is listed more than once", field="edges")
    m = len(pairs)
    for name, values in (("weights", weights), ("probabilities", probabilities)):
        if values is not None and len(values) != m:
            raise InvalidParameter(f"{name} needs one value per edge ({m})", field=name)
    return GraphArrays(
        n, directed, pairs[:, 0].astype(np.int32), pairs[:, 1].astype(np.int32),
        np.ones(m) if weights is None else np.asarray(weights, dtype=np.float64),
        None if probabilities is None else np.asarray(probabilities, dtype=np.float64),
    )


@dataclass(frozen=True, eq=False)
class NodeAttributes:
    """Per-node attributes, aligned with node indices.

    ``segment`` and ``region`` are category codes (-1 = missing) into
    ``segment_labels`` / ``region_labels``. ``consent`` is 1 (yes), 0 (no)
    or -1 (unknown). ``cost`` and ``value`` are NaN when missing.
    """

    n: int
    segment: NDArray[np.int32]
    segment_labels: tuple[str, ...]
    region: NDArray[np.int32]
    region_labels: tuple[str, ...]
    consent: NDArray[np.int8]
    cost: NDArray[np.float64]
    value: NDArray[np.float64]
    has_consent_data: bool = False
    extra: dict[str, list[str | None]] = field(default_factory=dict)

    @classmethod
    def empty(cls, n: int) -> NodeAttributes:
        return cls(
            n=n,
            segment=np.full(n, -1, dtype=np.int32),
            segment_labels=(),
            region=np.full(n, -1, dtype=np.int32),
            region_labels=(),
            consent=np.full(n, -1, dtype=np.int8),
            cost=np.full(n, np.nan),
            value=np.full(n, np.nan),
        )

    def contactable(self) -> NDArray[np.bool_]:
        """Who may be contacted.

        When the version carries consent data, only an explicit yes counts:
        unknown consent is treated as no, because the product's rule is "none
        without marketing consent". A version with no consent data at all
        marks everyone contactable.
        """
        if not self.has_consent_data:
            return np.ones(self.n, dtype=bool)
        return np.asarray(self.consent == 1)


class Arcs(NamedTuple):
    """Directed arcs: undirected edges appear twice, once each way."""

    n: int
    src: NDArray[np.int32]
    dst: NDArray[np.int32]
    weight: NDArray[np.float64]
    probability: NDArray[np.float64] | None
    edge: NDArray[np.int64]  # index of the originating edge in GraphArrays


class Csr(NamedTuple):
    """Compressed sparse rows: row ``u`` holds ``indices[indptr[u]:indptr[u+1]]``."""

    indptr: NDArray[np.int64]
    indices: NDArray[np.int32]
    data: NDArray[np.float64]
    order: NDArray[np.int64]  # position of each CSR entry in the arc arrays


def to_igraph(g: GraphArrays, *, weights: bool = True) -> igraph.Graph:
    """Build an ``igraph.Graph`` with the edge attribute ``weight``.

    Examples
    --------
    >>> import numpy as np
    >>> g = from_edges([(0, 1), (1, 2), (2, 3)])
    >>> to_igraph(g).ecount()
    3
    """
    import igraph

    # igraph converts a zip of Python ints about 3x faster than a numpy array.
    edges = zip(g.src.tolist(), g.dst.tolist()) if g.m else []
    ig = igraph.Graph(n=g.n, edges=edges, directed=g.directed)
    if weights and g.m:
        ig.es["weight"] = g.weight.tolist()
    return ig


def arcs(g: GraphArrays) -> Arcs:
    """Directed arcs of ``g``: itself when directed, both directions otherwise.

    Examples
    --------
    >>> import numpy as np
    >>> g = from_edges([(0, 1)])
    >>> a = arcs(g); a.src.tolist(), a.dst.tolist()
    ([0, 1], [1, 0])
    """
    idx = np.arange(g.m, dtype=np.int64)
    if g.directed:
        return Arcs(g.n, g.src, g.dst, g.weight, g.probability, idx)
    # A self-loop in an undirected graph is one arc, not two.
    keep = g.src != g.dst
    src = np.concatenate((g.src, g.dst[keep]))
    dst = np.concatenate((g.dst, g.src[keep]))
    weight = np.concatenate((g.weight, g.weight[keep]))
    prob = None if g.probability is None else np.concatenate((g.probability, g.probability[keep]))
    return Arcs(g.n, src, dst, weight, prob, np.concatenate((idx, idx[keep])))


def csr(
    n: int,
    rows: NDArray[np.int32],
    cols: NDArray[np.int32],
    data: NDArray[np.float64],
) -> Csr:
    """Group ``(rows[i], cols[i], data[i])`` by row; stable within a row.

    Use ``csr(a.n, a.src, a.dst, p)`` for out-neighbours (forward simulation)
    and ``csr(a.n, a.dst, a.src, p)`` for in-neighbours (reverse sampling).

    Examples
    --------
    >>> import numpy as np
    >>> c = csr(3, np.array([2, 0, 2], np.int32), np.array([0, 1, 1], np.int32), np.ones(3))
    >>> c.indptr.tolist(), c.indices.tolist()
    ([0, 1, 1, 3], [1, 0, 1])
    """
    order = group_order(rows, n)
    counts = np.bincount(rows, minlength=n)
    indptr = np.zeros(n + 1, dtype=np.int64)
    np.cumsum(counts, out=indptr[1:])
    return Csr(
        indptr,
        np.ascontiguousarray(cols[order], dtype=np.int32),
        np.ascontiguousarray(data[order], dtype=np.float64),
        order.astype(np.int64),
    )


def edge_probabilities(
    a: Arcs,
    scheme: str,
    *,
    p: float | None = None,
    q: float | None = None,
    random_seed: int = 0,
) -> NDArray[np.float64]:
    """Activation probability of every arc under a named model.

    Parameters
    ----------
    a : the arcs (see :func:`arcs`).
    scheme : ``weighted_cascade`` p(u->v) = 1/indeg(v) [1]_; ``uniform`` p [1]_;
        ``trivalency`` each arc drawn from {0.1, 0.01, 0.001} [2]_;
        ``per_interaction`` 1 - (1 - q)^w for w interactions; ``normalized``
        w(u, v) / sum of w over v's in-arcs (incoming weights sum to 1, fit for
        Linear Threshold); ``explicit`` the uploaded probabilities.
    p : the uniform probability.
    q : the per-interaction probability.
    random_seed : seeds the trivalency draw.

    Returns
    -------
    numpy.ndarray of float64, one value per arc, in [0, 1].

    Raises
    ------
    InvalidParameter
        Unknown scheme, missing or out-of-range ``p`` / ``q``, or ``explicit``
        on a version uploaded without probabilities.

    References
    ----------
    .. [1] D. Kempe, J. Kleinberg, E. Tardos (2003). Maximizing the spread of
       influence through a social network. KDD '03. doi:10.1145/956750.956769
    .. [2] W. Chen, C. Wang, Y. Wang (2010). Scalable influence maximization for
       prevalent viral marketing in large-scale social networks. KDD '10.

    Examples
    --------
    >>> import numpy as np
    >>> g = from_edges([(0, 2), (1, 2)], directed=True, weights=[1.0, 3.0])
    >>> edge_probabilities(arcs(g), "weighted_cascade").tolist()
    [0.5, 0.5]
    >>> edge_probabilities(arcs(g), "normalized").tolist()
    [0.25, 0.75]
    """
    m = int(a.src.shape[0])
    if scheme == "weighted_cascade":
        indeg = np.bincount(a.dst, minlength=a.n).astype(np.float64)
        return 1.0 / indeg[a.dst] if m else np.zeros(0)
    if scheme == "uniform":
        return np.full(m, _check_unit("p", p))
    if scheme == "trivalency":
        rng = np.random.default_rng(random_seed)
        return TRIVALENCY_VALUES[rng.integers(0, 3, size=m)]
    if scheme == "per_interaction":
        return 1.0 - np.power(1.0 - _check_unit("q", q), a.weight)
    if scheme == "normalized":
        instr = np.bincount(a.dst, weights=a.weight, minlength=a.n)
        return a.weight / instr[a.dst] if m else np.zeros(0)
    if scheme == "explicit":
        if a.probability is None:
            raise InvalidParameter(
                "scheme 'explicit' needs a version uploaded with a probability column",
                field="probability.scheme",
            )
        return np.asarray(a.probability, dtype=np.float64)
    raise InvalidParameter(
        f"unknown probability scheme {scheme!r}; expected one of {', '.join(PROBABILITY_SCHEMES)}",
        field="probability.scheme",
    )


def check_lt_weights(a: Arcs, probs: NDArray[np.float64], *, tol: float = 1e-9) -> None:
    """Raise unless every node's incoming weights sum to at most 1 (Linear Threshold).

    Examples
    --------
    >>> import numpy as np
    >>> g = from_edges([(0, 2), (1, 2)], directed=True)
    >>> check_lt_weights(arcs(g), np.array([0.5, 0.5]))
    """
    total = np.bincount(a.dst, weights=probs, minlength=a.n)
    worst = int(np.argmax(total)) if a.n else 0
    if a.n and total[worst] > 1.0 + tol:
        raise InvalidParameter(
            "Linear Threshold needs incoming weights summing to at most 1 at every node; "
            f"node index {worst} has {total[worst]:.4g}: use scheme 'normalized' or "
            "'weighted_cascade'",
            field="probability",
            node_index=worst,
        )


def _check_unit(name: str, value: float | None) -> float:
    """``value`` as a float; InvalidParameter unless it is a number in [0, 1]."""
    if value is None or not np.isfinite(value) or not 0.0 <= float(value) <= 1.0:
        raise InvalidParameter(
            f"probability.{name} must be a number in [0, 1], got {value!r}",
            field=f"probability.{name}",
        )
    return float(value)


class DiffusionGraph(NamedTuple):
    """Arcs with activation probabilities, in both CSR orientations.

    ``out_*`` rows are sources (forward simulation); ``in_*`` rows are targets
    (reverse-reachable sampling). ``model`` is ``"ic"`` or ``"lt"``; under LT
    the probabilities are the incoming weights b(u, v), summing to at most 1.
    """

    n: int
    model: str
    out_indptr: NDArray[np.int64]
    out_indices: NDArray[np.int32]
    out_prob: NDArray[np.float64]
    in_indptr: NDArray[np.int64]
    in_indices: NDArray[np.int32]
    in_prob: NDArray[np.float64]


def diffusion_graph(
    g: GraphArrays,
    *,
    model: str = "ic",
    scheme: str = "weighted_cascade",
    p: float | None = None,
    q: float | None = None,
    random_seed: int = 0,
) -> DiffusionGraph:
    """Build the arrays the diffusion and sampling kernels walk.

    Undirected edges spread both ways. Under Linear Threshold the incoming
    weights are checked to sum to at most 1 (see :func:`check_lt_weights`).

    Examples
    --------
    >>> import numpy as np
    >>> g = from_edges([(0, 1), (0, 2)], directed=True)
    >>> dg = diffusion_graph(g, scheme="uniform", p=0.5)
    >>> dg.out_indptr.tolist(), dg.in_indptr.tolist()
    ([0, 2, 2, 2], [0, 0, 1, 2])
    """
    if model not in ("ic", "lt"):
        raise InvalidParameter(f"unknown model {model!r}; expected 'ic' or 'lt'", field="model")
    a = arcs(g)
    probs = edge_probabilities(a, scheme, p=p, q=q, random_seed=random_seed)
    if model == "lt":
        check_lt_weights(a, probs)
    out = csr(a.n, a.src, a.dst, probs)
    inn = csr(a.n, a.dst, a.src, probs)
    return DiffusionGraph(
        a.n, model, out.indptr, out.indices, out.data, inn.indptr, inn.indices, inn.data
    )
