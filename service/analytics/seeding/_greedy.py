"""Lazy greedy over a spread oracle (CELF) and the baseline seed lists.

Private to :mod:`service.analytics.seeding.shortlists`, which re-exports
:func:`celf_seeds`, :func:`degree_discount_seeds` and :func:`top_score_seeds`.
"""

from __future__ import annotations

import heapq
import math
import time
from collections.abc import Callable, Sequence

import numpy as np
from numpy.typing import NDArray

from . import _rr_kernels as K
from ._cover import close_full_groups
from ._reasons import facts_from, reasons
from ._results import Progress, ReachEstimate, SeedChoice, Shortlist
from .rules import SeedRules
from ..errors import InvalidParameter
from ..graph import DiffusionGraph, GraphArrays, arcs, csr

__all__ = ["celf_seeds", "degree_discount_seeds", "top_score_seeds"]


def celf_seeds(
    spread: Callable[[Sequence[int]], float],
    rules: SeedRules,
    *,
    progress: Progress | None = None,
    degrees: NDArray[np.float64] | None = None,
    communities: NDArray[np.integer] | None = None,
) -> Shortlist:
    """Lazy greedy seed selection over any spread oracle (CELF).

    Marginal gains of a monotone submodular function only shrink as the set
    grows, so a node whose stale gain still tops the queue after being
    re-evaluated is the greedy choice [1]_. Under a cost budget both
    benefit/cost greedy and unit-cost greedy run and the better set (by the
    oracle) is returned [1]_.

    Parameters
    ----------
    spread : ``spread(seeds) -> expected reach``; exact (enumeration), or a
        Monte Carlo / RR estimate (then the guarantee holds only approximately).
    rules : the contact rules, built for the oracle's ``n`` people.
    progress, communities :
        as in :func:`~service.analytics.seeding.shortlists.imm_seeds`.
    degrees : optional degrees for tie-breaking and the reasons' degree rank.

    Returns
    -------
    Shortlist
        The reach curve and ``expected_reach`` are the oracle's values.

    Raises
    ------
    InvalidParameter
        ``degrees`` of the wrong length.

    Notes
    -----
    Oracle calls are cached by set, so unit and ratio greedy share them.
    The guarantee for an exact oracle is 1 - 1/e (count budget, Kempe et al.
    2003), 1/2 (segment caps) or 0.405 (cost budget).

    References
    ----------
    .. [1] J. Leskovec, A. Krause, C. Guestrin, C. Faloutsos, J. VanBriesen,
       N. Glance (2007). Cost-effective outbreak detection in networks. KDD '07.

    Examples
    --------
    >>> cover = {0: {0, 1, 2}, 1: {1}, 2: {2, 3}, 3: {3}}
    >>> f = lambda s: float(len(set().union(*(cover[v] for v in s))))
    >>> from service.analytics.seeding.rules import SeedRules
    >>> celf_seeds(f, SeedRules.build(4, budget=2)).nodes
    (0, 2)
    """
    t_all = time.perf_counter()
    n = rules.n
    rules = rules.with_tiebreak(np.zeros(n) if degrees is None else degrees)
    cache: dict[frozenset[int], float] = {}

    def f(s: Sequence[int]) -> float:
        key = frozenset(s)
        if key not in cache:
            cache[key] = float(spread(list(s))) if s else 0.0
        return cache[key]

    must = list(rules.must)
    base = f(must)
    cand = np.flatnonzero(rules.candidates)
    first: dict[int, float] = {}
    for i, v in enumerate(cand.tolist()):
        first[v] = f(must + [v]) - base
        if progress is not None:  # one spread estimate per candidate: a cancel point after each
            progress(0.5 * i / max(len(cand), 1), "evaluating single seeds")
    two = rules.cost_left is not None
    runs = [_lazy(f, rules, first, base, ratio=False, progress=progress,
                  span=(0.5, 0.75 if two else 1.0))]
    if two:
        runs.append(_lazy(f, rules, first, base, ratio=True, progress=progress, span=(0.75, 1.0)))
    picked, gains, value = max(runs, key=lambda r: r[2])
    must_gains = [f(must[: i + 1]) - f(must[:i]) for i in range(len(must))]
    seeds = must + picked
    all_gains = must_gains + gains
    alone = [f([v]) for v in seeds]
    # Without must-include people the first pass already holds every single
    # seed's reach; otherwise only the chosen seeds' own reach is known.
    best_alone = max(list(first.values()) + alone) if not must else max(alone, default=0.0)
    facts = facts_from(seeds, all_gains, alone, best_alone, rules, communities=communities)
    texts = reasons(facts, n=n)
    curve = np.cumsum(np.asarray(all_gains, dtype=np.float64))
    mset = set(must)
    choices = tuple(SeedChoice(int(v), float(g), float(c), t, int(v) in mset, fct)
                    for v, g, c, t, fct in zip(seeds, all_gains, curve, texts, facts))
    promise = rules.guarantee()
    return Shortlist(
        method="celf",
        seeds=choices,
        reach_curve=curve,
        reach_curve_source="the spread oracle's value of each prefix",
        expected_reach=ReachEstimate(value, float("nan"), 0, "oracle"),
        guarantee={
            "method": "CELF lazy greedy (Leskovec et al. 2007)",
            "approximation": promise.approximation,
            "approximation_formula": promise.formula,
            "probability": None,
            "certified_ratio": None,
            "notes": list(promise.notes) + [
                "holds for an exact spread oracle; with a Monte Carlo oracle only up to its "
                "sampling error"],
        },
        theta=None,
        samples=len(cache),
        timings={"total": time.perf_counter() - t_all},
        details={"oracle_calls": len(cache), "greedy": "ratio" if len(runs) > 1 and
                 runs[1][2] > runs[0][2] else "unit"},
    )


