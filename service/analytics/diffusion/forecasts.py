"""Reach forecasts: Monte Carlo simulation until the interval of the mean is narrow enough.

For each named seed set, :func:`forecast` runs Independent Cascade or Linear
Threshold simulations [1]_ on common simulated worlds
(:mod:`service.analytics.diffusion._world_kernels`: the same worlds for every set, so a
comparison of sets is paired, and a set gives the same figures here and in
:func:`service.analytics.diffusion.paired.compare_reach`), in batches, until the confidence interval
of the mean reach is as narrow as asked or a cap is hit, and summarises them:
the mean with its standard error and interval, the percentiles of single
outcomes, the adoption curve per round, the people most likely reached,
expected reach per segment and, with node weights, the weighted (target) reach.

References
----------
.. [1] D. Kempe, J. Kleinberg, E. Tardos (2003). Maximizing the spread of
   influence through a social network. KDD '03. doi:10.1145/956750.956769
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from statistics import NormalDist
from typing import NamedTuple

import numpy as np
from numpy.typing import ArrayLike, NDArray

from . import _kernels as K
from . import _world_kernels as W
from .._chunks import ChunkSizer, check_memory, thread_count
from .cascades import (
    _check_count,
    _check_rounds,
    _check_seed,
    _check_seeds,
    _check_weights,
    _is_number,
)
from ..errors import InvalidParameter
from ..graph import DiffusionGraph
from .paired import world_key

#: Bytes kept per simulation run: reach (int64), weighted reach (float64), depth (int32).
RUN_BYTES = 20

__all__ = [
    "PERCENTILES",
    "IntervalEstimate",
    "RoundForecast",
    "NodeReach",
    "ForecastResult",
    "forecast",
]

PERCENTILES: tuple[int, ...] = (5, 25, 50, 75, 95)
Progress = Callable[[float, str], None]


class IntervalEstimate(NamedTuple):
    """A mean with its standard error and normal confidence interval of the mean."""

    mean: float
    stderr: float
    ci_low: float
    ci_high: float


class RoundForecast(NamedTuple):
    """Round ``round`` of the adoption curve: mean new and cumulative reach (with interval)."""

    round: int
    new_mean: float
    cumulative_mean: float
    cumulative_ci_low: float
    cumulative_ci_high: float


class NodeReach(NamedTuple):
    """A node's estimated probability of being reached, with its standard error."""

    node: int
    probability: float
    stderr: float


@dataclass(frozen=True, eq=False)
class ForecastResult:
    """The reach forecast of one seed set (see :func:`forecast`).

    ``expected_reach`` is the mean number of people reached with the normal
    interval of that mean at ``confidence``; ``percentiles`` describe the spread
    of single outcomes (keys in :data:`PERCENTILES`), a different thing.
    ``by_round`` is the adoption curve, round 0 being the seeds. ``top_nodes``
    are the people most likely reached (seeds left out unless
    ``top_nodes_include_seeds``). ``segment_reach`` is the expected number
    reached in each segment. ``weighted_reach`` and ``weighted_percentiles``
    are the summed node values reached, when weights were given.
    ``outcome_histogram`` counts the simulated outcomes (reach of single runs)
    in bins of whole numbers of people. ``half_width`` is the interval's final half-width, ``stopped_because`` is
    ``"precision_reached"`` or ``"simulation_cap"``, and ``stream_key`` the
    key of the simulated worlds (:func:`service.analytics.diffusion.paired.world_key` of
    ``random_seed``, the same for every set).
    """

    seeds: NDArray[np.int32]
    expected_reach: IntervalEstimate
    percentiles: dict[int, float]
    by_round: tuple[RoundForecast, ...]
    top_nodes: tuple[NodeReach, ...]
    top_nodes_include_seeds: bool
    segment_reach: dict[str, float]
    weighted_reach: IntervalEstimate | None
    weighted_percentiles: dict[int, float] | None
    simulations: int
    stopped_because: str
    half_width: float
    confidence: float
    rounds: int | None
    random_seed: int
    stream_key: int
    outcome_histogram: dict[str, list[float] | list[int]] | None = None
    #: People reached (summed node values, with weights) in each simulated campaign, in index
    #: order. Campaign ``i`` is the same world for every set, so two sets compare pairwise on
    #: their first common campaigns (:func:`service.analytics.diffusion.paired.paired_interval`).
    per_run: NDArray[np.float64] | None = None
    #: Threads the simulations ran on (the figures are the same for any number).
    threads: int = 1


