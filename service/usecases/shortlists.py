"""Shortlist: whom to contact first, under the campaign's contact rules, with a guarantee.

The seeds are chosen by one method of :mod:`service.analytics.seeding.shortlists`
(``imm`` by default, ``opim``, ``celf``, or a baseline heuristic) under the
shared diffusion settings
(:class:`~service.usecases.diffusion_settings.DiffusionSettings`). Then,
for the chosen list and for each baseline list (same rules):

- the reach-versus-budget curve and each seed's marginal gain come from one
  collection of fresh reverse-reachable sets drawn after every list was fixed
  (``seeding.evaluate_shortlist``: unbiased, and the same sets for every list,
  so the curves compare);
- every list is simulated on the same campaigns (``analytics.paired``: the
  same live-edge worlds for every list, common random numbers) until each
  paired difference with the chosen list is within 1% of its reach or
  ``forecast_max_runs`` campaigns have run; ``comparisons`` give each
  difference with its t interval and a verdict in plain words;
- never worse: if a baseline reaches clearly more than the chosen list (the
  whole interval of the difference above zero), that baseline's list is
  returned (``method_used``, ``method_note``, ``replaced``);
- ``expected_reach`` is a forward Monte Carlo forecast
  (``forecasts.forecast``) on those same campaigns, so its mean is the
  comparison's, and a ``forecast`` job of the same seeds with the same
  ``random_seed`` and ``simulations`` gives the same figure.

Contact rules (:class:`~service.usecases.contact_rules.ContactRules`). Nobody
without contact consent
(:meth:`~service.analytics.graph.NodeAttributes.contactable`) and nobody in
``exclude`` is ever a seed; ``must_include`` people are placed first;
``max_per_segment`` caps the seeds of each segment (an integer caps every
segment, people without a segment forming one more group; a mapping caps the
segments it names); ``budget`` counts seeds, ``cost_budget`` sums the node
``cost`` (people without a cost are never chosen); ``target_segment`` and
``weights: "value"`` make only the target audience's reach count. They are
resolved once against the version into the analytics'
:class:`~service.analytics.seeding.rules.SeedRules`, which every method takes.

Checks. Ranges and "exactly one of budget / cost_budget" are checked when the
request is parsed (:class:`~service.usecases.shortlist_params.ShortlistParams`).
What needs the version is checked by :func:`prepare`, when the shortlist is
built and, through :func:`precheck`, when the job is created for versions of at
most :data:`PRECHECK_MAX_EDGES` edges: unknown ids are :class:`UnknownNode`
(field ``must_include`` or ``exclude``); rules that cannot be met (budget above
the eligible population, caps, a must-include person without consent, unknown
segment labels, a cost budget on a version without costs) are
:class:`InfeasibleRequest` naming the rule in ``field``; CELF above
:data:`CELF_MAX_WORK` is :class:`InvalidParameter` (``field="method"``).

The rules are resolved in :mod:`.contact_rules` and the answer document is
written in :mod:`._shortlist_result`.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager
from typing import TYPE_CHECKING, Any

import numpy as np
from numpy.typing import NDArray

from service.analytics._chunks import thread_count
from service.usecases.loading import LoadedVersion

from ._shortlist_result import result_document
from .contact_rules import ContactRules, ResolvedRules, resolve_rules
from .shortlist_params import (
    BASELINES,
    CELF_MAX_WORK,
    CELF_RUNS,
    COMMUNITY_MAX_EDGES,
    PRECHECK_MAX_EDGES,
    RELATIVE_PRECISION,
    ShortlistParams,
)

if TYPE_CHECKING:
    from service.analytics.diffusion.forecasts import ForecastResult
    from service.analytics.diffusion.paired import PairedComparison
    from service.analytics.graph import DiffusionGraph, GraphArrays
    from service.analytics.seeding.shortlists import Shortlist

__all__ = [
    "ContactRules",
    "Progress",
    "ResolvedRules",
    "ShortlistParams",
    "build_shortlist",
    "precheck",
    "prepare",
]

Progress = Callable[[float, "str | None"], None]


def prepare(
    params: ShortlistParams, version: LoadedVersion, *, check_settings: bool = False
) -> ResolvedRules:
    """Resolve ids and rules against ``version``; raise the 422 errors naming the rule.

    ``check_settings`` also checks the diffusion settings against the version
    without building the diffusion graph (at job creation)."""
    if check_settings:
        params.check_version(version)
    prep = resolve_rules(ContactRules.from_params(params), version)
    if params.method == "celf":
        _celf_limit(params, prep.rules.eligible)
    return prep


def precheck(params: ShortlistParams, load: Callable[[], LoadedVersion], *, edges: int) -> None:
    """The checks of :func:`prepare` at job creation, for versions of at most PRECHECK_MAX_EDGES edges."""
    if edges <= PRECHECK_MAX_EDGES:
        prepare(params, load(), check_settings=True)


def build_shortlist(
    version: LoadedVersion, params: ShortlistParams, *, progress: Progress
) -> dict[str, Any]:
    """The shortlist for ``params`` on ``version``: the answer document (see ShortlistResult).

    ``progress(fraction, message)`` is called throughout and may raise ``Cancelled``."""
    clock = _Clock()
    prep = prepare(params, version)
    dg = params.diffusion_graph(version)
    communities = _communities(params, version.graph)
    clock.lap("preparation")
    with _named_nodes(version.ids):
        chosen = _choose(
            params.method, params, version, dg, prep, communities, _span(progress, 0.0, 0.55)
        )
        clock.lap("choice")
        names = [b for b in params.baselines if b != params.method]
        base: dict[str, Shortlist] = {}
        for i, b in enumerate(names):
            step = _span(
                progress, 0.55 + 0.05 * i / len(names), 0.55 + 0.05 * (i + 1) / len(names)
            )
            step(0.0, f"baseline {b}")  # also where a cancellation is noticed
            base[b] = _choose(b, params, version, dg, prep, communities, step)
        clock.lap("baselines")
    evaluated = _evaluate(
        params, dg, prep, {params.method: chosen, **base}, _span(progress, 0.6, 0.7)
    )
    clock.lap("evaluation")
    cmp = _compare(params, dg, prep, evaluated, _span(progress, 0.7, 0.85))
    used = _never_worse(params.method, cmp)
    clock.lap("paired_comparison")
    runs = cmp.simulations if cmp is not None else params.forecast_runs
    fc = _forecasts(params, version, dg, prep, evaluated, runs, _span(progress, 0.85, 1.0))
    clock.lap("forward_monte_carlo")
    doc = result_document(params, version, prep, chosen, evaluated, fc, cmp, used)
    doc["timings"] = {"method": doc["timings"], **clock.laps, "total": clock.total()}
    doc["threads"] = thread_count()  # what RR sampling and simulations ran on (the worker's setting)
    return doc


class _Clock:
    """Seconds spent in each step of the task."""

    def __init__(self) -> None:
        self.start = self.last = time.perf_counter()
        self.laps: dict[str, float] = {}

    def lap(self, name: str) -> None:
        now = time.perf_counter()
        self.laps[name] = now - self.last
        self.last = now

    def total(self) -> float:
        return time.perf_counter() - self.start


# ------------------------------------------------------------------ choosing


def _celf_limit(params: ShortlistParams, eligible: NDArray[np.bool_]) -> None:
    from service.analytics.errors import InvalidParameter

    runs = params.celf_runs or CELF_RUNS
    work = int(eligible.sum()) * runs
    if work > CELF_MAX_WORK:
        raise InvalidParameter(
            f"celf would run about {work:,} simulations in its first pass alone ({int(eligible.sum()):,} "
            f"candidates x {runs} runs), above the limit of {CELF_MAX_WORK:,}; use method 'imm' "
            "(or 'opim'), which scales to large graphs with the same guarantee",
            field="method",
            limit=CELF_MAX_WORK,
        )


def _choose(
    method: str,
    params: ShortlistParams,
    v: LoadedVersion,
    dg: DiffusionGraph,
    prep: ResolvedRules,
    communities: NDArray[np.int32] | None,
    progress: Callable[[float, str], None] | None,
) -> Shortlist:
    from service.analytics.seeding import shortlists as seeding

    rules = prep.rules
    if method in ("imm", "opim"):
        common: dict[str, Any] = dict(
            epsilon=params.epsilon,
            random_seed=params.random_seed,
            weights=prep.weights,
            rounds=params.rounds,
            progress=progress,
            forecast_runs=0,
            communities=communities,
        )
        if method == "imm":
            return seeding.imm_seeds(
                dg, rules, l=params.l, max_rr_sets=params.max_samples, **common
            )
        return seeding.opim_seeds(
            dg,
            rules,
            target_ratio=params.target_ratio,
            max_samples=params.max_samples,
            time_limit=params.time_limit,
            **common,
        )
    if method == "celf":
        from service.analytics.diffusion.cascades import estimate_spread

        _celf_limit(params, rules.eligible)

        def spread(seeds: Sequence[int]) -> float:
            # One fixed stream for every call: the oracle is a fixed function of the set.
            return float(
                estimate_spread(
                    dg,
                    list(seeds),
                    runs=params.celf_runs or CELF_RUNS,
                    rounds=params.rounds,
                    random_seed=params.random_seed,
                    weights=prep.weights,
                ).mean
            )

        return seeding.celf_seeds(
            spread,
            rules,
            progress=progress,
            degrees=np.diff(dg.out_indptr).astype(np.float64),
            communities=communities,
        )
    if method == "degree_discount":
        pr = params.probability
        # The heuristic assumes one uniform p; otherwise we give it the mean arc probability.
        p = (
            pr.p
            if pr.scheme == "uniform" and pr.p is not None
            else float(np.mean(dg.out_prob))
            if dg.out_prob.size
            else 0.0
        )
        return seeding.degree_discount_seeds(
            dg, rules, p=min(max(p, 0.0), 1.0), communities=communities
        )
    scores, name = _scores(method, v.graph, params.random_seed, progress)
    return seeding.top_score_seeds(scores, rules, score_name=name, communities=communities)


def _scores(
    method: str, g: GraphArrays, random_seed: int, progress: Callable[[float, str], None] | None
) -> tuple[NDArray[np.float64], str]:
    from service.analytics.structure import centrality
    from service.analytics.graph import GraphArrays as GA

    if method == "top_degree":
        return centrality.degree(g, mode="out"), "degree"
    if method == "top_pagerank":
        # Influence flows along arcs u -> v, so on a directed graph rank who points at
        # well-placed people: PageRank of the reversed graph.
        rg = GA(g.n, True, g.dst, g.src, g.weight, g.probability) if g.directed else g
        return centrality.pagerank(rg), "pagerank"
    from service.analytics.structure.paths import betweenness

    values, _ = betweenness(
        g, method="auto", epsilon=0.05, delta=0.1, random_seed=random_seed, progress=progress
    )
    return values, "betweenness"


def _communities(params: ShortlistParams, g: GraphArrays) -> NDArray[np.int32] | None:
    if not params.explain_communities or g.m == 0 or g.m > COMMUNITY_MAX_EDGES:
        return None
    from service.analytics.structure.communities import leiden

    return leiden(g, random_seed=params.random_seed)[0]


# ------------------------------------------------------------------ evaluating


def _evaluate(
    params: ShortlistParams,
    dg: DiffusionGraph,
    prep: ResolvedRules,
    lists: dict[str, Shortlist],
    progress: Callable[[float, str], None],
) -> dict[str, Shortlist]:
    """Every list's reach curve on the same fresh RR sets (drawn after all lists were fixed)."""
    from service.analytics.seeding.shortlists import evaluate_shortlist

    out = {}
    for i, (name, sl) in enumerate(lists.items()):
        if not sl.seeds:
            out[name] = sl
            continue
        out[name] = evaluate_shortlist(
            dg,
            sl,
            samples=params.evaluation_samples,
            random_seed=params.random_seed,
            weights=prep.weights,
            rounds=params.rounds,
            progress=_span(progress, i / len(lists), (i + 1) / len(lists)),
            rules=prep.rules,
        )
    return out


