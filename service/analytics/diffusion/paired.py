"""Paired comparison of seed sets on common simulated campaigns.

Every seed set is simulated on the same live-edge worlds (common random
numbers, :mod:`service.analytics.diffusion._world_kernels`): world ``i`` decides once
which ties pass the message on (Independent Cascade) or how easily each person
is persuaded (Linear Threshold), and every set is run in it. The difference in
reach between two sets is then measured world by world, which removes the
variation the sets share; the interval of its mean is a paired t interval.
:func:`service.analytics.diffusion.forecasts.forecast` runs on the same worlds, so a
forecast of one set with the same ``random_seed`` and number of simulations
gives the same mean reach as here.

References
----------
.. [1] D. Kempe, J. Kleinberg, E. Tardos (2003). Maximizing the spread of
   influence through a social network. KDD '03 (live-edge worlds).
.. [2] A. M. Law (2015). Simulation Modeling and Analysis, 5th ed., Sec. 10.2
   (common random numbers and the paired-t interval; from memory).
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import stats

from . import _kernels as K
from . import _world_kernels as W
from .._chunks import ChunkSizer, check_memory, thread_count
from .cascades import (_check_count, _check_rounds, _check_seed, _check_seeds, _check_weights,
                        _is_number, stream_key)
from ..errors import InvalidParameter
from ..graph import DiffusionGraph

__all__ = [
    "WORLDS_LABEL",
    "world_key",
    "Interval",
    "PairedComparison",
    "paired_interval",
    "compare_reach",
]

WORLDS_LABEL = "worlds"
Progress = Callable[[float, str], None]


def world_key(random_seed: int) -> int:
    """The key of the common worlds under ``random_seed``:
    :func:`~service.analytics.diffusion.cascades.stream_key` ``(random_seed, "worlds")``."""
    return stream_key(random_seed, WORLDS_LABEL)


class Interval(NamedTuple):
    """A mean with its standard error and confidence interval."""

    mean: float
    stderr: float
    ci_low: float
    ci_high: float


@dataclass(frozen=True, eq=False)
class PairedComparison:
    """Reach of every set on the same ``simulations`` worlds, and paired differences.

    ``reach[name]`` is the mean reach (people, or audience value with weights)
    with a t interval; ``differences[name]`` is reference minus ``name``,
    world by world, with its paired t interval (absent for the reference).
    ``per_world[name]`` holds the reach in each world. ``stopped_because`` is
    ``"precision_reached"`` or ``"simulation_cap"``.
    """

    reference: str
    reach: dict[str, Interval]
    differences: dict[str, Interval]
    per_world: dict[str, NDArray[np.float64]]
    simulations: int
    confidence: float
    random_seed: int
    stopped_because: str


def paired_interval(a: ArrayLike, b: ArrayLike, confidence: float = 0.95) -> Interval:
    """Mean of ``a - b`` (paired by position) with its t interval at ``confidence``.

    mean +- t_{N-1, (1 + confidence) / 2} * s / sqrt(N), s the sample standard
    deviation of the differences (ddof 1). With N = 1 the interval is unbounded.

    Examples
    --------
    >>> paired_interval([3.0, 4.0, 5.0], [1.0, 2.0, 3.0]).mean
    2.0
    >>> paired_interval([3.0, 4.0, 5.0], [1.0, 2.0, 3.0]).ci_low
    2.0
    """
    d = np.asarray(a, dtype=np.float64) - np.asarray(b, dtype=np.float64)
    if d.ndim != 1 or d.size == 0:
        raise InvalidParameter("paired samples must be two equal, non-empty lists", field="a")
    mean = float(d.mean())
    if d.size < 2:
        return Interval(mean, math.inf, -math.inf, math.inf)
    # Exact zero spread (identical sets) stays exactly zero.
    se = float(np.std(d, ddof=1)) / math.sqrt(d.size) if np.any(d != d[0]) else 0.0
    half = float(stats.t.ppf(0.5 + confidence / 2.0, d.size - 1)) * se
    return Interval(mean, se, mean - half, mean + half)


def compare_reach(
    dg: DiffusionGraph,
    seed_sets: Mapping[str, ArrayLike],
    *,
    reference: str,
    min_simulations: int = 1000,
    max_simulations: int = 20_000,
    relative_precision: float = 0.01,
    confidence: float = 0.95,
    rounds: int | None = None,
    random_seed: int = 0,
    weights: NDArray[np.float64] | None = None,
    progress: Progress | None = None,
    threads: int | None = None,
) -> PairedComparison:
    """Simulate every set on the same worlds until each paired difference is precise.

    Worlds ``0, 1, ...`` of :func:`world_key` ``(random_seed)`` are run in
    batches for every set, until the half-width of every difference
    (reference minus the set) is at most ``relative_precision`` times the
    reference's mean reach, or ``max_simulations`` worlds have run.

    Parameters
    ----------
    dg : the diffusion graph (IC or LT).
    seed_sets : name -> node indices (at least the reference).
    reference : the name every other set is compared with.
    min_simulations, max_simulations : worlds before the rule is first checked, and the cap.
    relative_precision : the target half-width as a fraction of the reference's reach.
    confidence : level of every interval.
    rounds : campaign horizon in rounds, or None.
    random_seed : the seed of the worlds.
    weights : optional value per node; reach then counts audience value.
    progress : ``progress(fraction, message)`` after every batch; may raise ``Cancelled``.
    threads : most threads to run on (default: every core the process may use); the
        result is bit-identical for any number (worlds are split by index, merged in order).

    Returns
    -------
    PairedComparison

    Raises
    ------
    InvalidParameter
        No sets, an unknown reference, bad counts, precision, confidence or weights.
    UnknownNode
        A seed outside the graph.

    Notes
    -----
    Checking the stopping rule after each batch makes the number of worlds
    depend on the data; the intervals' coverage tends to ``confidence`` as the
    asked width shrinks (Chow and Robbins 1965).

    Examples
    --------
    >>> import numpy as np
    >>> from service.analytics.graph import GraphArrays, diffusion_graph
    >>> g = GraphArrays(4, True, np.array([0, 1, 2], np.int32),
    ...                 np.array([1, 2, 3], np.int32), np.ones(3))
    >>> dg = diffusion_graph(g, scheme="uniform", p=0.5)
    >>> c = compare_reach(dg, {"a": [0, 2], "b": [0]}, reference="a", min_simulations=500)
    >>> bool(c.differences["b"].ci_low > 0), bool((c.per_world["a"] >= c.per_world["b"]).all())
    (True, True)
    """
    if not isinstance(seed_sets, Mapping) or reference not in seed_sets:
        raise InvalidParameter("the reference must be one of the seed sets", field="reference")
    kg = K.kernel_graph(dg)
    sets = {str(name): _check_seeds(dg, s, field=f"seed_sets.{name}")
            for name, s in seed_sets.items()}
    cap = _check_count(max_simulations, "max_simulations", minimum=2)
    first = min(_check_count(min_simulations, "min_simulations", minimum=2), cap)
    if not (_is_number(relative_precision) and relative_precision > 0):
        raise InvalidParameter("relative_precision must be > 0", field="relative_precision")
    if not (_is_number(confidence) and 0.0 < confidence < 1.0):
        raise InvalidParameter("confidence must be in (0, 1)", field="confidence")
    horizon = _check_rounds(rounds)
    seed = _check_seed(random_seed)
    w = _check_weights(dg, weights)
    key = world_key(seed)
    nthreads = thread_count(threads)
    parts: dict[str, list[NDArray[np.float64]]] = {name: [] for name in sets}
    done, batch = 0, first
    sizer = ChunkSizer(first=min(first, 64))
    while True:
        # Each list's outcome per campaign is kept (8 bytes a campaign and list).
        check_memory(8 * len(sets) * (done + batch) * 2 + 8 * kg.n * (2 + 2 * nthreads),
                     what=f"{done + batch:,} simulated campaigns for {len(sets)} lists",
                     relax="lower forecast_max_runs")
        for j, (name, s) in enumerate(sets.items()):
            start = done
            while start < done + batch:
                # Timed chunks, each a cancel point; a campaign depends only on its index,
                # so the chunks give the campaigns one call would.
                count = sizer.next(done + batch - start)
                t0 = time.perf_counter()
                res = W.simulate(kg, s, key, start, count, horizon, w, track_nodes=False,
                                 threads=nthreads)
                sizer.took(count, time.perf_counter() - t0)
                parts[name].append(res.weighted.astype(np.float64))
                start += count
                if progress is not None:
                    progress(min((done + (start - done + batch * j) / len(sets)) / cap, 1.0),
                             f"comparing the lists on {done + batch:,} simulated campaigns")
        done += batch
        per = {name: np.concatenate(p) for name, p in parts.items()}
        ref = per[reference]
        target = relative_precision * abs(float(ref.mean()))
        halves = [(lambda d: d.ci_high - d.mean)(paired_interval(ref, x, confidence))
                  for name, x in per.items() if name != reference]
        worst = max(halves, default=0.0)
        met = worst <= target
        if met or done >= cap:
            break
        need = math.ceil(1.1 * done * (worst / target) ** 2) if target > 0 else cap
        batch = int(min(cap - done, max(need - done, 100), max(done, 1000)))
    reach = {name: _mean_interval(x, confidence) for name, x in per.items()}
    diffs = {name: paired_interval(ref, x, confidence) for name, x in per.items()
             if name != reference}
    return PairedComparison(reference, reach, diffs, per, done, float(confidence), seed,
                            "precision_reached" if met else "simulation_cap")


def _mean_interval(x: NDArray[np.float64], confidence: float) -> Interval:
    mean, var = K.mean_var(x)
    se = math.sqrt(var / x.size) if x.size > 1 else math.inf
    half = float(stats.t.ppf(0.5 + confidence / 2.0, max(x.size - 1, 1))) * se
    return Interval(mean, se, mean - half, mean + half)
