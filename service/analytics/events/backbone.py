"""Keep only the significant ties of a projected graph.

:func:`disparity_filter` tests each weighted tie against the share of its
endpoints' strength it carries (Serrano, Boguna and Vespignani 2009).
:func:`sdsm` goes back to the raw (person, event) table and tests each
pair's co-occurrence count against the stochastic degree sequence model of
Neal (2014), whose attendance probabilities come from the bipartite
configuration model fitted by maximum likelihood (:func:`bicm`).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

import numpy as np
from numpy.typing import ArrayLike, NDArray

from . import _kernels as K
from .._chunks import map_ordered, split_range, thread_count
from ..errors import ComputationFailed, EmptyGraph, InvalidParameter
from .projection import (
    DEFAULT_MAX_PAIR_SLOTS,
    EventTable,
    Projection,
    event_table,
    project_table,
)

__all__ = [
    "CORRECTIONS",
    "Backbone",
    "BicmFit",
    "EmptyBackbone",
    "bicm",
    "disparity_filter",
    "sdsm",
    "sdsm_p_values",
    "adjust_p_values",
]

CORRECTIONS: tuple[str, ...] = ("none", "bonferroni", "fdr_bh")
EXACT_COUNT_LIMIT = 50


class EmptyBackbone(EmptyGraph):
    """No tie is significant at this level, so the backbone would be empty."""

    slug = "empty-backbone"
    title = "Backbone keeps no tie"


@dataclass(frozen=True, eq=False)
class Backbone:
    """The significant ties of a projection and what they keep of it.

    Attributes
    ----------
    graph : the tested projection.
    p_value : float64 per tie of ``graph`` (before correction).
    p_adjusted : after the multiple-testing correction (equal when none).
    keep : bool per tie of ``graph``.
    method, alpha, correction : how the ties were tested.
    """

    graph: Projection
    p_value: NDArray[np.float64]
    p_adjusted: NDArray[np.float64]
    keep: NDArray[np.bool_]
    method: str
    alpha: float
    correction: str

    @property
    def src(self) -> NDArray[np.int32]:
        return self.graph.src[self.keep]

    @property
    def dst(self) -> NDArray[np.int32]:
        return self.graph.dst[self.keep]

    @property
    def weight(self) -> NDArray[np.float64]:
        return self.graph.weight[self.keep]

    @property
    def edges_kept(self) -> int:
        return int(self.keep.sum())

    @property
    def edge_share(self) -> float:
        """Share of the projection's ties kept."""
        return self.edges_kept / max(self.graph.pairs, 1)

    @property
    def weight_share(self) -> float:
        """Share of the projection's total weight kept."""
        total = float(self.graph.weight.sum())
        return float(self.graph.weight[self.keep].sum()) / total if total > 0 else 0.0

    @property
    def people_with_ties(self) -> int:
        """People with at least one tie in the projection."""
        return int(np.union1d(self.graph.src, self.graph.dst).size)

    @property
    def people_left_without_ties(self) -> int:
        """People tied in the projection but not in the backbone."""
        kept = np.union1d(self.src, self.dst).size
        return self.people_with_ties - int(kept)

    @property
    def people_without_ties_share(self) -> float:
        return self.people_left_without_ties / max(self.people_with_ties, 1)


def adjust_p_values(p: ArrayLike, *, correction: str = "none",
                    tests: int | None = None) -> NDArray[np.float64]:
    """Correct p-values for testing many ties at once.

    Parameters
    ----------
    p : array_like of float
    correction : {"none", "bonferroni", "fdr_bh"}
        Bonferroni controls the chance of any false tie; ``"fdr_bh"`` the
        expected share of false ties among those kept [1]_.
    tests : int, optional
        Number of hypotheses, when some were not listed because their p-value
        is 1 (pairs of people who share no event); defaults to ``len(p)``.

    Returns
    -------
    numpy.ndarray of float64, clipped to [0, 1].

    References
    ----------
    .. [1] Y. Benjamini, Y. Hochberg (1995). Controlling the false discovery
       rate: a practical and powerful approach to multiple testing. J. R.
       Stat. Soc. B 57(1), 289-300.

    Examples
    --------
    >>> adjust_p_values([0.01, 0.04, 0.03], correction="fdr_bh").round(3).tolist()
    [0.03, 0.04, 0.04]
    """
    arr = np.asarray(p, dtype=np.float64)
    m = arr.size if tests is None else int(tests)
    if m < arr.size:
        raise InvalidParameter(field="tests", value=m, reason="fewer tests than p-values")
    if correction == "none":
        return arr.copy()
    if correction == "bonferroni":
        return np.minimum(arr * m, 1.0)
    if correction == "fdr_bh":
        order = np.argsort(arr, kind="stable")
        ranked = arr[order] * m / np.arange(1, arr.size + 1)
        ranked = np.minimum.accumulate(ranked[::-1])[::-1]
        out = np.empty_like(arr)
        out[order] = np.minimum(ranked, 1.0)
        return out
    raise InvalidParameter(field="correction", value=correction, choices=list(CORRECTIONS))