def _compare(
    params: ShortlistParams,
    dg: DiffusionGraph,
    prep: ResolvedRules,
    lists: dict[str, Shortlist],
    progress: Callable[[float, str], None],
) -> PairedComparison | None:
    """Every list on the same simulated campaigns, until each paired difference with the
    chosen list is within RELATIVE_PRECISION of its reach (or the simulation cap)."""
    from service.analytics.diffusion.paired import compare_reach

    sets = {name: list(sl.nodes) for name, sl in lists.items() if sl.seeds}
    if params.method not in sets:
        return None
    return compare_reach(
        dg,
        sets,
        reference=params.method,
        min_simulations=params.forecast_runs,
        max_simulations=max(params.forecast_runs, params.forecast_max_runs),
        relative_precision=RELATIVE_PRECISION,
        confidence=params.confidence,
        rounds=params.rounds,
        random_seed=params.random_seed,
        weights=prep.weights,
        progress=progress,
    )


def _never_worse(method: str, cmp: PairedComparison | None) -> str:
    """The list to return: the chosen one, unless a baseline reached clearly more on the same
    campaigns (the whole interval of the difference below zero); then the best such baseline.
    A baseline asked for as the method is returned as asked (the comparisons show how it did)."""
    if cmp is None or method in BASELINES:
        return method
    better = [name for name, d in cmp.differences.items() if d.ci_high < 0]
    if not better:
        return method
    return max(better, key=lambda name: cmp.reach[name].mean)


