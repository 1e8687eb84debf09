"""Ties between people: tie strength, link prediction scores and recommendations,
their evaluation, and next contacts after a first wave of adopters.

Public names of this family; private modules (leading underscore) hold
the steps and the compiled kernels.
"""

from __future__ import annotations

from .evaluation import (
    auc,
    DEFAULT_EVAL_METHODS,
    evaluate_link_prediction,
    precision_at_k,
)

from .recommend import (
    adamic_adar,
    common_neighbours,
    jaccard,
    LINK_METHODS,
    LinkMethod,
    personalized_pagerank,
    preferential_attachment,
    recommend_all,
    recommend_for,
    Recommendation,
    resource_allocation,
    SharedContact,
    SparseScores,
    weighted_adamic_adar,
)

from .referrals import (
    next_contacts,
    NextContact,
    referral_asks,
    ReferralAsk,
)

from .strength import (
    DEFAULT_SHARES,
    neighbour_index,
    NeighbourIndex,
    tie_strength,
    TieStrength,
)

__all__ = [
    "DEFAULT_EVAL_METHODS",
    "evaluate_link_prediction",
    "auc",
    "precision_at_k",
    "LinkMethod",
    "LINK_METHODS",
    "SharedContact",
    "Recommendation",
    "SparseScores",
    "common_neighbours",
    "jaccard",
    "adamic_adar",
    "resource_allocation",
    "preferential_attachment",
    "weighted_adamic_adar",
    "personalized_pagerank",
    "recommend_for",
    "recommend_all",
    "NextContact",
    "ReferralAsk",
    "next_contacts",
    "referral_asks",
    "DEFAULT_SHARES",
    "TieStrength",
    "NeighbourIndex",
    "tie_strength",
    "neighbour_index",
]