def forecast(
    dg: DiffusionGraph,
    seed_sets: Mapping[str, ArrayLike],
    *,
    simulations: int = 10_000,
    min_simulations: int = 200,
    precision: float | None = None,
    relative_precision: float | None = None,
    confidence: float = 0.95,
    rounds: int | None = None,
    random_seed: int = 0,
    segments: NDArray[np.int32] | None = None,
    segment_labels: Sequence[str] = (),
    weights: NDArray[np.float64] | None = None,
    top_nodes: int = 20,
    include_seeds: bool = False,
    progress: Progress | None = None,
    threads: int | None = None,
) -> dict[str, ForecastResult]:
    """Forecast the reach of each named seed set, simulating until precise enough.

    For each set, simulations of ``dg.model`` [1]_ run in batches until the
    confidence interval of the mean reach is narrow enough or ``simulations``
    have run; the result says which happened.

    Parameters
    ----------
    dg : diffusion graph (Independent Cascade or Linear Threshold).
    seed_sets : name -> node indices; every set is simulated on the same worlds
        (common random numbers, :func:`~service.analytics.diffusion.paired.world_key` ``(random_seed)``,
        see :mod:`service.analytics.diffusion._world_kernels`): differences between sets come from
        their seeds, not from luck, and adding, renaming or reordering other sets does
        not change a set's result.
    simulations : the cap on simulations per set (>= 2).
    min_simulations : simulations run before the stopping rule is first checked
        (clipped to ``simulations``).
    precision : stop once the interval's half-width is at most this many people.
    relative_precision : stop once the half-width is at most this fraction of the mean.
        With both given, both must hold; with neither, exactly ``simulations`` run.
    confidence : level of the intervals, in (0, 1).
    rounds : horizon in rounds (>= 1) or None.
    random_seed : the seed every stream is derived from.
    segments : optional segment code per node (-1 = none) into ``segment_labels``.
    segment_labels : names of the segment codes.
    weights : optional non-negative value per node (target audience).
    top_nodes : how many of the most likely reached people to list (>= 0).
    include_seeds : whether the seeds (reached with probability 1) may be listed.
    progress : called as ``progress(fraction, message)`` after every batch; it may
        raise :class:`~service.analytics.errors.Cancelled`, which propagates.
    threads : most threads to simulate on (default: every core the process may use).
        Simulation ``i`` depends only on ``(random_seed, i)`` and the parts are merged
        in index order, so every figure is bit-identical for any number of threads.

    Returns
    -------
    dict of str to ForecastResult
        One result per seed set, in the order given.

    Raises
    ------
    InvalidParameter
        An empty seed set or no sets, ``rounds < 1``, ``confidence`` outside (0, 1),
        a precision <= 0, bad counts, segment codes or weights.
    UnknownNode
        A seed outside ``0..n-1`` (``field`` names the set, ``node_index`` the seed).

    Notes
    -----
    Intervals are normal intervals of the mean, mean +- z * s / sqrt(N) with
    z the two-sided normal quantile of ``confidence`` and s the sample
    standard deviation; the adoption curve's intervals are the same for the
    cumulative reach after each round. Percentiles use linear interpolation
    between order statistics. The stopping rule only looks at the number of
    people reached (not at weighted reach). Checking it after every batch makes
    the number of simulations data-dependent; the coverage of such intervals
    tends to ``confidence`` as the asked width shrinks [2]_, and for wide ones
    may fall a little short, which ``min_simulations`` limits. After
    each batch the next one is sized from the current variance to just reach
    the precision, but at most doubles the simulations so far (so progress is
    reported regularly). Segment reach is the expected number of reached
    nodes in each segment, the sum of their activation probabilities; nodes
    with code -1 count in no segment.

    References
    ----------
    .. [1] D. Kempe, J. Kleinberg, E. Tardos (2003). Maximizing the spread
       of influence through a social network. KDD '03.
       doi:10.1145/956750.956769
    .. [2] Y. S. Chow, H. Robbins (1965). On the asymptotic theory of
       fixed-width sequential confidence intervals for the mean. Ann. Math.
       Statist. 36(2), 457-462.

    Examples
    --------
    >>> import numpy as np
    >>> from service.analytics.graph import GraphArrays, diffusion_graph
    >>> g = GraphArrays(4, True, np.array([0, 1, 2], np.int32),
    ...                 np.array([1, 2, 3], np.int32), np.ones(3))
    >>> dg = diffusion_graph(g, scheme="uniform", p=1.0)
    >>> r = forecast(dg, {"a": [0]}, precision=0.5)["a"]
    >>> r.expected_reach.mean, r.stopped_because, r.simulations
    (4.0, 'precision_reached', 200)
    >>> [c.cumulative_mean for c in r.by_round]
    [1.0, 2.0, 3.0, 4.0]
    """
    kg = K.kernel_graph(dg)
    if not isinstance(seed_sets, Mapping) or not seed_sets:
        raise InvalidParameter("give at least one seed set", field="seed_sets")
    sets: dict[str, NDArray[np.int32]] = {}
    for name, seeds in seed_sets.items():
        if not isinstance(name, str):
            raise InvalidParameter("seed set names must be strings", field="seed_sets")
        sets[name] = _check_seeds(dg, seeds, field=f"seed_sets.{name}")
    cap = _check_count(simulations, "simulations", minimum=2)
    first = min(_check_count(min_simulations, "min_simulations", minimum=2), cap)
    for field, value in (("precision", precision), ("relative_precision", relative_precision)):
        if value is not None and not (_is_number(value) and math.isfinite(value) and value > 0):
            raise InvalidParameter(f"{field} must be a number > 0, got {value!r}", field=field)
    if not (_is_number(confidence) and 0.0 < confidence < 1.0):
        raise InvalidParameter(f"confidence must be in (0, 1), got {confidence!r}",
                               field="confidence")
    horizon = _check_rounds(rounds)
    key_seed = _check_seed(random_seed)
    w = _check_weights(dg, weights)
    codes, labels = _check_segments(dg, segments, segment_labels)
    ntop = _check_count(top_nodes, "top_nodes", minimum=0)
    z = NormalDist().inv_cdf(0.5 + confidence / 2.0)
    nthreads = thread_count(threads)

    out: dict[str, ForecastResult] = {}
    for j, (name, seeds) in enumerate(sets.items()):
        key = world_key(key_seed)
        res, reason = _run_until(kg, seeds, key, cap, first, z, precision, relative_precision,
                                 horizon, w, progress, j / len(sets), 1.0 / len(sets), name,
                                 nthreads)
        out[name] = _summarise(res, seeds, reason, z, confidence, rounds, key_seed, key,
                               w.size > 0, codes, labels, ntop, include_seeds, nthreads)
    return out