def _check_alpha(alpha: float) -> None:
    if not (0.0 < alpha < 1.0):
        raise InvalidParameter(field="alpha", value=alpha, reason="alpha must lie between 0 and 1")


def _finish(graph: Projection, p: NDArray[np.float64], *, method: str, alpha: float,
            correction: str, tests: int | None, forced: NDArray[np.bool_] | None) -> Backbone:
    adj = p if correction == "none" else adjust_p_values(p, correction=correction, tests=tests)
    keep = adj < alpha
    if forced is not None:
        keep |= forced
    if not keep.any():
        raise EmptyBackbone(edges_tested=graph.pairs, edges_kept=0, alpha=alpha,
                            correction=correction, smallest_p_value=float(adj.min()))
    return Backbone(graph=graph, p_value=p, p_adjusted=adj, keep=keep, method=method,
                    alpha=alpha, correction=correction)


def disparity_filter(graph: Projection, *, alpha: float = 0.05,
                     rule: Literal["either", "both"] = "either",
                     degree_one: Literal["other_end", "keep"] = "other_end",
                     correction: str = "none", threads: int | None = None) -> Backbone:
    """Disparity filter backbone of a weighted projection.

    For an endpoint i of degree k_i and strength s_i, the tie's share
    p_ij = w_ij / s_i is tested against shares drawn uniformly at random:
    alpha_ij = (1 - p_ij) ** (k_i - 1) [1]_. A directed arc is tested at its
    source's out-ties and its target's in-ties.

    Parameters
    ----------
    graph : Projection
    alpha : float
        Significance level; ties with (corrected) p-value below it are kept.
    rule : {"either", "both"}
        Keep a tie significant for at least one endpoint (as in the paper),
        or only one significant for both.
    degree_one : {"other_end", "keep"}
        The test is undefined at an endpoint with a single tie. ``"other_end"``
        judges such a tie by its other endpoint alone (a tie between two
        people with no other tie is then dropped); ``"keep"`` keeps every
        tie of a person with a single tie. Convention chosen here.
    correction : {"none", "bonferroni", "fdr_bh"}
        Applied to the ties' p-values, one test per tie.
    threads : int, optional
        Threads testing ties (default :func:`thread_count`); the p-values do not depend on it.

    Returns
    -------
    Backbone
        ``p_value`` is the smaller endpoint p-value for ``"either"``, the
        larger for ``"both"``.

    Raises
    ------
    EmptyBackbone
        No tie is significant.
    InvalidParameter
        alpha outside (0, 1), an unknown rule or correction.

    Notes
    -----
    Linear in the number of ties.

    References
    ----------
    .. [1] M. A. Serrano, M. Boguna, A. Vespignani (2009). Extracting the
       multiscale backbone of complex weighted networks. PNAS 106(16),
       6483-6488.

    Examples
    --------
    >>> from service.analytics.events.projection import project_events
    >>> g = project_events([0, 1, 0, 1, 0, 1, 0, 2, 1, 3, 2, 3],
    ...                    [0, 0, 1, 1, 2, 2, 3, 3, 4, 4, 5, 5])
    >>> b = disparity_filter(g, alpha=0.5)
    >>> list(zip(b.src.tolist(), b.dst.tolist()))
    [(0, 1)]
    """
    _check_alpha(alpha)
    if rule not in ("either", "both"):
        raise InvalidParameter(field="rule", value=rule, choices=["either", "both"])
    if degree_one not in ("other_end", "keep"):
        raise InvalidParameter(field="degree_one", value=degree_one, choices=["other_end", "keep"])
    if graph.strength is not None and graph.degree is not None and not graph.directed:
        st = np.empty((graph.n_people, 4))
        st[:, 0] = st[:, 2] = graph.strength
        st[:, 1] = st[:, 3] = graph.degree
    else:
        st = K.node_stats(graph.src, graph.dst, graph.weight, graph.n_people, graph.directed)
    m = graph.src.shape[0]
    p = np.empty(m, np.float64)
    forced = np.zeros(m, np.bool_)
    # Each tie is tested alone: ranges of ties on different threads give the same p-values.
    parts = split_range(0, m, thread_count(threads) if m >= 1 << 16 else 1)
    map_ordered(K.disparity_p_range, [(a, a + n, graph.src, graph.dst, graph.weight, st, rule == "both",
                                       degree_one == "keep", p, forced) for a, n in parts])
    return _finish(graph, p, method="disparity_filter", alpha=alpha, correction=correction,
                   tests=None, forced=forced if degree_one == "keep" else None)


