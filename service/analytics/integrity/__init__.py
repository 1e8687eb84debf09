"""Referral integrity: odd neighbourhoods (egonet features) and dense,
suspicious groups (densest-subgraph peeling).

Public names of this family; private modules (leading underscore) hold
the steps and the compiled kernels.
"""

from __future__ import annotations

from .dense_groups import (
    COLUMN_WEIGHTINGS,
    DenseGroup,
    fraudar,
    fraudar_bipartite,
    lockstep_groups,
    shared_attribute_groups,
)

from .egonet import (
    contact_circles,
    ego_features,
    EgoFeatures,
    FIT_METHODS,
    LawFit,
    lof_scores,
    oddball,
    OddballResult,
    OddPerson,
    powerlaw_line,
    RING_SCORES,
)

__all__ = [
    "COLUMN_WEIGHTINGS",
    "DenseGroup",
    "fraudar",
    "fraudar_bipartite",
    "lockstep_groups",
    "shared_attribute_groups",
    "FIT_METHODS",
    "EgoFeatures",
    "LawFit",
    "OddballResult",
    "OddPerson",
    "RING_SCORES",
    "contact_circles",
    "ego_features",
    "lof_scores",
    "oddball",
    "powerlaw_line",
]
