"""Independent Cascade and Linear Threshold simulation, spread estimates and reach forecasts.

The models are those of Kempe, Kleinberg and Tardos [1]_, run forward by the
compiled loops in :mod:`service.analytics._kernels` over a
:class:`~service.analytics.graph.DiffusionGraph` (arc probabilities for IC,
incoming weights b(u, v) for LT). Round 0 is the seed set; a node activated in
round ``t`` acts in round ``t + 1``; a horizon of ``rounds = r`` stops after
round ``r``.

Reproducibility: every function takes a random seed; stream ``label`` of seed
``s`` has the 64-bit key :func:`stream_key` ``(s, label)``, and run ``i`` of a
stream uses random numbers that depend on ``(key, i)`` only, so results do not
depend on how runs are batched or on how many threads ran them.

References
----------
.. [1] D. Kempe, J. Kleinberg, E. Tardos (2003). Maximizing the spread of
   influence through a social network. KDD '03. doi:10.1145/956750.956769
"""

from __future__ import annotations

import hashlib
import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from statistics import NormalDist
from typing import NamedTuple

import numpy as np
from numpy.typing import ArrayLike, NDArray

from . import _kernels as K
from .errors import InvalidParameter, UnknownNode
from .graph import DiffusionGraph

__all__ = [
    "PERCENTILES",
    "SpreadEstimate",
    "IntervalEstimate",
    "RoundForecast",
    "NodeReach",
    "ForecastResult",
    "stream_key",
    "independent_cascade",
    "linear_threshold",
    "estimate_spread",
    "forecast",
]

PERCENTILES: tuple[int, ...] = (5, 25, 50, 75, 95)
MAX_RUNS = 100_000_000  # per call; the per-run arrays alone take 20 bytes a run
Progress = Callable[[float, str], None]


