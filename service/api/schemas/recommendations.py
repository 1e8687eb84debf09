"""Introductions, next contacts and referral asks."""

from __future__ import annotations

from typing import Literal

from pydantic import BaseModel, ConfigDict, Field

from service.usecases.diffusion_settings import ProbabilitySettings
from service.usecases.integrity_rules import FlaggedRule
from service.usecases.result_models import ResultWarning
from service.usecases.next_contacts import FollowOn
from service.usecases.recommendations import METHOD_ALIASES, LinkMethodName
from .common import JsonInt, PerAdopter, PositiveInt, Seed

__all__ = [
    "NEXT_CONTACTS_BODY",
    "Method",
    "METHOD_ALIASES",
    "SharedContactRead",
    "RecommendationRead",
    "RecommendationPage",
    "NextContactsRequest",
    "AskRead",
    "NextContactRead",
    "ReferralGroupRead",
    "UnknownAdopters",
    "NextContactsPage",
]

#: The ranking methods a caller may name (``tie_strength`` is an alias, see METHOD_ALIASES).
Method = LinkMethodName


class SharedContactRead(BaseModel):
    node_id: str
    tie_to_person: float = Field(description="Tie strength in [0, 1] between the person and this contact.")
    tie_to_candidate: float = Field(description="Tie strength in [0, 1] between this contact and the candidate.")


class RecommendationRead(BaseModel):
    node_id: str = Field(description="The person suggested for an introduction.")
    score: float = Field(description="The method's score (higher is better; scales differ between methods).")
    common: int = Field(description="Number of contacts the two share.")
    shared_contacts: list[SharedContactRead] = Field(
        description="The strongest shared contacts (by the weaker of the two ties), strongest first."
    )


class RecommendationPage(BaseModel):
    graph_id: str
    version: int
    node_id: str
    method: str = Field(description="The method used (aliases resolved).")
    contactable: bool
    items: list[RecommendationRead]


class NextContactsRequest(BaseModel):
    """Who has adopted, and how to rank the people they reach."""

    model_config = ConfigDict(extra="forbid")

    adopters: list[str] = Field(
        min_length=1, description="Ids of the people who have adopted; duplicates are ignored."
    )
    limit: PositiveInt | None = Field(
        default=50, description="At most this many people (grouped: adopters); null for all."
    )
    model: Literal["ic", "lt"] = Field(default="ic", description="Independent Cascade or Linear Threshold.")
    probability: ProbabilitySettings = Field(default_factory=ProbabilitySettings)
    random_seed: Seed = Field(default=0, description="Seeds the trivalency draw.")
    version: JsonInt | Literal["latest"] | None = Field(default=None, description="Version number; newest by default.")
    follow_on: FollowOn | None = Field(
        default=None, description="Blend in this per-node measure of onward reach (scaled to its maximum)."
    )
    blend: float | None = Field(
        default=None, ge=0, le=1,
        description="Weight of follow_on in the score: (1 - blend) exposure + blend follow_on. "
        "Default 0.5 with follow_on, else 0.",
    )
    group_by: Literal["adopter"] | None = Field(
        default=None, description="'adopter': for each adopter, whom they should be asked to refer."
    )
    per_adopter: PerAdopter = Field(default=5, description="Targets per adopter (group_by=adopter).")
    strict: bool = Field(
        default=True, description="Unknown adopter ids are an error (true) or skipped and counted (false)."
    )
    exclude_flagged: FlaggedRule | None = Field(
        default=None, description="People an odd_neighbourhoods or dense_groups job of this version flagged for "
        "review are neither listed nor asked: {job, lists}."
    )


class AskRead(BaseModel):
    node_id: str = Field(description="The adopter best placed to ask: the strongest tie among them.")
    label: str | None = Field(default=None, description="That adopter's display label, if uploaded.")
    tie_strength: float = Field(description="Strength of that tie, in [0, 1].")
    probability: float = Field(description="Activation probability of the arc from that adopter.")


class NextContactRead(BaseModel):
    node_id: str
    label: str | None = Field(default=None, description="The person's display label, if uploaded.")
    exposure: float = Field(description="Probability of being reached in the next round from the adopters.")
    score: float = Field(description="The ranking value: exposure, or its blend with follow_on.")
    adopter_contacts: int = Field(description="Adopters with a tie to this person.")
    ask: AskRead | None = Field(
        description="Null when none of those adopters may be contacted (such people are listed last)."
    )
    reason: str = Field(description="The numbers above in plain words.")


class ReferralGroupRead(BaseModel):
    adopter: str
    adopter_label: str | None = Field(default=None, description="The adopter's display label, if uploaded.")
    expected_referrals: float = Field(
        description="Sum of the targets' exposures: how many of them the model expects to be won over "
        "if the adopter asks each once."
    )
    targets: list[NextContactRead]


class UnknownAdopters(BaseModel):
    count: int
    examples: list[str] = Field(description="The first few unknown ids, in request order.")


class NextContactsPage(BaseModel):
    graph_id: str
    version: int
    model: str
    probability: ProbabilitySettings
    follow_on: str | None
    blend: float
    adopters: int = Field(description="Distinct adopters found in the graph.")
    unknown_adopters: UnknownAdopters | None = Field(
        default=None, description="With strict=false: the adopter ids not in the graph."
    )
    group_by: str | None
    exposure_explained: str = Field(description="What exposure means under the chosen model, in plain words.")
    items: list[NextContactRead] | None = Field(default=None, description="Ranked non-adopters (no group_by).")
    groups: list[ReferralGroupRead] | None = Field(
        default=None, description="Per adopter, whom to ask them to refer (group_by=adopter)."
    )
    warnings: list[ResultWarning] | None = Field(default=None, description="People left out, and why.")


#: The request body of next contacts in the OpenAPI document: JSON, or CSV with the options as query parameters.
NEXT_CONTACTS_BODY = {
    "requestBody": {
        "required": True,
        "description": (
            "JSON (the options below), or for long adopter lists `text/csv` with a header row and an "
            "`id` column (rename with the `id` query parameter), the options then given as query "
            "parameters (`scheme`, `p`, `q` for the probability model)."
        ),
        "content": {
            "application/json": {"schema": NextContactsRequest.model_json_schema(
                ref_template="#/components/schemas/{model}")},
            "text/csv": {"schema": {"type": "string"}, "example": "id\nm00001\nm00042\n"},
        },
    }
}