@dataclass(frozen=True, eq=False)
class BicmFit:
    """Bipartite configuration model fitted to a (person, event) table.

    P(person i attends event k) = x_i y_k / (1 + x_i y_k), with x and y
    chosen so that expected degrees equal observed ones. Saturated people
    (in every event) and events (with every person) have probability 1.

    Attributes
    ----------
    x : float64 per person (inf when saturated, 0 when in no unsaturated event).
    y : float64 per event (likewise).
    active_people, active_events : with at least one row; others have
        probability 0.
    iterations, residual : fixed-point iterations and the largest absolute
        degree error at the end.
    """

    x: NDArray[np.float64]
    y: NDArray[np.float64]
    active_people: NDArray[np.bool_]
    active_events: NDArray[np.bool_]
    iterations: int
    residual: float

    def probability(self, person: ArrayLike, event: ArrayLike) -> NDArray[np.float64]:
        """P(person attends event) for aligned arrays of ids (or broadcastable)."""
        pi = np.asarray(person)
        ek = np.asarray(event)
        p = _link_prob(self.x[pi], self.y[ek])
        return np.where(self.active_people[pi] & self.active_events[ek], p, 0.0)


def _link_prob(xi: NDArray[np.float64], yk: NDArray[np.float64]) -> NDArray[np.float64]:
    """x y / (1 + x y); a saturated side (inf) means certain attendance, 0 means none."""
    with np.errstate(invalid="ignore", over="ignore"):
        prod = xi * yk
        p = prod / (1.0 + prod)
    sure = np.isinf(xi) | np.isinf(yk)
    return np.where(sure, 1.0, np.where((xi == 0) | (yk == 0), 0.0, p))


def _fit_classes(deg_p: NDArray[np.int64], deg_e: NDArray[np.int64], *, tol: float,
                 max_iter: int) -> tuple[NDArray[np.float64], NDArray[np.float64], int, float]:
    """Fixed point on degree classes: nodes of equal degree share their parameter."""
    dp, np_count = np.unique(deg_p, return_counts=True)
    de, ne_count = np.unique(deg_e, return_counts=True)
    total = float((dp * np_count).sum())
    x = dp / np.sqrt(total)
    y = de / np.sqrt(total)
    resid = np.inf
    it = 0
    for it in range(1, max_iter + 1):
        denom_x = (ne_count[None, :] * y[None, :] / (1.0 + x[:, None] * y[None, :])).sum(axis=1)
        x = dp / denom_x
        denom_y = (np_count[:, None] * x[:, None] / (1.0 + x[:, None] * y[None, :])).sum(axis=0)
        y = de / denom_y
        if it % 10 == 0 or it == max_iter:
            P = x[:, None] * y[None, :] / (1.0 + x[:, None] * y[None, :])
            resid = max(float(np.abs((P * ne_count[None, :]).sum(axis=1) - dp).max()),
                        float(np.abs((P * np_count[:, None]).sum(axis=0) - de).max()))
            if resid < tol:
                break
    xs = x[np.searchsorted(dp, deg_p)]
    ys = y[np.searchsorted(de, deg_e)]
    return xs, ys, it, float(resid)