def _lazy(f: Callable[[Sequence[int]], float], rules: SeedRules, first: dict[int, float],
          base: float, *, ratio: bool, progress: Progress | None, span: tuple[float, float]
          ) -> tuple[list[int], list[float], float]:
    costs = rules.costs
    tb = rules.tiebreak

    def key(v: int, g: float) -> float:
        if not ratio or costs is None:
            return g
        return math.inf if costs[v] <= 0 else g / float(costs[v])

    heap = [(-key(v, g), -float(tb[v]), v, 0, g) for v, g in first.items()]
    heapq.heapify(heap)
    chosen = list(rules.must)
    picked: list[int] = []
    gains: list[float] = []
    cur = base
    cost_left = math.inf if rules.cost_left is None else rules.cost_left
    used = None if rules.caps_left is None else np.zeros_like(rules.caps_left)
    places = rules.free_places
    while heap and len(picked) < places:
        _, _, v, last, g = heapq.heappop(heap)
        if costs is not None and costs[v] > cost_left:
            continue  # the budget only shrinks: it never fits again
        if used is not None and rules.group is not None and rules.caps_left is not None:
            grp = int(rules.group[v])
            if used[grp] >= rules.caps_left[grp]:
                continue
        if last != len(picked):
            g = f(chosen + [v]) - cur
            heapq.heappush(heap, (-key(v, g), -float(tb[v]), v, len(picked), g))
            if progress is not None:  # each re-evaluation is a spread estimate: a cancel point
                progress(span[0] + (span[1] - span[0]) * len(picked) / max(places, 1),
                         "choosing seeds (lazy greedy)")
            continue
        chosen.append(v)
        picked.append(v)
        gains.append(g)
        cur += g
        if costs is not None:
            cost_left -= float(costs[v])
        if used is not None and rules.group is not None:
            used[int(rules.group[v])] += 1
        if progress is not None:
            progress(span[0] + (span[1] - span[0]) * len(picked) / max(places, 1),
                     "choosing seeds (lazy greedy)")
    return picked, gains, f(chosen)


# ---------------------------------------------------------------- baselines

def _neighbours(g: DiffusionGraph | GraphArrays) -> tuple[NDArray[np.int64], NDArray[np.int32]]:
    if isinstance(g, DiffusionGraph):
        return np.asarray(g.out_indptr, np.int64), np.asarray(g.out_indices, np.int32)
    if isinstance(g, GraphArrays):
        a = arcs(g)
        c = csr(a.n, a.src, a.dst, np.ones(a.src.shape[0]))
        return c.indptr, c.indices
    raise InvalidParameter("expected a DiffusionGraph or GraphArrays", field="graph")


