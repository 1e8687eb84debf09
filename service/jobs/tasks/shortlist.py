"""``shortlist``: whom to contact first, under the campaign's contact rules, with a guarantee.

The seeds are chosen by one method of :mod:`service.analytics.seeding.shortlists`
(``imm`` by default, ``opim``, ``celf``, or a baseline heuristic) under the
shared diffusion settings
(:class:`~service.jobs.tasks.diffusion_settings.DiffusionSettings`). Then,
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

Contact rules. Nobody without contact consent
(:meth:`~service.analytics.graph.NodeAttributes.contactable`) and nobody in
``exclude`` is ever a seed; ``must_include`` people are placed first;
``max_per_segment`` caps the seeds of each segment (an integer caps every
segment, people without a segment forming one more group; a mapping caps the
segments it names); ``budget`` counts seeds, ``cost_budget`` sums the node
``cost`` (people without a cost are never chosen); ``target_segment`` and
``weights: "value"`` make only the target audience's reach count.

Checks. Ranges and "exactly one of budget / cost_budget" are checked when the
job is created (pydantic). What needs the version is checked by
:func:`prepare`, in the task and, through :func:`precheck`, at creation time
for versions of at most :data:`PRECHECK_MAX_EDGES` edges once the API calls
it: unknown ids are :class:`UnknownNode` (field ``must_include`` or
``exclude``); rules that cannot be met (budget above the eligible
population, caps, a must-include person without consent, unknown segment
labels, a cost budget on a version without costs) are
:class:`InfeasibleRequest` naming the rule in ``field``; CELF above
:data:`CELF_MAX_WORK` is :class:`InvalidParameter` (``field="method"``).

The rules are resolved in ``_shortlist_rules.py`` and the result document is
written in ``_shortlist_result.py`` (private to this kind).
"""

from __future__ import annotations

import time
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager
from typing import TYPE_CHECKING, Any, Literal

import numpy as np
from numpy.typing import NDArray
from pydantic import Field, model_validator

from service.analytics._chunks import thread_count

from .. import admission
from ..kinds import JobKind, TaskContext, TaskOutput
from ._shortlist_result import result_document
from ._shortlist_rules import Prepared, resolve_rules
from .diffusion_settings import DiffusionSettings

if TYPE_CHECKING:
    from service.analytics.diffusion.forecasts import ForecastResult
    from service.analytics.graph import DiffusionGraph, GraphArrays
    from service.analytics.diffusion.paired import PairedComparison
    from service.analytics.seeding.shortlists import Shortlist
    from service.loader import LoadedVersion

__all__ = [
    "BASELINES",
    "CELF_MAX_WORK",
    "KIND",
    "METHODS",
    "PRECHECK_MAX_EDGES",
    "Prepared",
    "ShortlistParams",
    "precheck",
    "prepare",
    "run",
]

Method = Literal[
    "imm", "opim", "celf", "degree_discount", "top_degree", "top_pagerank", "top_betweenness"
]
Baseline = Literal["degree_discount", "top_degree", "top_pagerank", "top_betweenness"]
METHODS: tuple[str, ...] = (
    "imm",
    "opim",
    "celf",
    "degree_discount",
    "top_degree",
    "top_pagerank",
    "top_betweenness",
)
DEFAULT_BASELINES: tuple[Baseline, ...] = ("degree_discount", "top_degree", "top_pagerank")
BASELINES: tuple[str, ...] = ("degree_discount", "top_degree", "top_pagerank", "top_betweenness")
MAX_BUDGET = 10_000
MAX_IDS = 1_000_000
CELF_MAX_WORK = 20_000_000  # candidates x runs of CELF's first pass
CELF_RUNS = 500
PRECHECK_MAX_EDGES = 2_000_000
COMMUNITY_MAX_EDGES = (
    200_000  # Leiden for the seeds' reasons only up to this size (DBLP, 1M edges: ~20 s)
)
RELATIVE_PRECISION = 0.01  # paired comparison: interval half-width at most 1% of the reach
NodeId = str


