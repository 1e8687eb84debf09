"""Shared pieces of seed selection: result types, rule helpers, reasons, forecasts.

Private to :mod:`service.analytics.seeding.shortlists` (which re-exports the result
types). Nothing here samples beyond what its callers ask for.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import NamedTuple

import numpy as np
from numpy.typing import NDArray

from . import _rr_kernels as K
from ._rr import GreedyResult, RRCollection, RRSampler, Rules, best_of_cost_greedy, greedy_cover
from ._rules import Caps, SeedFacts, build_rules
from ..errors import EmptyGraph, InvalidParameter
from ..graph import DiffusionGraph

__all__ = [
    "ONE_MINUS_INV_E", "KNAPSACK_RATIO", "MATROID_RATIO", "Progress",
    "TAG_EST", "TAG_FINAL", "TAG_R1", "TAG_R2", "TAG_EVAL", "TAG_FORECAST",
    "SeedChoice", "ReachEstimate", "Shortlist",
    "check_common", "check_eps", "degrees_of", "dg_rules", "greedy_factor", "rule_notes",
    "select", "facts", "facts_from", "choices", "forecast", "rr_hits", "lb_floor",
    "opt_floor", "prefix_gains",
]

ONE_MINUS_INV_E = 1.0 - 1.0 / math.e
KNAPSACK_RATIO = 0.405  # K. Tang et al. 2021 (arXiv 2008.05391), published
MATROID_RATIO = 0.5  # Fisher, Nemhauser, Wolsey 1978 (from memory)
Progress = Callable[[float, str], None]
TAG_EST, TAG_FINAL, TAG_R1, TAG_R2, TAG_EVAL, TAG_FORECAST = 1, 2, 3, 4, 5, 6

@dataclass(frozen=True)
class SeedChoice:
    """One seed of a shortlist, in the order chosen."""

    node: int
    marginal_gain: float  # reach this seed adds to the earlier ones
    cumulative_reach: float  # reach of the shortlist up to and including it
    reason: str
    required: bool = False  # placed because of must_include
    # The numbers the reason was written from (methods that estimate reach), so that
    # seeding.evaluate_shortlist can rewrite it with the figures shown beside it.
    facts: SeedFacts | None = field(default=None, compare=False, repr=False)


class ReachEstimate(NamedTuple):
    """An expected reach with its standard error and how it was obtained."""

    mean: float
    stderr: float
    runs: int
    method: str


@dataclass(frozen=True, eq=False)
class Shortlist:
    """A seed shortlist with its reach curve, forecast and guarantee.

    ``reach_curve[j]`` is the estimated reach of the first ``j + 1`` seeds;
    ``reach_curve_source`` says which samples it comes from.
    ``expected_reach`` is an independent forecast of the whole set (forward
    Monte Carlo unless stated), not the estimate used to choose it.
    ``guarantee`` holds ``method``, ``approximation`` (a ratio to the best
    set allowed by the same rules, or None), ``approximation_formula``,
    ``probability``, ``certified_ratio`` (OPIM-C) and ``notes``.
    """

    method: str
    seeds: tuple[SeedChoice, ...]
    reach_curve: NDArray[np.float64]
    reach_curve_source: str
    expected_reach: ReachEstimate | None
    guarantee: Mapping[str, object]
    theta: int | None = None  # RR sets the selection was made on
    samples: int = 0  # RR sets (or oracle calls) used in total
    timings: Mapping[str, float] = field(default_factory=dict)
    details: Mapping[str, object] = field(default_factory=dict)

    @property
    def nodes(self) -> tuple[int, ...]:
        return tuple(s.node for s in self.seeds)




# ---------------------------------------------------------------- helpers

def check_common(dg: DiffusionGraph, weights: object, rounds: object, random_seed: object
                 ) -> NDArray[np.float64] | None:
    """Validate the shared options; return the audience weights (NaN -> 0) or None."""
    if dg.n <= 0:
        raise EmptyGraph("the graph has no nodes", field="graph")
    if isinstance(random_seed, bool) or not isinstance(random_seed, (int, np.integer)) \
            or random_seed < 0:
        raise InvalidParameter("random_seed must be an integer >= 0", field="random_seed")
    if rounds is not None and (isinstance(rounds, bool) or not isinstance(rounds, (int, np.integer))
                               or rounds < 1):
        raise InvalidParameter("rounds must be a positive integer or None", field="rounds")
    if weights is None:
        return None
    w = np.asarray(weights, dtype=np.float64)
    if w.shape != (dg.n,):
        raise InvalidParameter(f"weights must have length {dg.n}", field="weights")
    w = np.where(np.isnan(w), 0.0, w)  # no value: not in the target audience
    if np.any(w < 0) or not np.all(np.isfinite(w)):
        raise InvalidParameter("weights must be finite and >= 0", field="weights")
    if w.sum() <= 0:
        raise InvalidParameter("the target audience has no positive value", field="weights")
    return w


def degrees_of(dg: DiffusionGraph) -> NDArray[np.float64]:
    return np.diff(dg.out_indptr).astype(np.float64)


def dg_rules(dg: DiffusionGraph, budget: int | None, eligible: object, must_include: object,
           segments: object, max_per_segment: Caps, costs: object, cost_budget: float | None
           ) -> Rules:
    return build_rules(
        dg.n, budget=budget, eligible=eligible, must_include=must_include,  # type: ignore[arg-type]
        segments=segments, max_per_segment=max_per_segment, costs=costs,  # type: ignore[arg-type]
        cost_budget=cost_budget, tiebreak=degrees_of(dg))


def greedy_factor(rules: Rules) -> tuple[float, str, str | None]:
    """(factor used for sample sizes, its formula, the approximation claim note or None)."""
    if rules.budget_left is not None:
        if rules.k_left is not None or rules.caps_left is not None:
            return KNAPSACK_RATIO, "none proven", (
                "a cost budget combined with a count budget or segment caps has no proven "
                "ratio here; samples are sized as for the cost budget alone")
        return KNAPSACK_RATIO, "0.405 - epsilon", None
    if rules.caps_left is not None:
        return MATROID_RATIO, "1/2 - epsilon", None
    return ONE_MINUS_INV_E, "1 - 1/e - epsilon", None


def rule_notes(rules: Rules) -> list[str]:
    notes = []
    if rules.must:
        notes.append("ratio is to the best set that contains the must-include people")
    if rules.caps_left is not None:
        notes.append("segment caps form a partition matroid; greedy is 1/2-approximate "
                     "(Fisher, Nemhauser, Wolsey 1978)")
    if rules.budget_left is not None:
        notes.append("cost budget: the better of benefit/cost greedy and unit greedy; "
                     "0.405-approximate (K. Tang et al. 2021, arXiv 2008.05391)")
    return notes


def select(coll: RRCollection, rules: Rules, *, bound: bool = False) -> GreedyResult:
    if rules.budget_left is not None:
        return best_of_cost_greedy(coll, rules, bound=bound)[0]
    return greedy_cover(coll, rules, bound=bound)


def facts(res: GreedyResult, coll: RRCollection, rules: Rules, *,
          segments: object, segment_labels: Sequence[str] | None,
          communities: object) -> list[SeedFacts]:
    """The numbers behind each seed's reason, from an RR collection's coverage."""
    scale = coll.scale()
    counts0 = coll.index()[2]
    pool = rules.candidates.copy()
    pool[list(rules.must)] = True
    best_alone = float(counts0[pool].max()) * scale if pool.any() else 0.0
    alone = [float(counts0[v]) * scale for v in res.seeds]
    return facts_from(res.seeds, [g * scale for g in res.gains], alone, best_alone, rules,
                      segments=segments, segment_labels=segment_labels, communities=communities)


def facts_from(seeds: Sequence[int], gains: Sequence[float], alone: Sequence[float],
               best_alone: float, rules: Rules, *,
               segments: object, segment_labels: Sequence[str] | None, communities: object,
               degrees: NDArray[np.float64] | None = None) -> list[SeedFacts]:
    """Seed facts from given gains; ``degrees`` (default: the rules' tie-break
    degrees) gives the rank; first seed of each segment / community flagged."""
    deg = rules.tiebreak if degrees is None else degrees
    srt = np.sort(deg)
    seg = None if segments is None else np.asarray(segments)
    com = None if communities is None else np.asarray(communities)
    seen_seg: set[int] = set()
    seen_com: set[int] = set()
    must = set(rules.must)
    out = []
    for v, g, a in zip(seeds, gains, alone):
        rank = 1 + int(srt.size - np.searchsorted(srt, deg[v], side="right"))
        s_label = None
        if seg is not None and int(seg[v]) >= 0 and int(seg[v]) not in seen_seg:
            seen_seg.add(int(seg[v]))
            code = int(seg[v])
            s_label = segment_labels[code] if segment_labels and code < len(segment_labels) \
                else str(code)
        c_first = None
        if com is not None and int(com[v]) >= 0 and int(com[v]) not in seen_com:
            seen_com.add(int(com[v]))
            c_first = int(com[v])
        cost = None if rules.costs is None else float(rules.costs[v])
        out.append(SeedFacts(int(v), v in must, float(g), float(a), best_alone, rank, s_label,
                             c_first, cost))
    return out


def choices(res_seeds: Sequence[int], gains: Sequence[float], texts: Sequence[str],
            must: Sequence[int], seed_facts: Sequence[SeedFacts] | None = None,
            ) -> tuple[tuple[SeedChoice, ...], NDArray[np.float64]]:
    curve = np.cumsum(np.asarray(gains, dtype=np.float64))
    mset = set(must)
    fs: Sequence[SeedFacts | None] = seed_facts if seed_facts is not None \
        else [None] * len(res_seeds)
    seeds = tuple(SeedChoice(int(v), float(g), float(c), t, int(v) in mset, f)
                  for v, g, c, t, f in zip(res_seeds, gains, curve, texts, fs))
    return seeds, curve


def forecast(dg: DiffusionGraph, seeds: Sequence[int], *, runs: int, random_seed: int,
             weights: NDArray[np.float64] | None, rounds: int | None,
             sampler: RRSampler) -> ReachEstimate | None:
    """Independent forecast of the chosen set: forward Monte Carlo from
    :mod:`service.analytics.diffusion.cascades` with a different seed; if that module
    is unavailable, a fresh RR collection that played no part in the choice."""
    if runs <= 0 or not seeds:
        return None
    try:
        from ..diffusion.cascades import estimate_spread
    except ImportError:
        est = rr_hits(sampler, list(seeds), samples=max(runs * 100, 10_000),
                       key=K.stream_key(random_seed, TAG_FORECAST))
        return est._replace(method="rr_fresh")
    e = estimate_spread(dg, list(seeds), runs=runs, rounds=rounds,
                        random_seed=random_seed + 1, weights=weights)
    return ReachEstimate(float(e.mean), float(e.stderr), int(e.runs), "forward_monte_carlo")


def rr_hits(sampler: RRSampler, seeds: Sequence[int], *, samples: int, key: np.uint64,
             progress: Progress | None = None) -> ReachEstimate:
    mask = np.zeros(sampler.n, dtype=np.bool_)
    mask[list(seeds)] = True
    hits = 0
    done = 0
    batch = 1 << 16
    while done < samples:
        c = min(batch, samples - done)
        h, _ = sampler.count_hits(mask, key, done, c)
        hits += h
        done += c
        batch = min(batch * 2, 1 << 22)
        if progress is not None:
            progress(done / samples, "estimating reach from RR sets")
    share = hits / samples
    w = sampler.total_weight
    return ReachEstimate(w * share, w * math.sqrt(share * (1 - share) / samples), samples, "rr")


def check_eps(epsilon: float, name: str = "epsilon") -> None:
    if not (isinstance(epsilon, (int, float)) and 0 < epsilon < 1):
        raise InvalidParameter(f"{name} must be in (0, 1), got {epsilon!r}", field=name)


def lb_floor(rules: Rules, w: NDArray[np.float64] | None) -> float:
    """A lower bound of OPT that needs no sampling: 1 person (the paper's
    start value); with audience values, the largest value of anyone who
    could be in the set (it reaches itself)."""
    if w is None:
        return 1.0
    pool = rules.candidates.copy()
    if rules.costs is not None and rules.budget_left is not None:
        pool &= rules.costs <= rules.budget_left
    if rules.caps_left is not None and rules.group is not None:
        pool &= rules.caps_left[rules.group] > 0
    must = float(w[list(rules.must)].sum())
    extra = float(w[pool].max()) if pool.any() and rules.max_free > 0 else 0.0
    return must + extra


def opt_floor(rules: Rules, w: NDArray[np.float64] | None) -> float:
    """OPT is at least this without sampling: every seed reaches itself, so a
    full feasible set of k people reaches k (the paper's OPT >= k); under a
    cost budget at least one person; with audience values, the largest value
    of anyone who could be chosen."""
    if w is not None:
        return max(lb_floor(rules, w), 1e-12)
    if rules.budget_left is not None:
        return float(max(len(rules.must), 1))
    return float(len(rules.must) + rules.max_free)


def prefix_gains(coll: RRCollection, seeds: Sequence[int]) -> NDArray[np.int64]:
    """Sets newly covered by each seed in turn (an ordered list's reach curve)."""
    inv_indptr, inv_sets, counts0 = coll.index()
    counts = counts0.copy()
    covered = np.zeros(coll.count, dtype=np.uint8)
    offsets, nodes = coll.offsets, coll.nodes
    return np.array([K.cover_node(v, inv_indptr, inv_sets, offsets, nodes, covered, counts)
                     for v in seeds], dtype=np.int64)
