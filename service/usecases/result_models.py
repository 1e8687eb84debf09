"""The result document of each built-in job kind, as ``GET /v1/jobs/{id}/result`` answers it.

One model per kind, told apart by ``kind``; each kind names its model on its
``JobKind`` (``result=``), and the API's ``JobResult`` union is built from the
registry. They describe what the use cases store today;
``tests/api/test_result_models.py`` runs every kind and checks each real result
against its model, field by field.

To add a field a use case now writes: add it to the kind's model below (optional,
with a default, so older stored results still read). Every model allows members it
does not list, so a client built from an older document still reads a newer result.
A new kind defines its model in its own module (``Result`` below is the base with
the members every result has).
"""

from __future__ import annotations

from datetime import datetime
from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field

from service.usecases.diffusion_settings import ProbabilitySettings
from service.usecases.forecasts import ForecastParams
from service.usecases.link_evaluation import LinkEvaluationParams
from service.usecases.profile import ProfileParams
from service.usecases.recommendations import RecommendationsParams
from service.usecases.next_contacts import ReferralAsksParams
from service.usecases.scores import ScoresParams
from service.usecases.shortlist_params import ShortlistParams

__all__ = [
    "Result",
    "ArrayInfo",
    "Interval",
    "ProfileResult",
    "ScoresResult",
    "RecommendationsResult",
    "LinkEvaluationResult",
    "ReferralAsksResult",
    "ForecastResult",
    "ShortlistResult",
    "ShortlistSeed",
]


class _Open(BaseModel):
    """Members not listed here may appear (newer results); they are kept, not refused."""

    model_config = ConfigDict(extra="allow")


class ArrayInfo(_Open):
    dtype: str = Field(description="NumPy type string, for example `<f8`.")
    length: int


class Result(_Open):
    """Members every result document carries."""

    job_id: str
    graph_id: str | None
    version: int | None
    random_seed: int
    created_at: datetime = Field(description="When the result was stored.")
    arrays: dict[str, ArrayInfo] = Field(description="Stored per-node arrays, by name (read them via the CSV export).")


# -- intervals shared by forecasts and shortlists ---------------------------------------


class Interval(_Open):
    """A mean with its standard error and confidence interval."""

    mean: float
    stderr: float
    ci_low: float
    ci_high: float
    confidence: float = Field(description="Level of the interval, for example 0.95.")


class ReachEstimate(Interval):
    simulations: int | None = Field(default=None, description="Forward simulations behind the estimate.")
    method: str | None = None


class TargetReach(Interval):
    percentiles: dict[str, float] | None = None


class SegmentReach(_Open):
    segment: str
    expected: float = Field(description="Expected people reached in the segment.")


class ResultWarning(_Open):
    code: str
    message: str
    seed_set: str | None = None
    node_ids: list[str] | None = None
    count: int | None = None


# -- profile ---------------------------------------------------------------------------


class ProfileResult(Result):
    kind: Literal["profile"]
    params: ProfileParams
    summary: dict[str, Any] = Field(description="Size, density, components and degree extremes.")
    degree_distribution: dict[str, Any]
    power_law: dict[str, Any] | None = None
    clustering: dict[str, Any]
    assortativity: float | None
    distances: dict[str, Any] | None = None
    communities: dict[str, Any] | None = None
    readings: dict[str, str] = Field(description="Each figure above in plain words.")


# -- scores ----------------------------------------------------------------------------


class ScoresCommunities(_Open):
    count: int
    modularity: float | None


class ScoresResult(Result):
    kind: Literal["scores"]
    params: ScoresParams
    nodes: int
    edges: int
    measures: dict[str, dict[str, Any]] = Field(description="Per measure: how it was computed and ranked.")
    communities: ScoresCommunities | None = None


# -- recommendations, referral asks, link evaluation ------------------------------------


class RecommendationsResult(Result):
    kind: Literal["recommendations"]
    params: RecommendationsParams
    method: str
    limit: int
    contactable: bool
    explain: int
    people: int
    people_with_recommendations: int
    rows: int = Field(description="Rows of the CSV export.")
    columns: list[str] = Field(description="Columns of the CSV export.")


class ReferralAsksResult(Result):
    kind: Literal["referral_asks"]
    params: ReferralAsksParams
    adopters: int
    unknown_adopters: int
    askers: int
    targets: int
    expected_referrals: float
    model: str
    blend: float
    columns: list[str] = Field(description="Columns of the CSV export.")
    exposure_explained: str | None = Field(default=None, description="What exposure means under the chosen model.")
    expected_referrals_explained: str | None = Field(
        default=None, description="What the expected referrals figure counts, in plain words."
    )
    warnings: list[ResultWarning] = Field(default_factory=list, description="People left out, and why.")


class LinkMethodScore(_Open):
    auc: float | None
    precision_at_k: float | None


class LinkEvaluationResult(Result):
    kind: Literal["link_evaluation"]
    params: LinkEvaluationParams
    methods: dict[str, LinkMethodScore]
    best: str | None
    positives: int
    negatives: int
    hidden: int
    train_edges: int
    base_rate: float | None
    holdout: float
    k: int
    negatives_per_positive: int
    negative_sampling: str
    max_positives: int | None


# -- forecast --------------------------------------------------------------------------


class RoundReach(_Open):
    round: int
    new_mean: float
    cumulative_mean: float
    ci_low: float
    ci_high: float


class NodeReached(_Open):
    node_id: str
    label: str | None = None
    probability: float
    stderr: float


class OutcomeHistogram(_Open):
    """Simulated campaign outcomes: ``counts[i]`` campaigns reached between ``edges[i]`` and ``edges[i + 1]`` people."""

    edges: list[float]
    counts: list[int]