class ShortlistParams(DiffusionSettings):
    budget: int | None = Field(default=None, ge=1, le=MAX_BUDGET, description="Number of seeds.")
    cost_budget: float | None = Field(
        default=None,
        gt=0,
        allow_inf_nan=False,
        description="Total node cost allowed (instead of budget); people without a cost are never chosen.",
    )
    method: Method = Field(
        default="imm",
        description="imm (IMM, Tang, Shi, Xiao 2015, fixed as in Chen 2018), opim (OPIM-C, Tang et al. 2018: "
        "certified ratio), celf (lazy greedy on Monte Carlo, small graphs), or a baseline heuristic.",
    )
    epsilon: float = Field(
        default=0.1, ge=0.01, lt=1,
        description="Approximation slack of imm and opim. At least 0.01: RR sets grow as 1/epsilon^2, "
        "and max_samples caps them anyway.",
    )
    l: float = Field(  # noqa: E741 - the paper's name for the confidence exponent
        default=1.0, gt=0, le=10, description="imm: the guarantee holds with probability 1 - n^-l."
    )
    target_ratio: float | None = Field(
        default=None, gt=0, le=1, description="opim: stop once the certified ratio reaches this."
    )
    max_samples: int = Field(
        default=20_000_000,
        ge=1000,
        le=200_000_000,
        description="Cap on RR sets (imm: per phase; opim: both collections together).",
    )
    time_limit: float | None = Field(
        default=None, gt=0, le=86_400, description="opim: seconds before it stops doubling."
    )
    celf_runs: int | None = Field(
        default=None,
        ge=10,
        le=100_000,
        description=f"celf: simulations per spread estimate (default {CELF_RUNS}).",
    )
    must_include: list[NodeId] = Field(
        default_factory=list,
        max_length=MAX_BUDGET,
        description="People already signed up: placed first.",
    )
    exclude: list[NodeId] = Field(
        default_factory=list,
        max_length=MAX_IDS,
        description="People who may not be contacted (besides those without consent).",
    )
    max_per_segment: int | dict[str, int] | None = Field(
        default=None,
        description="Cap on seeds per segment: one number for every segment, or {label: cap}.",
    )
    target_segment: str | list[str] | None = Field(
        default=None, description="Only the reach within this segment (or these segments) counts."
    )
    weights: Literal["value"] | None = Field(
        default=None, description="'value': reach counts the summed node value of those reached."
    )
    baselines: list[Baseline] = Field(
        default_factory=lambda: list(DEFAULT_BASELINES),
        max_length=4,
        description="Heuristic lists shown beside the shortlist, under the same rules.",
    )
    forecast_runs: int = Field(
        default=1000,
        ge=100,
        le=1_000_000,
        description="Simulated campaigns run first for expected_reach and the comparisons "
        "(every list on the same campaigns).",
    )
    forecast_max_runs: int = Field(
        default=20_000,
        ge=100,
        le=1_000_000,
        description="More campaigns are simulated, up to this many (or forecast_runs if larger), "
        "until every comparison with a baseline is within 1% of the reach.",
    )
    evaluation_samples: int = Field(
        default=100_000,
        ge=1000,
        le=5_000_000,
        description="Fresh RR sets for the reach curves and marginal gains.",
    )
    confidence: float = Field(
        default=0.95, gt=0, lt=1, description="Level of the expected_reach intervals."
    )
    explain_communities: bool = Field(
        default=True, description="Name first seeds of a community in the reasons."
    )

    @model_validator(mode="after")
    def _consistent(self) -> ShortlistParams:
        if (self.budget is None) == (self.cost_budget is None):
            raise ValueError(
                "give exactly one of budget (a number of seeds) or cost_budget (a total cost)"
            )
        # Stored params carry every field, so "given" means "not None" here.
        for name, method in (
            ("target_ratio", "opim"),
            ("time_limit", "opim"),
            ("celf_runs", "celf"),
        ):
            if getattr(self, name) is not None and self.method != method:
                raise ValueError(f"{name} applies to method {method!r} only")
        caps = self.max_per_segment
        if (isinstance(caps, int) and caps < 0) or (
            isinstance(caps, dict) and any(v < 0 for v in caps.values())
        ):
            raise ValueError("max_per_segment caps must be >= 0")
        if len(set(self.baselines)) != len(self.baselines):
            raise ValueError("baselines must not repeat")
        if isinstance(self.target_segment, list) and not self.target_segment:
            raise ValueError("target_segment must name at least one segment")
        return self


def prepare(
    params: ShortlistParams, version: LoadedVersion, *, check_settings: bool = False
) -> Prepared:
    """Resolve ids and rules against ``version``; raise the 422 errors naming the rule."""
    prep = resolve_rules(params, version, check_settings=check_settings)
    if params.method == "celf":
        _celf_limit(params, prep.eligible)
    return prep


def precheck(params: ShortlistParams, load: Callable[[], LoadedVersion], *, edges: int) -> None:
    """The checks of :func:`prepare` at job creation, for versions of at most PRECHECK_MAX_EDGES edges."""
    if edges <= PRECHECK_MAX_EDGES:
        prepare(params, load(), check_settings=True)