def _forecasts(
    params: ShortlistParams,
    v: LoadedVersion,
    dg: DiffusionGraph,
    prep: ResolvedRules,
    lists: dict[str, Shortlist],
    simulations: int,
    progress: Callable[[float, str], None],
) -> dict[str, ForecastResult]:
    """Forward Monte Carlo of every list on the campaigns of the paired comparison (the same
    worlds and number), so each list's mean reach is the comparison's."""
    from service.analytics.diffusion.forecasts import forecast

    out = {}
    for i, (name, sl) in enumerate(lists.items()):
        if not sl.seeds:
            continue
        attrs = v.attrs
        out[name] = forecast(
            dg,
            {"shortlist": list(sl.nodes)},
            simulations=simulations,
            min_simulations=simulations,
            confidence=params.confidence,
            rounds=params.rounds,
            random_seed=params.random_seed,
            segments=attrs.segment if attrs.segment_labels else None,
            segment_labels=attrs.segment_labels,
            weights=prep.weights,
            top_nodes=0,
            progress=_span(progress, i / len(lists), (i + 1) / len(lists)),
        )["shortlist"]
    return out


# ------------------------------------------------------------------ helpers


def _span(progress: Callable[..., None], lo: float, hi: float) -> Callable[[float, str], None]:
    def inner(fraction: float, message: str | None = None) -> None:
        progress(lo + (hi - lo) * min(max(float(fraction), 0.0), 1.0), message)

    return inner


@contextmanager
def _named_nodes(ids: Sequence[str]) -> Iterator[None]:
    """Add ``node_id`` to analytics errors that name a node by index."""
    from service.analytics.errors import AnalyticsError

    try:
        yield
    except AnalyticsError as exc:
        idx = exc.data.get("node_index")
        if isinstance(idx, int) and 0 <= idx < len(ids):
            exc.data["node_id"] = ids[idx]
        raise
