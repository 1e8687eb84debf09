"""Which link-prediction method fits this graph: an evaluation on held-out edges.

:func:`evaluate_link_prediction` hides a random share of the ties, builds the
neighbour index on the rest, and asks each method to tell the hidden pairs
apart from sampled pairs that are not tied, reporting AUC and precision at k
(the protocol of Liben-Nowell and Kleinberg 2007 and Zhou, Lu and Zhang 2009,
with sampled rather than exhaustive non-edges).
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import Any

import numpy as np
from numpy.typing import NDArray

from . import _kernels as K
from .._chunks import run_chunked
from .._grouping import group_order
from ..errors import InfeasibleRequest, InvalidParameter
from ..graph import GraphArrays
from .recommend import DEFAULT_TOLERANCE, LINK_METHODS, _check_ppr, _pair_method
from .strength import NeighbourIndex, _Pairs, neighbour_index

__all__ = ["DEFAULT_EVAL_METHODS", "evaluate_link_prediction", "auc", "precision_at_k"]

DEFAULT_EVAL_METHODS: tuple[str, ...] = LINK_METHODS


def auc(pos: NDArray[np.float64], neg: NDArray[np.float64]) -> float:
    """Chance that a random positive outscores a random negative, ties counting 1/2.

    Computed from mid-ranks (the Mann-Whitney U statistic divided by P N).

    Examples
    --------
    >>> import numpy as np
    >>> auc(np.array([3.0, 1.0]), np.array([1.0, 0.0]))
    0.875
    """
    p, q = pos.shape[0], neg.shape[0]
    if p == 0 or q == 0:
        raise InvalidParameter("AUC needs positives and negatives", field="holdout")
    scores = np.concatenate((pos, neg))
    order = np.argsort(scores, kind="mergesort")
    sorted_ = scores[order]
    start = np.flatnonzero(np.r_[True, sorted_[1:] != sorted_[:-1]])
    end = np.r_[start[1:], sorted_.shape[0]]
    mid = (start + end + 1) / 2.0  # average 1-based rank of each run of ties
    ranks = np.empty(scores.shape[0])
    ranks[order] = np.repeat(mid, end - start)
    u = ranks[:p].sum() - p * (p + 1) / 2.0
    return float(u / (p * q))


def precision_at_k(pos: NDArray[np.float64], neg: NDArray[np.float64], k: int) -> float:
    """Share of positives among the k best-scored pairs, ties at the cut shared evenly.

    Pairs tied with the k-th score fill the remaining places in random order,
    so the expected number of positives among them is counted.

    Examples
    --------
    >>> import numpy as np
    >>> precision_at_k(np.array([3.0, 1.0]), np.array([1.0, 0.0]), 2)
    0.75
    """
    scores = np.concatenate((pos, neg))
    k = min(int(k), scores.shape[0])
    if k < 1:
        raise InvalidParameter("k must be at least 1", field="k")
    cut = np.partition(scores, scores.shape[0] - k)[scores.shape[0] - k]
    above = int((scores > cut).sum())
    pos_above = int((pos > cut).sum())
    tied = int((scores == cut).sum())
    pos_tied = int((pos == cut).sum())
    return float((pos_above + (k - above) * pos_tied / tied) / k)


def _ppr_pairs(
    index: NeighbourIndex, u: NDArray[np.int32], v: NDArray[np.int32], damping: float,
    tolerance: float, tick: Callable[[float], None] | None = None, chunk: int = 2048,
) -> NDArray[np.float64]:
    """ppr_u(v) + ppr_v(u) per pair, one push per distinct endpoint.

    ``tick`` gets the share of sources done after every slice of them (sized to
    take about a quarter second), so a cancellation is noticed during a long
    evaluation.
    """
    src = np.concatenate((u, v))
    partner = np.concatenate((v, u)).astype(np.int32)
    pair = np.concatenate((np.arange(u.shape[0]), np.arange(u.shape[0]))).astype(np.int64)
    order = group_order(src, index.n)
    src, partner, pair = src[order], partner[order], pair[order]
    starts = np.flatnonzero(np.r_[True, src[1:] != src[:-1]]) if src.size else np.zeros(0, int)
    ptr = np.r_[starts, src.shape[0]].astype(np.int64)
    sources = src[starts].astype(np.int32)
    scores = np.zeros(u.shape[0])
    s = index.scratch()

    def push(c0: int, count: int) -> None:
        c1 = c0 + count
        K.ppr_pair_scores(index.indptr, index.indices, index.degree, 1.0 - damping, tolerance,
                          sources[c0:c1], ptr[c0 : c1 + 1], partner, pair, scores, s.acc, s.r,
                          s.flag, s.inq, s.queue, s.touched)

    def after(done: int) -> None:
        if tick is not None:
            tick(done / sources.shape[0])

    run_chunked(sources.shape[0], push, after=after, first=min(chunk, 64))
    return scores


def _scored_in_slices(index: NeighbourIndex, u: NDArray[np.int32], v: NDArray[np.int32], method: str,
                     tick: Callable[[float], None] | None) -> NDArray[np.float64]:
    """One score per pair, in slices of about a quarter second (each pair's score is its own)."""
    out = np.zeros(u.shape[0])

    def score(a: int, count: int) -> None:
        out[a:a + count] = _pair_method(index, np.column_stack((u[a:a + count], v[a:a + count])), method)

    def after(done: int) -> None:
        if tick is not None:
            tick(done / max(u.shape[0], 1))

    run_chunked(u.shape[0], score, after=after, first=1024)
    return out


def _sample_non_edges(
    n: int, keys: NDArray[np.int64], count: int, rng: np.random.Generator
) -> tuple[NDArray[np.int32], NDArray[np.int32]]:
    """``count`` uniform unordered pairs u != v that are not tied (with replacement)."""
    free = n * (n - 1) // 2 - keys.shape[0]
    if free <= 0:
        raise InfeasibleRequest("every pair of nodes is already tied: no negatives to sample",
                                field="negatives_per_positive")
    got_u: list[NDArray[np.int64]] = []
    got_v: list[NDArray[np.int64]] = []
    have = 0
    for _ in range(1000):
        batch = max(64, 2 * (count - have))
        a = rng.integers(0, n, batch)
        b = rng.integers(0, n, batch)
        lo, hi = np.minimum(a, b), np.maximum(a, b)
        key = lo * n + hi
        pos = np.minimum(np.searchsorted(keys, key), max(keys.shape[0] - 1, 0))
        ok = (lo != hi) & ((keys[pos] != key) if keys.shape[0] else True)
        got_u.append(lo[ok])
        got_v.append(hi[ok])
        have += int(ok.sum())
        if have >= count:
            break
    else:
        raise InfeasibleRequest("could not sample enough untied pairs",
                                field="negatives_per_positive")
    return (np.concatenate(got_u)[:count].astype(np.int32),
            np.concatenate(got_v)[:count].astype(np.int32))


def _sample_two_hop(
    index: NeighbourIndex, keys: NDArray[np.int64], count: int, rng: np.random.Generator
) -> tuple[NDArray[np.int32], NDArray[np.int32]]:
    """``count`` untied pairs (u, y) joined by a random two-step walk u - z - y in ``index``."""
    n = index.n
    start = np.flatnonzero(index.degree > 0)
    got_u: list[NDArray[np.int64]] = []
    got_v: list[NDArray[np.int64]] = []
    have = 0
    for _ in range(1000):
        if start.size == 0:
            break
        batch = max(64, 2 * (count - have))
        u = start[rng.integers(0, start.size, batch)]
        z = index.indices[index.indptr[u] + (rng.random(batch) * index.degree[u]).astype(np.int64)]
        y = index.indices[index.indptr[z] + (rng.random(batch) * index.degree[z]).astype(np.int64)]
        lo, hi = np.minimum(u, y).astype(np.int64), np.maximum(u, y).astype(np.int64)
        key = lo * n + hi
        pos = np.minimum(np.searchsorted(keys, key), keys.shape[0] - 1)
        ok = (lo != hi) & (keys[pos] != key)
        got_u.append(lo[ok])
        got_v.append(hi[ok])
        have += int(ok.sum())
        if have >= count:
            return (np.concatenate(got_u)[:count].astype(np.int32),
                    np.concatenate(got_v)[:count].astype(np.int32))
    raise InfeasibleRequest("too few untied pairs two steps apart to sample",
                            field="negatives")


def evaluate_link_prediction(
    g: GraphArrays,
    *,
    methods: Sequence[str] = DEFAULT_EVAL_METHODS,
    holdout: float = 0.1,
    random_seed: int = 0,
    negatives_per_positive: int = 1,
    negatives: str = "uniform",
    k: int = 100,
    max_positives: int | None = 10_000,
    damping: float = 0.85,
    tolerance: float = DEFAULT_TOLERANCE,
    progress: Callable[[float], None] | None = None,
) -> dict[str, Any]:
    """Score each method on held-out ties against sampled untied pairs [1]_ [2]_.

    Parameters
    ----------
    g : the graph (directed graphs are judged on their undirected view).
    methods : names from ``recommend.LINK_METHODS``.
    holdout : share of ties hidden, in (0, 1); at least one is hidden.
    random_seed : seeds the hidden set and the negative sample (reproducible).
    negatives_per_positive : untied pairs sampled per hidden tie (>= 1).
    negatives : ``uniform`` (any untied pair, as in the cited protocol) or
        ``two_hop`` (untied pairs joined by a random two-step walk in the
        training graph: hard negatives that share a contact, which separate
        the neighbourhood indices from one another).
    k : for precision at k.
    max_positives : score at most this many hidden ties (a random subset;
        all hidden ties still leave the training graph). None: all of them.
    damping, tolerance : for ``personalized_pagerank`` (see ``recommend``).
    progress : called with the share done after each method (and during the
        personalised PageRank pushes); may raise ``Cancelled``, which propagates.

    Returns
    -------
    dict
        ``methods``: {name: {"auc", "precision_at_k"}}; ``best``: the method
        with the highest AUC (first listed on a tie); ``positives``,
        ``negatives``, ``train_edges``, ``base_rate`` (the precision of a
        random ranking), ``hidden`` (ties removed from training; ``positives``
        is the scored share of them), and the parameters ``holdout``, ``k``,
        ``negatives_per_positive``, ``max_positives``, ``random_seed``.

    Raises
    ------
    InvalidParameter
        Unknown method or out-of-range setting.
    InfeasibleRequest
        Fewer than 2 ties, or no untied pair to sample.

    Notes
    -----
    - A tie is an unordered pair with an arc either way; hiding it removes
      every arc between the two (self-loops stay, they are not ties).
    - ``uniform`` negatives are uniform over untied pairs of the whole graph
      (hidden ties excluded), drawn with replacement. On sparse graphs almost
      none of them shares a contact, so common neighbours, Jaccard,
      Adamic–Adar and resource allocation then get nearly the same AUC;
      ``two_hop`` tells them apart.
    - AUC counts a tie between a positive and a negative as 1/2; precision at
      k is over the scored set only (hidden plus sampled pairs), so it rises
      with fewer negatives per positive; compare methods, not graphs.
    - Personalised PageRank scores a pair by ppr_u(v) + ppr_v(u), one push
      per distinct endpoint: the slowest method by far on large graphs
      (1-3 ms per endpoint on com-DBLP at the default tolerance); the
      ``max_positives`` cap bounds the whole evaluation (AUC's standard
      error is below 0.005 at 10,000 positives whatever the graph size).

    References
    ----------
    .. [1] D. Liben-Nowell, J. Kleinberg (2007). The link-prediction problem for
       social networks. JASIST 58(7), 1019-1031. doi:10.1002/asi.20591
    .. [2] T. Zhou, L. Lu, Y.-C. Zhang (2009). Predicting missing links via
       local information. Eur. Phys. J. B 71, 623-630.

    Examples
    --------
    >>> import numpy as np
    >>> g = from_edges([(0, 1), (0, 2), (0, 3), (1, 2), (1, 3), (2, 3)], n=5)
    >>> r = evaluate_link_prediction(g, methods=["common_neighbours"], holdout=0.2, k=1)
    >>> r["positives"], r["train_edges"]
    (1, 5)
    """
    methods = list(methods)
    for m in methods:
        if m not in LINK_METHODS:
            raise InvalidParameter(
                f"unknown method {m!r}; expected one of {', '.join(LINK_METHODS)}",
                field="methods",
            )
    if not methods:
        raise InvalidParameter("name at least one method", field="methods")
    if not 0.0 < holdout < 1.0:
        raise InvalidParameter("holdout must be in (0, 1)", field="holdout")
    if int(negatives_per_positive) < 1:
        raise InvalidParameter("negatives_per_positive must be at least 1",
                               field="negatives_per_positive")
    if int(k) < 1:
        raise InvalidParameter("k must be at least 1", field="k")
    if negatives not in ("uniform", "two_hop"):
        raise InvalidParameter("negatives must be 'uniform' or 'two_hop'", field="negatives")
    if max_positives is not None and int(max_positives) < 1:
        raise InvalidParameter("max_positives must be at least 1", field="max_positives")
    _check_ppr(damping, tolerance)
    pairs = _Pairs(g)
    if pairs.count < 2:
        raise InfeasibleRequest("need at least 2 ties to hold some out", field="holdout")
    rng = np.random.default_rng(random_seed)
    h = min(pairs.count - 1, max(1, int(round(holdout * pairs.count))))
    hidden = np.sort(rng.choice(pairs.count, size=h, replace=False))
    hide = np.zeros(pairs.count, dtype=bool)
    hide[hidden] = True
    keep = pairs.loop | ~hide[np.maximum(pairs.edge_pair, 0)]
    train = GraphArrays(
        g.n, g.directed, g.src[keep], g.dst[keep], g.weight[keep],
        None if g.probability is None else g.probability[keep],
    )
    index = neighbour_index(train)
    keys = pairs.lo.astype(np.int64) * g.n + pairs.hi
    scored = hidden
    if max_positives is not None and h > int(max_positives):
        scored = np.sort(rng.choice(hidden, size=int(max_positives), replace=False))
    npos = int(scored.shape[0])
    if negatives == "uniform":
        nu, nv = _sample_non_edges(g.n, keys, npos * int(negatives_per_positive), rng)
    else:
        nu, nv = _sample_two_hop(index, keys, npos * int(negatives_per_positive), rng)
    pu, pv = pairs.lo[scored], pairs.hi[scored]
    u, v = np.concatenate((pu, nu)), np.concatenate((pv, nv))
    results: dict[str, dict[str, float]] = {}
    for i, m in enumerate(methods):
        tick = None
        if progress is not None:
            report = progress
            tick = lambda f, i=i: report((i + f) / len(methods))  # noqa: E731
        if m == "personalized_pagerank":
            s = _ppr_pairs(index, u, v, damping, tolerance, tick)
        else:
            s = _scored_in_slices(index, u, v, m, tick)
        results[m] = {
            "auc": auc(s[:npos], s[npos:]),
            "precision_at_k": precision_at_k(s[:npos], s[npos:], k),
        }
        if progress is not None:
            progress((i + 1) / len(methods))
    best = max(methods, key=lambda name: (results[name]["auc"], -methods.index(name)))
    return {
        "methods": results,
        "best": best,
        "positives": npos,
        "negatives": int(nu.shape[0]),
        "hidden": int(h),
        "train_edges": int(train.m),
        "base_rate": float(npos / (npos + nu.shape[0])),
        "holdout": float(holdout),
        "k": int(k),
        "negatives_per_positive": int(negatives_per_positive),
        "negative_sampling": negatives,
        "max_positives": None if max_positives is None else int(max_positives),
        "random_seed": int(random_seed),
    }
