"""Reach estimation around the choice: RR hit counts, floors of the optimum, prefix
gains, the independent forecast, and the checks of the options every method shares.

Private to :mod:`service.analytics.seeding`. The RR streams of each phase are
told apart by the ``TAG_*`` constants (:func:`~._rr_kernels.stream_key`).
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
from numpy.typing import NDArray

from . import _rr_kernels as K
from ._results import Progress, ReachEstimate
from ._rr import RRCollection, RRSampler
from .rules import SeedRules
from ..errors import EmptyGraph, InvalidParameter
from ..graph import DiffusionGraph

__all__ = [
    "TAG_EST", "TAG_FINAL", "TAG_R1", "TAG_R2", "TAG_EVAL",
    "check_common", "check_eps", "degrees_of", "forecast", "rr_hits", "lb_floor",
    "opt_floor", "prefix_gains",
]

# TAG 6 was the forecast's own RR stream; the forecast is forward Monte Carlo now.
TAG_EST, TAG_FINAL, TAG_R1, TAG_R2, TAG_EVAL = 1, 2, 3, 4, 5


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


def check_eps(epsilon: float, name: str = "epsilon") -> None:
    if not (isinstance(epsilon, (int, float)) and 0 < epsilon < 1):
        raise InvalidParameter(f"{name} must be in (0, 1), got {epsilon!r}", field=name)


def degrees_of(dg: DiffusionGraph) -> NDArray[np.float64]:
    return np.diff(dg.out_indptr).astype(np.float64)


def forecast(dg: DiffusionGraph, seeds: Sequence[int], *, runs: int, random_seed: int,
             weights: NDArray[np.float64] | None, rounds: int | None) -> ReachEstimate | None:
    """Independent forecast of the chosen set: the diffusion family's forward Monte
    Carlo (:func:`~service.analytics.diffusion.cascades.estimate_spread`) with a
    different seed from the one the choice used."""
    if runs <= 0 or not seeds:
        return None
    from ..diffusion.cascades import estimate_spread

    e = estimate_spread(dg, list(seeds), runs=runs, rounds=rounds,
                        random_seed=random_seed + 1, weights=weights)
    return ReachEstimate(float(e.mean), float(e.stderr), int(e.runs), "forward_monte_carlo")


def rr_hits(sampler: RRSampler, seeds: Sequence[int], *, samples: int, key: np.uint64,
            progress: Progress | None = None) -> ReachEstimate:
    """Reach of ``seeds`` as the share of ``samples`` RR sets they meet (sets not stored)."""
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


def lb_floor(rules: SeedRules, w: NDArray[np.float64] | None) -> float:
    """A lower bound of OPT that needs no sampling: 1 person (the paper's
    start value); with audience values, the largest value of anyone who
    could be in the set (it reaches itself)."""
    if w is None:
        return 1.0
    pool = rules.candidates.copy()
    if rules.costs is not None and rules.cost_left is not None:
        pool &= rules.costs <= rules.cost_left
    if rules.caps_left is not None and rules.group is not None:
        pool &= rules.caps_left[rules.group] > 0
    must = float(w[list(rules.must)].sum())
    extra = float(w[pool].max()) if pool.any() and rules.free_places > 0 else 0.0
    return must + extra


def opt_floor(rules: SeedRules, w: NDArray[np.float64] | None) -> float:
    """OPT is at least this without sampling: every seed reaches itself, so a
    full feasible set of k people reaches k (the paper's OPT >= k); under a
    cost budget at least one person; with audience values, the largest value
    of anyone who could be chosen."""
    if w is not None:
        return max(lb_floor(rules, w), 1e-12)
    if rules.cost_left is not None:
        return float(max(len(rules.must), 1))
    return float(len(rules.must) + rules.free_places)


def prefix_gains(coll: RRCollection, seeds: Sequence[int]) -> NDArray[np.int64]:
    """Sets newly covered by each seed in turn (an ordered list's reach curve)."""
    inv_indptr, inv_sets, counts0 = coll.index()
    counts = counts0.copy()
    covered = np.zeros(coll.count, dtype=np.uint8)
    offsets, nodes = coll.offsets, coll.nodes
    return np.array([K.cover_node(v, inv_indptr, inv_sets, offsets, nodes, covered, counts)
                     for v in seeds], dtype=np.int64)