def run(ctx: TaskContext, params: ShortlistParams) -> TaskOutput:
    clock = _Clock()
    v = ctx.load()
    prep = prepare(params, v)
    dg = params.diffusion_graph(v)
    communities = _communities(params, v.graph)
    clock.lap("preparation")
    with _named_nodes(v.ids):
        chosen = _choose(
            params.method, params, v, dg, prep, communities, _span(ctx.progress, 0.0, 0.55)
        )
        clock.lap("choice")
        names = [b for b in params.baselines if b != params.method]
        base: dict[str, Shortlist] = {}
        for i, b in enumerate(names):
            step = _span(
                ctx.progress, 0.55 + 0.05 * i / len(names), 0.55 + 0.05 * (i + 1) / len(names)
            )
            step(0.0, f"baseline {b}")  # also where a cancellation is noticed
            base[b] = _choose(b, params, v, dg, prep, communities, step)
        clock.lap("baselines")
    evaluated = _evaluate(
        params, dg, prep, {params.method: chosen, **base}, _span(ctx.progress, 0.6, 0.7)
    )
    clock.lap("evaluation")
    cmp = _compare(params, dg, prep, evaluated, _span(ctx.progress, 0.7, 0.85))
    used = _never_worse(params.method, cmp)
    clock.lap("paired_comparison")
    runs = cmp.simulations if cmp is not None else params.forecast_runs
    fc = _forecasts(params, v, dg, prep, evaluated, runs, _span(ctx.progress, 0.85, 1.0))
    clock.lap("forward_monte_carlo")
    doc = result_document(params, v, prep, chosen, evaluated, fc, cmp, used)
    doc["timings"] = {"method": doc["timings"], **clock.laps, "total": clock.total()}
    doc["threads"] = thread_count()  # what RR sampling and simulations ran on (the worker's setting)
    return TaskOutput(data=doc)


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


def _rule_kwargs(params: ShortlistParams, v: LoadedVersion, prep: Prepared) -> dict[str, Any]:
    return {
        "eligible": prep.eligible,
        "must_include": prep.must,
        "segments": v.attrs.segment if prep.caps is not None else None,
        "max_per_segment": prep.caps,
        "costs": prep.costs,
        "cost_budget": params.cost_budget,
        "segment_labels": v.attrs.segment_labels,
    }


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
    prep: Prepared,
    communities: NDArray[np.int32] | None,
    progress: Callable[[float, str], None] | None,
) -> Shortlist:
    from service.analytics.seeding import shortlists as seeding

    kw = _rule_kwargs(params, v, prep)
    kw["communities"] = communities
    k = params.budget
    if method in ("imm", "opim"):
        common = dict(
            epsilon=params.epsilon,
            random_seed=params.random_seed,
            weights=prep.weights,
            rounds=params.rounds,
            progress=progress,
            forecast_runs=0,
            **kw,
        )
        if method == "imm":
            return seeding.imm_seeds(dg, k, l=params.l, max_rr_sets=params.max_samples, **common)
        return seeding.opim_seeds(
            dg,
            k,
            target_ratio=params.target_ratio,
            max_samples=params.max_samples,
            time_limit=params.time_limit,
            **common,
        )
    if method == "celf":
        from service.analytics.diffusion.cascades import estimate_spread

        _celf_limit(params, prep.eligible)

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
            dg.n,
            k,
            progress=progress,
            degrees=np.diff(dg.out_indptr).astype(np.float64),
            **kw,
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
        return seeding.degree_discount_seeds(dg, k, p=min(max(p, 0.0), 1.0), **kw)
    scores, name = _scores(method, v.graph, params.random_seed, progress)
    return seeding.top_score_seeds(scores, k, score_name=name, **kw)


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
    prep: Prepared,
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
            eligible=prep.eligible,
        )
    return out


def _compare(
    params: ShortlistParams,
    dg: DiffusionGraph,
    prep: Prepared,
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
    prep: Prepared,
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


KIND = JobKind(
    name="shortlist",
    params=ShortlistParams,
    run=run,
    estimate=admission.shortlist_estimate,
    precheck=precheck,
    summary="Seed shortlist under contact rules: whom to contact first, with its guarantee and baselines",
    result_description=(
        "method (asked for) and method_used (the list returned: a baseline when it reached clearly more on the "
        "same simulated campaigns, then method_note says so and replaced holds the optimised list {method, seeds, "
        "expected_reach, target_reach, reach_curve}); "
        "seeds [{rank, node_id, label, marginal_gain, cumulative_reach, reason, segment, region, cost, required}]; "
        "marginal_gains_note (why a later seed adds more, when one does); evaluation {simulations, random_seed, "
        "confidence, stopped_because, note}; comparisons [{baseline, label, reach, difference {mean, stderr, "
        "ci_low, ci_high, confidence}, verdict}], paired on the same simulated campaigns; "
        "reach_curve (k = 1..budget, on fresh RR sets shared with the baselines) and reach_curve_source; "
        "selection_reach_curve (the method's own estimate); expected_reach and, with a target, target_reach "
        "{mean, stderr, ci_low, ci_high, confidence, simulations, method} by forward Monte Carlo independent of "
        "the choice, the mean over the evaluation's campaigns; percentiles; segment_reach; guarantee {method, approximation, approximation_formula, "
        "probability, certified_ratio, notes, summary}; theta; samples; timings; details; baselines {name: "
        "{method, seeds, expected_reach, target_reach, reach_curve, guarantee}}; gain_over_best_baseline "
        "{baseline, shortlist_mean, baseline_mean, difference, relative, stderr, ci_low, ci_high, confidence, "
        "unit} (paired); baselines also carry a label; model, probability, "
        "rounds, nodes, edges, eligible, budget, cost_budget, total_cost, target, reach_unit, warnings."
    ),
)
