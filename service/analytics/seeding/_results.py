"""What a seeding method returns: the shortlist, its seeds and reach estimates.

Private to :mod:`service.analytics.seeding`; :mod:`.shortlists` re-exports the types.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import NamedTuple

import numpy as np
from numpy.typing import NDArray

from ._reasons import SeedFacts

__all__ = ["Progress", "SeedChoice", "ReachEstimate", "Shortlist", "choices"]

Progress = Callable[[float, str], None]


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


def choices(seeds: Sequence[int], gains: Sequence[float], texts: Sequence[str],
            must: Sequence[int], seed_facts: Sequence[SeedFacts] | None = None,
            ) -> tuple[tuple[SeedChoice, ...], NDArray[np.float64]]:
    """The seeds with their gains, cumulative reach and reasons, and the reach curve."""
    curve = np.cumsum(np.asarray(gains, dtype=np.float64))
    mset = set(must)
    fs: Sequence[SeedFacts | None] = seed_facts if seed_facts is not None \
        else [None] * len(seeds)
    out = tuple(SeedChoice(int(v), float(g), float(c), t, int(v) in mset, f)
                for v, g, c, t, f in zip(seeds, gains, curve, texts, fs))
    return out, curve