def bicm(person: ArrayLike | EventTable, event: ArrayLike | None = None, *,
         tol: float = 1e-8, max_iter: int = 20_000) -> BicmFit:
    """Fit the bipartite configuration model by maximum likelihood.

    Parameters
    ----------
    person, event : array_like of int, or an :class:`EventTable` as ``person``
    tol : float
        Largest allowed absolute error of an expected degree.
    max_iter : int

    Returns
    -------
    BicmFit

    Raises
    ------
    ComputationFailed
        The iteration did not reach ``tol``.

    Notes
    -----
    The likelihood equations sum_k p_ik = d_i and sum_i p_ik = f_k are solved
    by the fixed-point iteration x_i = d_i / sum_k y_k / (1 + x_i y_k),
    y_k = f_k / sum_i x_i / (1 + x_i y_k) [2]_. People of equal degree share x
    (and events of equal size share y), so each step costs the product of
    the numbers of distinct degrees, not people times events. Saturated
    people and events (probability 1) are set aside first and the rest fitted
    to the remaining degrees.

    References
    ----------
    .. [1] F. Saracco, R. Di Clemente, A. Gabrielli, T. Squartini (2015).
       Randomizing bipartite networks: the case of the World Trade Web.
       Scientific Reports 5, 10595.
    .. [2] N. Vallarano, M. Bruno, E. Marchese, G. Trapani, F. Saracco,
       G. Cimini, M. Zanon, T. Squartini (2021). Fast and scalable likelihood
       maximization for exponential random graph models with local
       constraints. Scientific Reports 11, 15227.

    Examples
    --------
    >>> fit = bicm([0, 0, 1, 2, 3, 3], [0, 1, 0, 1, 2, 1])
    >>> p = fit.probability(np.arange(4)[:, None], np.arange(3)[None, :])
    >>> p.sum(axis=1).round(6).tolist(), p.sum(axis=0).round(6).tolist()
    ([2.0, 1.0, 1.0, 2.0], [2.0, 3.0, 1.0])
    """
    table = person if isinstance(person, EventTable) else event_table(person, event)  # type: ignore[arg-type]
    d = table.person_degree
    f = table.event_size
    x = np.zeros(table.n_people)
    y = np.zeros(table.n_events)
    act_p = d > 0
    act_e = f > 0
    full_p = act_p & (d == int(act_e.sum()))
    full_e = act_e & (f == int(act_p.sum()))
    x[full_p] = np.inf
    y[full_e] = np.inf
    rest_p = act_p & ~full_p
    rest_e = act_e & ~full_e
    # Remove the saturated side's certain attendances from the other side's degrees.
    d_rest = d[rest_p] - int(full_e.sum())
    f_rest = f[rest_e] - int(full_p.sum())
    it, resid = 0, 0.0
    fit_p = d_rest > 0
    fit_e = f_rest > 0
    if fit_p.any() and fit_e.any():
        xs, ys, it, resid = _fit_classes(d_rest[fit_p], f_rest[fit_e], tol=tol, max_iter=max_iter)
        if not resid < tol:
            raise ComputationFailed(model="bipartite configuration model", iterations=it,
                                    residual=resid, tolerance=tol)
        idx_p = np.flatnonzero(rest_p)[fit_p]
        idx_e = np.flatnonzero(rest_e)[fit_e]
        x[idx_p] = xs
        y[idx_e] = ys
    return BicmFit(x=x, y=y, active_people=act_p, active_events=act_e, iterations=it,
                   residual=resid)


