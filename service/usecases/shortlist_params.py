"""The ``shortlist`` capability's request: :class:`ShortlistParams`, as every door reads it.

What can be checked without the graph is checked when the params are parsed
(pydantic: ranges, "exactly one of budget / cost_budget", options that apply to
one method only); the contact rules in it are the ones
:class:`~service.usecases.contact_rules.ContactRules` holds and checks.
"""

from __future__ import annotations

from typing import Literal

from pydantic import Field, model_validator

from .diffusion_settings import DiffusionSettings

from .contact_rules import budget_problem, caps_problem, target_problem
from .integrity_rules import FlaggedRule

__all__ = [
    "BASELINES",
    "CELF_MAX_WORK",
    "CELF_RUNS",
    "COMMUNITY_MAX_EDGES",
    "DEFAULT_BASELINES",
    "MAX_BUDGET",
    "MAX_IDS",
    "METHODS",
    "PRECHECK_MAX_EDGES",
    "RELATIVE_PRECISION",
    "ShortlistParams",
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
    exclude_flagged: FlaggedRule | None = Field(
        default=None,
        description="Leave out the people an odd_neighbourhoods or dense_groups job of this version flagged "
        "for review: {job, lists}.",
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
        problem = budget_problem(self.budget, self.cost_budget)
        if problem:
            raise ValueError(problem)
        # Stored params carry every field, so "given" means "not None" here.
        for name, method in (
            ("target_ratio", "opim"),
            ("time_limit", "opim"),
            ("celf_runs", "celf"),
        ):
            if getattr(self, name) is not None and self.method != method:
                raise ValueError(f"{name} applies to method {method!r} only")
        problem = caps_problem(self.max_per_segment)
        if problem:
            raise ValueError(problem)
        if len(set(self.baselines)) != len(self.baselines):
            raise ValueError("baselines must not repeat")
        problem = target_problem(self.target_segment)
        if problem:
            raise ValueError(problem)
        return self