def _pick(scores_at: Callable[[], NDArray[np.float64]], rules: SeedRules,
          on_pick: Callable[[int], None]) -> list[int]:
    """Highest current score first, under the rules (must-include first)."""
    seeds: list[int] = []
    for v in rules.must:
        seeds.append(v)
        on_pick(v)
    avail = rules.candidates.copy()
    close_full_groups(avail, rules)
    used = None if rules.caps_left is None else np.zeros_like(rules.caps_left)
    cost_left = math.inf if rules.cost_left is None else rules.cost_left
    costs = rules.costs if rules.costs is not None else np.empty(0)
    places = rules.free_places
    while len(seeds) - len(rules.must) < places:
        s = scores_at()
        v = int(K.best_candidate(np.where(np.isnan(s), -1e300, s), avail, rules.tiebreak,
                                 costs, False, cost_left))
        if v < 0:
            break
        seeds.append(v)
        avail[v] = False
        on_pick(v)
        if rules.costs is not None:
            cost_left -= float(rules.costs[v])
        if used is not None and rules.group is not None and rules.caps_left is not None:
            grp = int(rules.group[v])
            used[grp] += 1
            if used[grp] >= rules.caps_left[grp]:
                avail[rules.group == grp] = False
    return seeds


def _baseline(method: str, seeds: list[int], texts: list[str], rules: SeedRules,
              t0: float, note: str, scores: list[float]) -> Shortlist:
    nan = float("nan")
    mset = set(rules.must)
    choices = tuple(SeedChoice(int(v), nan, nan, t, int(v) in mset) for v, t in zip(seeds, texts))
    return Shortlist(
        method=method, seeds=choices, reach_curve=np.full(len(seeds), nan),
        reach_curve_source="not estimated (see seeding.evaluate_shortlist)",
        expected_reach=None,
        guarantee={"method": note, "approximation": None, "approximation_formula": "none",
                   "probability": None, "certified_ratio": None,
                   "notes": ["heuristic baseline: no guarantee"]},
        timings={"total": time.perf_counter() - t0}, details={"score_at_pick": scores})


def degree_discount_seeds(
    g: DiffusionGraph | GraphArrays,
    rules: SeedRules,
    *,
    p: float = 0.01,
    communities: NDArray[np.integer] | None = None,
) -> Shortlist:
    """Degree discount heuristic for uniform IC probability ``p``.

    Start with dd_v = d_v, t_v = 0; after each pick u, for each neighbour v
    of u: t_v += 1 and dd_v = d_v - 2 t_v - (d_v - t_v) t_v p [1]_; pick the
    largest dd next.

    Parameters
    ----------
    g : a DiffusionGraph (its out-neighbours) or GraphArrays (undirected:
        neighbours; directed: out-neighbours).
    rules, communities : as in
        :func:`~service.analytics.seeding.shortlists.imm_seeds` (a cost budget:
        affordable people only, in score order).
    p : the uniform propagation probability the discount assumes.

    Returns
    -------
    Shortlist
        Without reach figures (NaN); see :func:`~service.analytics.seeding.shortlists.evaluate_shortlist`.

    Raises
    ------
    InvalidParameter
        ``p`` outside [0, 1]; rules built for another graph size.

    Notes
    -----
    The paper treats undirected graphs. On directed graphs we take d_v as
    out-degree and discount the out-neighbours of each pick (the people it
    could activate), a common adaptation. Must-include people count as picks.

    References
    ----------
    .. [1] W. Chen, Y. Wang, S. Yang (2009). Efficient influence
       maximization in social networks. KDD '09.

    Examples
    --------
    >>> import numpy as np
    >>> g = GraphArrays(4, False, np.array([0, 0, 0, 1], np.int32),
    ...                 np.array([1, 2, 3, 2], np.int32), np.ones(4))
    >>> from service.analytics.seeding.rules import SeedRules
    >>> degree_discount_seeds(g, SeedRules.build(4, budget=2), p=0.1).nodes
    (0, 1)
    """
    t0 = time.perf_counter()
    if not (isinstance(p, (int, float)) and 0 <= p <= 1):
        raise InvalidParameter("p must be in [0, 1]", field="p")
    indptr, indices = _neighbours(g)
    n = indptr.shape[0] - 1
    d = np.diff(indptr).astype(np.float64)
    rules.check_size(n)
    rules = rules.with_tiebreak(d)
    dd = d.copy()
    t = np.zeros(n)
    chosen = np.zeros(n, dtype=bool)
    at_pick: dict[int, tuple[float, int]] = {}

    def on_pick(v: int) -> None:
        at_pick[v] = (float(dd[v]), int(t[v]))
        chosen[v] = True
        nb = indices[indptr[v]:indptr[v + 1]]
        nb = nb[(nb != v) & ~chosen[nb]]
        np.add.at(t, nb, 1.0)
        dd[nb] = d[nb] - 2 * t[nb] - (d[nb] - t[nb]) * t[nb] * p

    seeds = _pick(lambda: dd, rules, on_pick)
    facts = facts_from(seeds, [math.nan] * len(seeds), [math.nan] * len(seeds), math.nan, rules,
                       communities=communities)
    texts = []
    for v, fct in zip(seeds, facts):
        score, tv = at_pick[v]
        extra = "; ".join(x for x in reasons([fct], n=n)[0].split("; ")
                          if not x.startswith(("reaches", "adds")))
        texts.append(f"degree discount score {score:.3g} (degree {int(d[v])}, {tv} "
                     f"neighbour{'s' if tv != 1 else ''} already chosen); {extra}")
    return _baseline("degree_discount", seeds, texts, rules, t0,
                     "degree discount (Chen, Wang, Yang 2009)",
                     [at_pick[v][0] for v in seeds])


