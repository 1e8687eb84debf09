"""The result documents of the referral-integrity job kinds (``odd_neighbourhoods``, ``dense_groups``).

Kept apart from :mod:`service.usecases.integrity`, which holds the params and the work.
"""

from __future__ import annotations

from typing import Literal

from pydantic import BaseModel, ConfigDict, Field

from .integrity import DenseGroupsParams, MEMBERS_LISTED, OddNeighbourhoodsParams
from .result_models import Result

__all__ = ["FittedLaw", "FlaggedPerson", "LawPoints", "OddNeighbourhoodsResult", "DenseGroup", "SearchedTable",
           "DenseGroupsResult"]


class _Open(BaseModel):
    model_config = ConfigDict(extra="allow")


class FittedLaw(_Open):
    law: str = Field(description="E~N, W~E or lambda~W.")
    meaning: str
    exponent: float
    constant: float
    people: int = Field(description="People whose neighbourhoods the line was fitted on.")
    reading: str


class FlaggedPerson(_Open):
    rank: int
    node_id: str
    label: str | None
    score: float = Field(description="Distance from the law, 1 for the farthest person of the list.")
    contacts: int
    ties: int = Field(description="Ties in the person's neighbourhood, their own included (E).")
    expected_ties: float = Field(description="E that the fitted law expects for that many contacts.")
    ties_among_contacts: int
    possible_ties_among_contacts: int
    weight: float = Field(description="Total weight of the neighbourhood's ties (W).")
    eigenvalue: float = Field(description="Principal eigenvalue of the weighted neighbourhood.")
    evidence: str


class LawPoints(_Open):
    contacts: list[int]
    ties: list[int]
    people: list[int] = Field(description="People at each (contacts, ties) point.")
    sampled: bool


class OddNeighbourhoodsResult(Result):
    kind: Literal["odd_neighbourhoods"]
    params: OddNeighbourhoodsParams
    people: int
    people_fitted: int
    laws: list[FittedLaw]
    near_cliques: list[FlaggedPerson]
    near_stars: list[FlaggedPerson]
    law_points: LawPoints
    readings: list[str]
    caution: str


class DenseGroup(_Open):
    rank: int
    found_in: str = Field(description="ties, an attribute column's name, or sign-up times.")
    people: int
    density: float = Field(description="Weighted ties (or shared values) per member, as peeled.")
    ties: int = Field(description="Ties (or person-value links) inside the group.")
    possible: int
    members: list[str] = Field(description=f"Member ids (the first {MEMBERS_LISTED}; all in the CSV export).")
    shared_values: list[str] = Field(description="Values the group shares (attribute groups).")
    evidence: str


class SearchedTable(_Open):
    found_in: str
    groups: int
    note: str | None = None
    share_at_random: float | None = Field(
        default=None, description="Share of the possible ties (or person-value links) the whole table has: "
                                  "what a group of people picked at random would show.")


class DenseGroupsResult(Result):
    kind: Literal["dense_groups"]
    params: DenseGroupsParams
    groups: list[DenseGroup]
    searched: list[SearchedTable]
    guarantee: str
    caution: str


