"""Seed selection under contact rules: the rules as one value (``rules``),
reverse-reachable (RR) sampling, IMM, OPIM-C, CELF, the degree baselines, and
shortlist evaluation.

Public names of this family; private modules (leading underscore) hold
the steps and the compiled kernels.
"""

from __future__ import annotations

from .shortlists import (
    celf_seeds,
    degree_discount_seeds,
    evaluate_shortlist,
    imm_lambda_prime,
    imm_lambda_star,
    imm_seeds,
    opim_seeds,
    ReachEstimate,
    rr_estimate,
    SeedChoice,
    Shortlist,
    top_score_seeds,
)
from .rules import SeedGuarantee, SeedRules

__all__ = [
    "SeedChoice",
    "SeedRules",
    "SeedGuarantee",
    "ReachEstimate",
    "Shortlist",
    "rr_estimate",
    "imm_seeds",
    "imm_lambda_prime",
    "imm_lambda_star",
    "opim_seeds",
    "celf_seeds",
    "degree_discount_seeds",
    "top_score_seeds",
    "evaluate_shortlist",
]