def top_score_seeds(
    scores: NDArray[np.float64],
    rules: SeedRules,
    *,
    score_name: str = "score",
    communities: NDArray[np.integer] | None = None,
) -> Shortlist:
    """The highest-scoring people (degree, PageRank, ...) under the contact rules.

    Parameters
    ----------
    scores : one value per node (NaN: ranked last).
    rules, communities : as in
        :func:`~service.analytics.seeding.shortlists.imm_seeds`.
    score_name : used in the reasons, e.g. ``"PageRank"``.

    Returns
    -------
    Shortlist
        Without reach figures (NaN); see :func:`~service.analytics.seeding.shortlists.evaluate_shortlist`.

    Raises
    ------
    InvalidParameter
        ``scores`` not one value per node; rules built for another graph size.

    Notes
    -----
    A baseline shown beside the guaranteed methods: it ignores overlap
    between the people the seeds reach.

    Examples
    --------
    >>> import numpy as np
    >>> from service.analytics.seeding.rules import SeedRules
    >>> top_score_seeds(np.array([0.1, 0.4, 0.2, 0.3]), SeedRules.build(4, budget=2)).nodes
    (1, 3)
    """
    t0 = time.perf_counter()
    s = np.asarray(scores, dtype=np.float64)
    if s.ndim != 1:
        raise InvalidParameter("scores must be one value per node", field="scores")
    n = s.shape[0]
    rules.check_size(n)
    rules = rules.with_tiebreak(np.zeros(n))
    seeds = _pick(lambda: s, rules, lambda v: None)
    srt = np.sort(np.where(np.isnan(s), -np.inf, s))
    facts = facts_from(seeds, [math.nan] * len(seeds), [math.nan] * len(seeds), math.nan, rules,
                       communities=communities, degrees=np.where(np.isnan(s), -np.inf, s))
    texts = []
    for v, fct in zip(seeds, facts):
        rank = 1 + int(n - np.searchsorted(srt, s[v] if not np.isnan(s[v]) else -np.inf,
                                            side="right"))
        extra = [x for x in reasons([fct], n=n)[0].split("; ")
                 if not x.startswith(("reaches", "adds", "degree rank"))]
        texts.append("; ".join([f"{score_name} {s[v]:.4g}, rank {rank:,} of {n:,}"] + extra))
    return _baseline(f"top_{score_name}", seeds, texts, rules, t0, f"top {score_name}",
                     [float(s[v]) for v in seeds])