def _run_until(kg: K.KernelGraph, seeds: NDArray[np.int32], key: int, cap: int, first: int,
               z: float, precision: float | None, relative: float | None, horizon: int,
               w: NDArray[np.float64], progress: Progress | None, base: float, share: float,
               name: str, threads: int) -> tuple[K.ChunkResult, str]:
    """Simulate in batches until the stopping rule holds or ``cap`` runs are done."""
    res: K.ChunkResult | None = None
    done, batch = 0, first
    sizer = ChunkSizer(first=min(first, 64))
    while True:
        # Every run kept costs its per-run arrays (reach, weighted reach, depth) twice
        # while chunks are merged; each thread holds per-node counts and scratch.
        check_memory(2 * RUN_BYTES * (done + batch) + 8 * kg.n * (2 + 2 * threads),
                     what=f"{done + batch:,} simulations", relax="lower simulations")
        end = done + batch
        parts = [] if res is None else [res]
        while done < end:
            # The batch in chunks of about a quarter second, each a cancel point; runs
            # depend only on their index, so the merged result is the same.
            count = sizer.next(end - done)
            t0 = time.perf_counter()
            part = W.simulate(kg, seeds, key, done, count, horizon, w, threads=threads)
            sizer.took(count, time.perf_counter() - t0)
            parts.append(part)
            done += count
            if progress is not None and done < end:
                progress(base + share * done / cap, f"seed set {name!r}: {done} simulations")
        res = K.merge(parts)
        mean, var = K.mean_var(res.reach.astype(np.float64))
        half = z * math.sqrt(var / done)
        targets = [t for t in (precision, None if relative is None else relative * mean)
                   if t is not None]
        met = bool(targets) and all(half <= t for t in targets)
        finished = met or done >= cap
        if progress is not None:
            progress(base + share * (1.0 if finished else done / cap),
                     f"seed set {name!r}: {done} simulations")
        if finished:
            return res, "precision_reached" if met else "simulation_cap"
        need = cap
        if targets and min(targets) > 0:
            need = math.ceil(1.1 * done * (half / min(targets)) ** 2)
        batch = int(min(cap - done, max(need - done, 50), max(done, 1000)))


