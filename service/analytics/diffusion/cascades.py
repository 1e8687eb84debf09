"""Independent Cascade and Linear Threshold simulation and spread estimates.

The models are those of Kempe, Kleinberg and Tardos [1]_, run forward by the
compiled loops in :mod:`service.analytics.diffusion._kernels` over a
:class:`~service.analytics.graph.DiffusionGraph` (arc probabilities for IC,
incoming weights b(u, v) for LT). Round 0 is the seed set; a node activated in
round ``t`` acts in round ``t + 1``; a horizon of ``rounds = r`` stops after
round ``r``. Reach forecasts with intervals and a stopping rule, built on the
same kernels and streams, are in :mod:`service.analytics.diffusion.forecasts`.

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
from typing import NamedTuple

import numpy as np
from numpy.typing import ArrayLike, NDArray

from . import _kernels as K
from ..errors import InvalidParameter, UnknownNode
from ..graph import DiffusionGraph

__all__ = [
    "SpreadEstimate",
    "stream_key",
    "independent_cascade",
    "linear_threshold",
    "estimate_spread",
]

MAX_RUNS = 100_000_000  # per call; the per-run arrays alone take 20 bytes a run


class SpreadEstimate(NamedTuple):
    """Monte Carlo estimate of the expected spread: mean, its standard error, runs."""

    mean: float
    stderr: float
    runs: int


def stream_key(random_seed: int, label: str = "") -> int:
    """The 64-bit key of random stream ``label`` under ``random_seed``.

    It is the first 8 bytes (little-endian) of BLAKE2b with an 8-byte digest of
    the UTF-8 text ``"bellwether.diffusion:{random_seed}:{label}"``.
    :func:`estimate_spread` and the single-run functions use ``label = ""``;
    :func:`service.analytics.diffusion.forecasts.forecast` uses the seed set's name.

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
    :mod:`service.analytics.diffusion._kernels` for the random streams and for geometric
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
    threads: int | None = None,
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
    threads : most threads to run on (default: every core the process may use); the
        estimate is the same for any number.

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
    res = K.simulate(kg, s, stream_key(random_seed), 0, nruns, horizon, w, track_nodes=False,
                     threads=threads)
    mean, var = K.mean_var(res.weighted)
    return SpreadEstimate(mean, math.sqrt(var / nruns), nruns)


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