def sdsm(person: ArrayLike, event: ArrayLike, *, alpha: float = 0.05, correction: str = "none",
         exact_limit: int = EXACT_COUNT_LIMIT, singletons: Literal["refuse", "skip"] = "refuse",
         n_people: int | None = None, n_events: int | None = None,
         max_pair_slots: int = DEFAULT_MAX_PAIR_SLOTS) -> Backbone:
    """Stochastic degree sequence model backbone of a (person, event) table.

    Each pair's number of shared events c_ij is compared with its
    distribution under random tables that keep, on average, every person's
    and every event's degree [1]_: X_ij = sum_k Bernoulli(p_ik p_jk), a
    Poisson-binomial variable, with p from :func:`bicm` [2]_. A pair is kept
    when P(X_ij >= c_ij) is below ``alpha`` (after the correction).

    Parameters
    ----------
    person, event : array_like of int
    alpha : float
    correction : {"none", "bonferroni", "fdr_bh"}
        Over all n (n - 1) / 2 pairs of people in the table: a pair sharing no
        event has p-value 1 and counts as a test.
    exact_limit : int
        Tails for counts up to this are exact; larger counts use the refined
        normal approximation of Hong (2013) [3]_.
    singletons : {"refuse", "skip"}
        One-participant events still count in the degrees when skipped.
    n_people, n_events : int, optional
    max_pair_slots : int
        Limit on sum over events of n_e (n_e - 1) / 2, as in
        :func:`~service.analytics.events.projection.project_events`.

    Returns
    -------
    Backbone
        On the co-occurrence count projection (no cap on event size: large
        events are what the null model accounts for).

    Raises
    ------
    EmptyBackbone
        No pair is significant.
    EmptyProjection, SingleParticipantEvent, ProjectionTooLarge
        As for :func:`~service.analytics.events.projection.project_events`; the pair
        work counts every event, however large.
    ComputationFailed
        The model fit did not converge.

    Notes
    -----
    Only the upper tail is tested (ties more frequent than chance); Neal's
    lower tail, for signed backbones, is not. People of equal degree have
    equal attendance probabilities, and events of equal size too, so the
    tail is computed once per (degree, degree, count) triple and per event
    size group: exactly by a dynamic programme over the size groups,
    O(groups * c^2) per triple, for counts up to ``exact_limit`` (default 50);
    beyond, the normal approximation with skewness correction, which is
    close when counts and their means are in the tens or more (within 0.01
    in the tests) but can be off by several hundredths at counts of a few.

    References
    ----------
    .. [1] Z. P. Neal (2014). The backbone of bipartite projections:
       inferring relationships from co-authorship, co-sponsorship,
       co-attendance and other co-behaviors. Social Networks 39, 84-97.
    .. [2] Z. P. Neal, R. Domagalski, B. Sagan (2021). Comparing alternatives
       to the fixed degree sequence model for extracting the backbone of
       bipartite projections. Scientific Reports 11, 23929.
    .. [3] Y. Hong (2013). On computing the distribution function for the
       Poisson binomial distribution. Computational Statistics and Data
       Analysis 59, 41-51.

    Examples
    --------
    People 0 and 1 meet alone four times; the others meet in threes:

    >>> groups = [(0, 1)] * 4 + [(2, 3, 4), (3, 4, 5), (4, 5, 6), (5, 6, 7),
    ...                          (6, 7, 2), (7, 2, 3), (0, 4, 6), (1, 3, 5)]
    >>> person = [p for g in groups for p in g]
    >>> event = [e for e, g in enumerate(groups) for _ in g]
    >>> b = sdsm(person, event, alpha=0.16)
    >>> list(zip(b.src.tolist(), b.dst.tolist())), round(float(b.p_value[0]), 3)
    ([(0, 1)], 0.149)
    """
    _check_alpha(alpha)
    if correction not in CORRECTIONS:
        raise InvalidParameter(field="correction", value=correction, choices=list(CORRECTIONS))
    table = event_table(person, event, n_people=n_people, n_events=n_events)
    graph = project_table(table, method="count", max_event_size=None, singletons=singletons,
                          max_pair_slots=max_pair_slots)
    fit = bicm(table)
    p = sdsm_p_values(table, fit, graph.src, graph.dst, graph.shared.astype(np.int64),
                      exact_limit=exact_limit)
    active = int((table.person_degree > 0).sum())
    return _finish(graph, p, method="sdsm", alpha=alpha, correction=correction,
                   tests=active * (active - 1) // 2, forced=None)


def sdsm_p_values(table: EventTable, fit: BicmFit, src: NDArray[np.int32], dst: NDArray[np.int32],
                  count: NDArray[np.int64], *, exact_limit: int = EXACT_COUNT_LIMIT
                  ) -> NDArray[np.float64]:
    """P(X_ij >= count) under the fitted model, for aligned pairs (see :func:`sdsm`)."""
    f = table.event_size
    act_e = f > 0
    # Events of one size share y, so they form one binomial group.
    y_groups, mult = np.unique(fit.y[act_e], return_counts=True)
    x_classes, person_class = np.unique(fit.x, return_inverse=True)
    qa = _link_prob(x_classes[:, None], y_groups[None, :])
    a = person_class[src]
    b = person_class[dst]
    n_cls = len(x_classes)
    top = int(count.max(initial=0)) + 1
    key = (np.minimum(a, b).astype(np.int64) * n_cls + np.maximum(a, b)) * top + count
    space = n_cls * n_cls * top
    if space <= 8 * key.size + 1024:
        # Few distinct (class, class, count) triples: index them without sorting.
        seen = np.zeros(space, bool)
        seen[key] = True
        uniq = np.flatnonzero(seen)
        slot = np.zeros(space, np.int64)
        slot[uniq] = np.arange(uniq.size)
        inv = slot[key]
    else:
        uniq, inv = np.unique(key, return_inverse=True)
    c_u = uniq % top
    ab = uniq // top
    tails = K.grouped_tails(np.ascontiguousarray(qa), mult.astype(np.int64),
                            (ab // n_cls).astype(np.int64), (ab % n_cls).astype(np.int64),
                            c_u.astype(np.int64), int(exact_limit))
    return np.asarray(tails[inv], dtype=np.float64)