class SeedSetForecast(_Open):
    """The forecast of one seed set."""

    name: str
    seed_count: int
    expected_reach: Interval
    target_reach: TargetReach | None = None
    percentiles: dict[str, float] = Field(description="p5, p25, p50, p75, p95 of people reached.")
    by_round: list[RoundReach]
    top_nodes: list[NodeReached]
    segment_reach: list[SegmentReach]
    simulations: int
    stopped_because: str
    half_width: float
    stream_key: str
    outcome_histogram: OutcomeHistogram | None = None


class ComparisonPair(_Open):
    seed_set: str
    versus: str
    difference: float
    stderr: float
    ci_low: float
    ci_high: float
    clearly_different: bool
    paired_campaigns: int | None = Field(default=None, description="Simulated campaigns the two sets share.")
    verdict: str | None = Field(default=None, description="The difference in plain words.")


class Comparison(_Open):
    measure: str
    confidence: float
    ranking: list[str] = Field(description="Seed set names, best first.")
    pairs: list[ComparisonPair]


class ForecastResult(Result):
    """One seed set: its forecast is also spread at the top level; several: ``comparison``."""

    kind: Literal["forecast"]
    params: ForecastParams
    model: str
    probability: ProbabilitySettings
    rounds: int | None
    confidence: float
    nodes: int
    edges: int
    target: dict[str, Any] | None
    forecasts: list[SeedSetForecast]
    warnings: list[ResultWarning]
    comparison: Comparison | None = None
    # With one seed set, its forecast's members at the top level too.
    seed_count: int | None = None
    expected_reach: Interval | None = None
    target_reach: TargetReach | None = None
    percentiles: dict[str, float] | None = None
    by_round: list[RoundReach] | None = None
    top_nodes: list[NodeReached] | None = None
    segment_reach: list[SegmentReach] | None = None
    simulations: int | None = None
    stopped_because: str | None = None
    half_width: float | None = None
    stream_key: str | None = None
    outcome_histogram: OutcomeHistogram | None = None
    threads: int | None = Field(
        default=None, description="Threads the job ran on; every figure is the same for any number.")


# -- shortlist -------------------------------------------------------------------------


class ShortlistSeed(_Open):
    rank: int
    node_id: str
    label: str | None = None
    marginal_gain: float
    cumulative_reach: float
    reason: str = Field(description="Why this person, in plain words.")
    segment: str | None
    region: str | None = None
    cost: float | None
    required: bool = Field(description="Listed because must_include named them.")


class Guarantee(_Open):
    method: str
    approximation: float | None
    approximation_formula: str | None
    probability: float | None
    certified_ratio: float | None
    notes: list[str]
    summary: str
    epsilon: float | None = None


class BaselineResult(_Open):
    method: str
    label: str | None = Field(default=None, description="The list in plain words, e.g. '25 best-connected people'.")
    seeds: list[str]
    expected_reach: ReachEstimate | None
    target_reach: ReachEstimate | None
    reach_curve: list[float]
    guarantee: str


class Gain(_Open):
    baseline: str
    shortlist_mean: float
    baseline_mean: float
    difference: float
    relative: float | None
    stderr: float | None
    unit: str
    ci_low: float | None = None
    ci_high: float | None = None
    confidence: float | None = None


class Difference(_Open):
    """A paired difference in people reached (shortlist minus baseline) with its interval."""

    mean: float
    stderr: float
    ci_low: float
    ci_high: float
    confidence: float


class BaselineComparison(_Open):
    baseline: str
    label: str
    reach: float = Field(description="The baseline's expected reach on the same simulated campaigns.")
    difference: Difference
    verdict: str = Field(description="The comparison in plain words.")


class Evaluation(_Open):
    simulations: int = Field(description="Simulated campaigns every list was evaluated on.")
    random_seed: int
    confidence: float
    stopped_because: str
    note: str


class ReplacedList(_Open):
    method: str
    seeds: list[str]
    expected_reach: ReachEstimate | None = None
    target_reach: ReachEstimate | None = None
    reach_curve: list[float]


class ShortlistResult(Result):
    kind: Literal["shortlist"]
    params: ShortlistParams
    threads: int | None = Field(
        default=None, description="Threads the job ran on; every figure is the same for any number.")
    model: str
    probability: ProbabilitySettings
    rounds: int | None
    method: str = Field(description="The method asked for.")
    method_used: str | None = Field(default=None, description="The method whose list is returned.")
    method_note: str | None = Field(default=None, description="Why another list than the one asked for is returned.")
    replaced: ReplacedList | None = Field(default=None, description="The optimised list a baseline beat.")
    marginal_gains_note: str | None = None
    evaluation: Evaluation | None = None
    comparisons: list[BaselineComparison] = Field(
        default_factory=list, description="Each baseline against the returned list, on the same simulated campaigns."
    )
    nodes: int
    edges: int
    eligible: int = Field(description="People who may be contacted.")
    budget: int | None
    cost_budget: float | None
    total_cost: float | None
    target: dict[str, Any] | None
    reach_unit: str
    seeds: list[ShortlistSeed]
    reach_curve: list[float]
    reach_curve_source: str
    selection_reach_curve: list[float]
    selection_reach_curve_source: str
    expected_reach: ReachEstimate | None
    target_reach: ReachEstimate | None
    percentiles: dict[str, float] | None
    segment_reach: list[SegmentReach]
    guarantee: Guarantee
    theta: int | None
    samples: int | None
    timings: dict[str, Any]
    details: dict[str, Any]
    baselines: dict[str, BaselineResult]
    gain_over_best_baseline: Gain | None
    warnings: list[ResultWarning]