class SpreadEstimate(NamedTuple):
    """Monte Carlo estimate of the expected spread: mean, its standard error, runs."""

    mean: float
    stderr: float
    runs: int


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
    ``half_width`` is the interval's final half-width, ``stopped_because`` is
    ``"precision_reached"`` or ``"simulation_cap"``, and ``stream_key`` the
    key of the random stream used (:func:`stream_key` of ``random_seed`` and
    the set's name).
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


def stream_key(random_seed: int, label: str = "") -> int:
    """The 64-bit key of random stream ``label`` under ``random_seed``.

    It is the first 8 bytes (little-endian) of BLAKE2b with an 8-byte digest of
    the UTF-8 text ``"bellwether.diffusion:{random_seed}:{label}"``.
    :func:`estimate_spread` and the single-run functions use ``label = ""``;
    :func:`forecast` uses the seed set's name.

    Examples
    --------
    >>> stream_key(0) == stream_key(0, "")
    True
    >>> stream_key(0, "a") != stream_key(0, "b")
    True
    """
    seed = _check_seed(random_seed)
    text = f"bellwether.diffusion:{seed}:{label}".encode()
    return int.from_bytes(hashlib.blake2b(text, digest_size=8).digest(), "little")


def independent_cascade(
    dg: DiffusionGraph,
    seeds: ArrayLike,
    *,
    rounds: int | None = None,
    rng_seed: int,
) -> NDArray[np.int32]:
    """Simulate one Independent Cascade run from ``seeds``.

    Each newly active node has one chance, in the next round, to activate each
    inactive out-neighbour ``v`` along arc ``e``, with probability
    ``dg.out_prob[e]`` [1]_.

    Parameters
    ----------
    dg : diffusion graph built with ``model="ic"``.
    seeds : node indices active in round 0 (duplicates ignored).
    rounds : horizon in rounds (>= 1), or None to run until no node activates.
    rng_seed : the random seed; the run is run 0 of :func:`stream_key` ``(rng_seed)``,
        the same run :func:`estimate_spread` with ``random_seed=rng_seed`` starts with.

    Returns
    -------
    numpy.ndarray of int32
        The round in which each node became active, or -1.

    Raises
    ------
    InvalidParameter
        Empty seed set, ``rounds < 1``, or a graph built for another model.
    UnknownNode
        A seed outside ``0..n-1`` (``node_index`` names it).

    Notes
    -----
    Cost O(n + arcs leaving active nodes). Coins have 2**-32 resolution; see
    :mod:`service.analytics._kernels` for the random streams and for geometric
    skipping under uniform probabilities.

    References
    ----------
    .. [1] D. Kempe, J. Kleinberg, E. Tardos (2003). Maximizing the spread
       of influence through a social network. KDD '03.
       doi:10.1145/956750.956769

    Examples
    --------
    >>> import numpy as np
    >>> from service.analytics.graph import GraphArrays, diffusion_graph
    >>> g = GraphArrays(4, True, np.array([0, 1, 2], np.int32),
    ...                 np.array([1, 2, 3], np.int32), np.ones(3))
    >>> dg = diffusion_graph(g, scheme="uniform", p=1.0)
    >>> independent_cascade(dg, [0], rng_seed=7).tolist()
    [0, 1, 2, 3]
    >>> independent_cascade(dg, [0], rounds=2, rng_seed=7).tolist()
    [0, 1, 2, -1]
    """
    return _single(dg, "ic", seeds, rounds, rng_seed)


def linear_threshold(
    dg: DiffusionGraph,
    seeds: ArrayLike,
    *,
    rounds: int | None = None,
    rng_seed: int,
) -> NDArray[np.int32]:
    """Simulate one Linear Threshold run from ``seeds``.

    Every node ``v`` draws a threshold uniformly in (0, 1]; it becomes active
    in the round after the summed weights b(u, v) of its active in-neighbours
    first reach the threshold [1]_.

    Parameters
    ----------
    dg : diffusion graph built with ``model="lt"`` (incoming weights sum to at most 1).
    seeds : node indices active in round 0 (duplicates ignored).
    rounds : horizon in rounds (>= 1), or None to run until no node activates.
    rng_seed : the random seed (run 0 of :func:`stream_key` ``(rng_seed)``).

    Returns
    -------
    numpy.ndarray of int32
        The round in which each node became active, or -1.

    Raises
    ------
    InvalidParameter
        Empty seed set, ``rounds < 1``, or a graph built for another model.
    UnknownNode
        A seed outside ``0..n-1``.

    Notes
    -----
    A threshold is drawn when a node is first reached, which has the same law
    as drawing all of them up front. Cost O(n + arcs leaving active nodes).

    References
    ----------
    .. [1] D. Kempe, J. Kleinberg, E. Tardos (2003). Maximizing the spread
       of influence through a social network. KDD '03.
       doi:10.1145/956750.956769

    Examples
    --------
    >>> import numpy as np
    >>> from service.analytics.graph import GraphArrays, diffusion_graph
    >>> g = GraphArrays(4, True, np.array([0, 1, 2], np.int32),
    ...                 np.array([1, 2, 3], np.int32), np.ones(3))
    >>> dg = diffusion_graph(g, model="lt", scheme="normalized")
    >>> linear_threshold(dg, [1], rng_seed=0).tolist()
    [-1, 0, 1, 2]
    """
    return _single(dg, "lt", seeds, rounds, rng_seed)


def estimate_spread(
    dg: DiffusionGraph,
    seeds: ArrayLike,
    *,
    runs: int = 1000,
    rounds: int | None = None,
    random_seed: int = 0,
    weights: NDArray[np.float64] | None = None,
) -> SpreadEstimate:
    """Monte Carlo estimate of the expected spread sigma(seeds) under ``dg.model``.

    Parameters
    ----------
    dg : diffusion graph; ``dg.model`` picks Independent Cascade or Linear Threshold [1]_.
    seeds : node indices (a sequence or an integer array; duplicates ignored).
    runs : number of simulations (>= 1).
    rounds : horizon in rounds (>= 1), or None for no horizon.
    random_seed : seeds stream :func:`stream_key` ``(random_seed)``.
    weights : optional non-negative value per node; the spread is then the
        summed value of the active nodes (a target audience) instead of their number.

    Returns
    -------
    SpreadEstimate
        ``mean``, ``stderr`` (sample standard deviation / sqrt(runs); NaN for
        one run) and ``runs``.

    Raises
    ------
    InvalidParameter
        Empty seed set, ``runs < 1``, ``rounds < 1``, or bad ``weights``.
    UnknownNode
        A seed outside ``0..n-1``.

    Notes
    -----
    Built for many small calls (lazy greedy calls it thousands of times): the
    kernel arrays of the last few graphs are cached by identity, and runs are
    split over threads only when a serial pilot shows the work is worth it.
    Kempe et al. (Prop. 4.1) bound the runs needed for a (1 +- eps) estimate;
    in practice read the standard error.

    References
    ----------
    .. [1] D. Kempe, J. Kleinberg, E. Tardos (2003). Maximizing the spread
       of influence through a social network. KDD '03.
       doi:10.1145/956750.956769

    Examples
    --------
    >>> import numpy as np
    >>> from service.analytics.graph import GraphArrays, diffusion_graph
    >>> g = GraphArrays(4, True, np.array([0, 1, 2], np.int32),
    ...                 np.array([1, 2, 3], np.int32), np.ones(3))
    >>> estimate_spread(diffusion_graph(g, scheme="uniform", p=1.0), [0], runs=50)
    SpreadEstimate(mean=4.0, stderr=0.0, runs=50)
    """
    kg = K.kernel_graph(dg)
    s = _check_seeds(dg, seeds)
    nruns = _check_count(runs, "runs", minimum=1)
    horizon = _check_rounds(rounds)
    w = _check_weights(dg, weights)
    res = K.simulate(kg, s, stream_key(random_seed), 0, nruns, horizon, w, track_nodes=False)
    mean, var = K.mean_var(res.weighted)
    return SpreadEstimate(mean, math.sqrt(var / nruns), nruns)


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
) -> dict[str, ForecastResult]:
    """Forecast the reach of each named seed set, simulating until precise enough.

    For each set, simulations of ``dg.model`` [1]_ run in batches until the
    confidence interval of the mean reach is narrow enough or ``simulations``
    have run; the result says which happened.

    Parameters
    ----------
    dg : diffusion graph (Independent Cascade or Linear Threshold).
    seed_sets : name -> node indices; each set is forecast on its own random stream,
        :func:`stream_key` ``(random_seed, name)``, so adding or renaming another set
        does not change a set's result.
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

    out: dict[str, ForecastResult] = {}
    for j, (name, seeds) in enumerate(sets.items()):
        key = stream_key(key_seed, name)
        res, reason = _run_until(kg, seeds, key, cap, first, z, precision, relative_precision,
                                 horizon, w, progress, j / len(sets), 1.0 / len(sets), name)
        out[name] = _summarise(res, seeds, reason, z, confidence, rounds, key_seed, key,
                               w.size > 0, codes, labels, ntop, include_seeds)
    return out


def _run_until(kg: K.KernelGraph, seeds: NDArray[np.int32], key: int, cap: int, first: int,
               z: float, precision: float | None, relative: float | None, horizon: int,
               w: NDArray[np.float64], progress: Progress | None, base: float, share: float,
               name: str) -> tuple[K.ChunkResult, str]:
    """Simulate in batches until the stopping rule holds or ``cap`` runs are done."""
    res: K.ChunkResult | None = None
    done, batch = 0, first
    while True:
        part = K.simulate(kg, seeds, key, done, batch, horizon, w)
        res = part if res is None else K.merge([res, part])
        done += batch
        mean, var = K.mean_var(res.reach)
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
               include_seeds: bool) -> ForecastResult:
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
    )


def _interval(values: NDArray[np.generic], z: float) -> IntervalEstimate:
    mean, var = K.mean_var(values)
    se = math.sqrt(var / values.shape[0])
    return IntervalEstimate(mean, se, mean - z * se, mean + z * se)


def _percentiles(values: NDArray[np.generic]) -> dict[int, float]:
    q = np.percentile(values, PERCENTILES)
    return {p: float(v) for p, v in zip(PERCENTILES, q)}


# ---------------------------------------------------------------- validation

def _check_seeds(dg: DiffusionGraph, seeds: ArrayLike, field: str = "seeds") -> NDArray[np.int32]:
    """Seeds as sorted unique int32 indices; raise on empty, non-integer or unknown."""
    arr = np.asarray(seeds)
    if arr.size == 0:
        raise InvalidParameter("the seed set is empty", field=field)
    if arr.dtype.kind not in "iu":
        if arr.dtype.kind != "f" or not bool(np.all(np.isfinite(arr) & (arr == np.round(arr)))):
            raise InvalidParameter("seeds must be integer node indices", field=field)
    flat = arr.astype(np.int64).ravel()
    bad = np.flatnonzero((flat < 0) | (flat >= dg.n))
    if bad.size:
        node = int(flat[bad[0]])
        raise UnknownNode(f"seed {node} is not a node index in 0..{dg.n - 1}",
                          field=field, node_index=node)
    return np.unique(flat).astype(np.int32)


def _check_rounds(rounds: int | None) -> int:
    """The horizon for the kernels: -1 for None, else an int >= 1."""
    if rounds is None:
        return -1
    if isinstance(rounds, bool) or not isinstance(rounds, (int, np.integer)) or rounds < 1:
        raise InvalidParameter(f"rounds must be an integer >= 1 or None, got {rounds!r}",
                               field="rounds")
    return int(min(int(rounds), 2**62))


def _check_count(value: int, field: str, *, minimum: int, maximum: int = MAX_RUNS) -> int:
    """An integer parameter in ``minimum .. maximum``."""
    if (isinstance(value, bool) or not isinstance(value, (int, np.integer))
            or not minimum <= value <= maximum):
        raise InvalidParameter(
            f"{field} must be an integer in {minimum}..{maximum}, got {value!r}", field=field)
    return int(value)


def _check_weights(dg: DiffusionGraph, weights: ArrayLike | None,
                  field: str = "weights") -> NDArray[np.float64]:
    """Per-node values as float64 (empty array for None); finite and non-negative."""
    if weights is None:
        return np.zeros(0, dtype=np.float64)
    w = np.ascontiguousarray(weights, dtype=np.float64)
    if w.shape != (dg.n,):
        raise InvalidParameter(f"weights need one value per node ({dg.n}), got shape {w.shape}",
                               field=field)
    bad = np.flatnonzero(~np.isfinite(w) | (w < 0))
    if bad.size:
        raise InvalidParameter("weights must be finite and non-negative", field=field,
                               node_index=int(bad[0]))
    return w


def _check_seed(random_seed: int) -> int:
    if isinstance(random_seed, bool) or not isinstance(random_seed, (int, np.integer)):
        raise InvalidParameter(f"random_seed must be an integer, got {random_seed!r}",
                               field="random_seed")
    return int(random_seed)


def _single(dg: DiffusionGraph, model: str, seeds: ArrayLike, rounds: int | None,
            rng_seed: int) -> NDArray[np.int32]:
    if dg.model != model:
        raise InvalidParameter(
            f"this diffusion graph was built for model {dg.model!r}, not {model!r}",
            field="model")
    kg = K.kernel_graph(dg)
    s = _check_seeds(dg, seeds)
    return K.run_one(kg, s, stream_key(rng_seed), _check_rounds(rounds))


def _is_number(value: object) -> bool:
    return isinstance(value, (int, float, np.integer, np.floating)) and not isinstance(value, bool)


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