def _summarise(res: K.ChunkResult, seeds: NDArray[np.int32], reason: str, z: float,
               confidence: float, rounds: int | None, random_seed: int, key: int,
               weighted: bool, codes: NDArray[np.int32], labels: tuple[str, ...], ntop: int,
               include_seeds: bool, threads: int) -> ForecastResult:
    nsim = int(res.reach.shape[0])
    reach = _interval(res.reach, z)
    # Cumulative reach after each round: sums from the new-activation counts,
    # sums of squares from the exact integer halves (runs that stopped early
    # count with their final reach).
    cum_sum = np.cumsum(res.new).astype(np.float64)
    length = cum_sum.shape[0]
    hi = res.sq_hi + np.cumsum(res.tail_hi)[:length]
    lo = res.sq_lo + np.cumsum(res.tail_lo)[:length]
    sq_sum = hi.astype(np.float64) * 4294967296.0 + lo.astype(np.float64)
    cum_mean = cum_sum / nsim
    var = np.maximum(sq_sum - nsim * cum_mean**2, 0.0) / (nsim - 1)
    cum_half = z * np.sqrt(var / nsim)
    new_mean = res.new / nsim
    by_round = tuple(
        RoundForecast(r, float(new_mean[r]), float(cum_mean[r]),
                      float(cum_mean[r] - cum_half[r]), float(cum_mean[r] + cum_half[r]))
        for r in range(length)
    )
    prob = res.count / nsim
    rank = prob.copy()
    if not include_seeds:
        rank[seeds] = -1.0
    order = np.lexsort((np.arange(prob.shape[0]), -rank))[:ntop]
    top = tuple(NodeReach(int(v), float(prob[v]), float(math.sqrt(prob[v] * (1 - prob[v]) / nsim)))
                for v in order if rank[v] > 0)
    seg: dict[str, float] = {}
    if labels:
        inside = codes >= 0
        per = np.bincount(codes[inside], weights=res.count[inside], minlength=len(labels))
        seg = {label: float(per[i] / nsim) for i, label in enumerate(labels)}
    return ForecastResult(
        seeds=seeds,
        expected_reach=reach,
        percentiles=_percentiles(res.reach),
        by_round=by_round,
        top_nodes=top,
        top_nodes_include_seeds=include_seeds,
        segment_reach=seg,
        weighted_reach=_interval(res.weighted, z) if weighted else None,
        weighted_percentiles=_percentiles(res.weighted) if weighted else None,
        simulations=nsim,
        stopped_because=reason,
        half_width=reach.ci_high - reach.mean,
        confidence=float(confidence),
        rounds=rounds,
        random_seed=random_seed,
        stream_key=key,
        outcome_histogram=outcome_histogram(res.reach),
        per_run=np.asarray(res.weighted if weighted else res.reach, dtype=np.float64),
        threads=threads,
    )


def _interval(values: NDArray[np.generic], z: float) -> IntervalEstimate:
    mean, var = K.mean_var(np.asarray(values, dtype=np.float64))
    se = math.sqrt(var / values.shape[0])
    return IntervalEstimate(mean, se, mean - z * se, mean + z * se)


def outcome_histogram(values: ArrayLike, bins: int = 200) -> dict[str, list[float] | list[int]]:
    """Counts of simulated outcomes in at most ``bins`` equal bins of whole numbers of people.

    The bins are fine (200 by default) so that a plot can merge them into
    coarser bars, on edges shared by several seed sets, without artefacts.

    Bin ``i`` holds ``edges[i] <= x < edges[i + 1]`` (the last bin includes its
    right edge).

    Examples
    --------
    >>> outcome_histogram([3, 3, 4, 7])
    {'edges': [3.0, 4.0, 5.0, 6.0, 7.0, 8.0], 'counts': [2, 1, 0, 0, 1]}
    """
    v = np.asarray(values, dtype=np.float64)
    if v.size == 0:
        return {"edges": [], "counts": []}
    lo, hi = math.floor(float(v.min())), math.floor(float(v.max())) + 1
    width = max(1, math.ceil((hi - lo) / bins))
    edges = np.arange(lo, hi + width, width, dtype=np.float64)
    edges = edges[: np.searchsorted(edges, hi) + 1]
    counts = np.histogram(v, bins=edges)[0]
    return {"edges": edges.tolist(), "counts": [int(c) for c in counts]}


def _percentiles(values: NDArray[np.generic]) -> dict[int, float]:
    q = np.percentile(np.asarray(values, dtype=np.float64), PERCENTILES)
    return {p: float(v) for p, v in zip(PERCENTILES, q)}


# ---------------------------------------------------------------- validation

def _check_segments(dg: DiffusionGraph, segments: ArrayLike | None,
                    labels: Sequence[str]) -> tuple[NDArray[np.int32], tuple[str, ...]]:
    """Segment codes per node in ``-1 .. len(labels) - 1``."""
    names = tuple(str(x) for x in labels)
    if segments is None:
        if names:
            raise InvalidParameter("segment_labels given without segments", field="segments")
        return np.zeros(0, dtype=np.int32), ()
    codes = np.asarray(segments)
    if codes.shape != (dg.n,) or codes.dtype.kind not in "iu":
        raise InvalidParameter(f"segments need one integer code per node ({dg.n})",
                               field="segments")
    bad = np.flatnonzero((codes < -1) | (codes >= len(names)))
    if bad.size:
        raise InvalidParameter(f"segment code {int(codes[bad[0]])} has no label",
                               field="segments", node_index=int(bad[0]))
    return codes.astype(np.int32), names
