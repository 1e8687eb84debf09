"""Admission control: a job's peak memory, estimated from the version's size and its params.

Each kind's ``JobKind.estimate(params, load, nodes=, edges=, limit=, threads=)`` returns
an :class:`Estimate` (``limit`` lets it say how far to lower a parameter); :func:`admit` compares it with the per-job memory limit
(the setting ``job_memory_limit_bytes``, passed down as a plain number) and
raises :class:`~service.analytics.errors.TooExpensive` above it, which the API
answers with a 422 ``/problems/too-expensive`` before anything is queued.
The worker repeats the check before running (its limit may be lower) and
sets the limit for the run, so buffers that grow past it (RR-set stores,
simulation arrays) stop the job with the same problem instead of being
killed by the operating system (:mod:`service.analytics._chunks`).

The estimates count the large buffers only, from their element sizes:

- every kind: the loaded version and its derived views, taken as
  ``GRAPH_BYTES_PER_EDGE`` per edge and ``GRAPH_BYTES_PER_NODE`` per node: a
  round figure above what ``tests/bench/bench_memory.py`` measured per arc on
  com-DBLP (16 for the stored arrays, 26 for the diffusion arrays, 21 for the
  igraph graph, 42 for the recommendation index; building them peaks at about
  80 per arc), not a measurement of its own;
- RR sets (shortlist): ``sets * (mean_size * 8 + 9)`` bytes (4-byte node in the
  store, 4-byte set id in the inverted index, 8-byte offset and 1-byte flag per
  set), where ``sets`` is the most the params allow (``max_samples``, plus
  ``evaluation_samples``) and ``mean_size`` is measured on a pilot of up to
  :data:`PILOT_SETS` sets (fewer when they are large or slow: at most half a
  second and about :data:`PILOT_MAX_ENTRIES` entries) when the version is small
  enough to load here;
- simulations (forecast, shortlist): ``runs * 40`` bytes for the seed set being
  simulated (reach, weighted reach and depth per run, twice while chunks are merged);
- sampled betweenness, harmonic closeness, profile, recommendations, link
  evaluation: linear in the graph, covered by the graph term (twice for scores,
  whose undirected view is a second igraph copy);
- threads (``threads``, the setting passed down): every thread beyond the first
  keeps buffers of its own, ``THREAD_BYTES_PER_NODE`` per node (visit marks, a
  queue and per-node counts of a simulation thread; marks and lane queues of an
  RR-sampling thread) and, with more than one thread sampling RR sets, each thread
  one batch store of ``THREAD_BATCH_BYTES`` (its part of a quarter second of sets,
  appended to the shared store in index order, so the store itself is never held
  twice).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from service.analytics.errors import TooExpensive

if TYPE_CHECKING:
    from service.usecases.loading import LoadedVersion

__all__ = [
    "Estimate",
    "admit",
    "graph_bytes",
    "rr_mean_size",
    "GRAPH_BYTES_PER_EDGE",
    "GRAPH_BYTES_PER_NODE",
    "RR_SET_BYTES",
    "RR_ENTRY_BYTES",
    "RUN_BYTES",
    "PILOT_SETS",
    "PILOT_MAX_EDGES",
    "PILOT_MAX_ENTRIES",
    "THREAD_BYTES_PER_NODE",
    "THREAD_BATCH_BYTES",
    "thread_bytes",
    "linear_estimate",
    "scores_estimate",
    "forecast_estimate",
    "shortlist_estimate",
]

GRAPH_BYTES_PER_EDGE = 192  # two arcs per undirected edge, 96 bytes each
GRAPH_BYTES_PER_NODE = 128
RR_ENTRY_BYTES = 8
RR_SET_BYTES = 9
RUN_BYTES = 40
PILOT_SETS = 2000
#: Per node, per thread beyond the first: int32 marks and queue, int64 counts (simulation);
#: int32 marks, uint16 lane marks and lane queue pages (RR sampling).
THREAD_BYTES_PER_NODE = 16
#: One thread's RR batch store: about a quarter second of sets (see tests/bench/bench_threads.py).
THREAD_BATCH_BYTES = 32 * 1024 * 1024
#: The pilot stops once its sets hold this many entries (32 MiB; 64 MiB at most after the last doubling).
PILOT_MAX_ENTRIES = 4_000_000
#: Above this many edges the API does not load the version to measure set sizes;
#: the RR store's own check stops the job once the real mean size is known.
PILOT_MAX_EDGES = 2_000_000


@dataclass(frozen=True)
class Estimate:
    """A job's estimated peak memory (``bytes``), what dominates it, and which params lower it."""

    bytes: int
    what: str
    relax: str
    details: dict[str, Any] | None = None


def graph_bytes(nodes: int, edges: int) -> int:
    """The loaded version with its views (see the module docstring)."""
    return GRAPH_BYTES_PER_EDGE * int(edges) + GRAPH_BYTES_PER_NODE * int(nodes)


def thread_bytes(nodes: int, threads: int, *, rr: bool = False) -> int:
    """What ``threads`` threads hold beyond one thread's buffers (see the module docstring)."""
    if int(threads) <= 1:
        return 0
    batches = int(threads) * THREAD_BATCH_BYTES if rr else 0
    return (int(threads) - 1) * THREAD_BYTES_PER_NODE * int(nodes) + batches


def _mib(n: float) -> str:
    return f"{n / (1 << 30):.1f} GiB" if n >= 1 << 30 else f"{n / (1 << 20):.0f} MiB"


def admit(estimate: Estimate | None, limit: int | None) -> None:
    """Raise :class:`TooExpensive` when ``estimate`` passes ``limit`` (bytes)."""
    if estimate is None or limit is None or estimate.bytes <= limit:
        return
    raise TooExpensive(
        f"this job would need about {_mib(estimate.bytes)} of memory for {estimate.what}, more than "
        f"the {_mib(limit)} one job may use here; {estimate.relax}",
        estimated_bytes=int(estimate.bytes), limit_bytes=int(limit), **(estimate.details or {}),
    )


def rr_mean_size(load: Callable[[], LoadedVersion], *, edges: int, model: str, scheme: str,
                 p: float | None, q: float | None, rounds: int | None, random_seed: int,
                 settings: Any = None) -> float | None:
    """The mean RR-set size measured on :data:`PILOT_SETS` sets, or None for a version too large to load here.

    ``settings`` (diffusion settings, optional) builds the graph instead, as a learned model needs.
    """
    if edges > PILOT_MAX_EDGES:
        return None
    import numpy as np

    from service.analytics.seeding._rr import RRCollection, RRSampler
    from service.usecases.diffusion_inputs import diffusion_graph_for

    v = load()
    if v.graph.n == 0:
        return 0.0
    dg = settings.diffusion_graph(v) if settings is not None else diffusion_graph_for(
        v.version_id, v.graph, model=model, scheme=scheme, p=p, q=q, random_seed=random_seed)
    coll = RRCollection(RRSampler(dg, rounds=rounds), np.uint64(0x9E3779B97F4A7C15))
    target = 4
    while True:  # doubling, so a stop leaves at most twice PILOT_MAX_ENTRIES in the store
        coll.extend_to(target)
        # At least 64 sets before the clock may stop it: the first pilot in a process also
        # pays for compiling the sampler, and a mean over a handful of sets varies too much.
        if target >= PILOT_SETS or (target >= 64 and coll.seconds > 0.5) or coll.entries > PILOT_MAX_ENTRIES:
            break
        target = min(2 * target, PILOT_SETS)
    return coll.entries / max(coll.count, 1)


# -- per kind ---------------------------------------------------------------------


def _linear(factor: int) -> Callable[..., Estimate]:
    def estimate(params: Any, load: Callable[[], LoadedVersion], *, nodes: int, edges: int,
                 limit: int | None = None, threads: int = 1) -> Estimate:
        return Estimate(factor * graph_bytes(nodes, edges), "the graph and its working copies",
                        "this graph is too large for this service's memory limit")

    return estimate


#: Kinds whose memory is linear in the graph: profile, recommendations, link
#: evaluation, referral asks (views of the graph, per-node arrays).
linear_estimate = _linear(1)
#: scores: a second igraph copy (the undirected view) beside the first.
scores_estimate = _linear(2)


def forecast_estimate(params: Any, load: Callable[[], LoadedVersion], *, nodes: int, edges: int,
                      limit: int | None = None, threads: int = 1) -> Estimate:
    runs = int(params.simulations)  # seed sets are simulated one after the other
    fixed = graph_bytes(nodes, edges) + 16 * nodes + thread_bytes(nodes, threads)
    relax = f"lower simulations ({RUN_BYTES} bytes each)"
    if limit is not None and limit > fixed:
        relax = f"lower simulations to at most {(limit - fixed) // RUN_BYTES:,} ({RUN_BYTES} bytes each)"
    return Estimate(fixed + runs * RUN_BYTES, f"{runs:,} simulations", relax, {"simulations": runs})


def shortlist_estimate(params: Any, load: Callable[[], LoadedVersion], *, nodes: int, edges: int,
                       limit: int | None = None, threads: int = 1) -> Estimate:
    rr = params.method in ("imm", "opim")
    base = graph_bytes(nodes, edges) + thread_bytes(nodes, threads, rr=rr)
    sims = int(params.forecast_runs) * RUN_BYTES  # the lists are forecast one after the other
    if not rr:
        return Estimate(base + sims, f"{params.forecast_runs:,} simulations per list",
                        "lower forecast_runs", {"forecast_runs": int(params.forecast_runs)})
    pr = params.probability
    mean = rr_mean_size(load, edges=edges, model=params.model, scheme=pr.scheme, p=pr.p, q=pr.q,
                        rounds=params.rounds, random_seed=params.random_seed, settings=params)
    mean = 1.0 if mean is None else mean
    per_set = mean * RR_ENTRY_BYTES + RR_SET_BYTES
    sets = int(params.max_samples) + int(params.evaluation_samples)
    evaluation = int(params.evaluation_samples) * per_set
    size = f"each RR set takes about {per_set:,.0f} bytes here"
    relax = f"lower max_samples ({size})"
    if limit is not None:
        fit = int((limit - base - sims - evaluation) // per_set)
        relax = (f"lower max_samples to at most {fit:,} ({size})" if fit >= 1000 else
                 f"even 1,000 RR sets do not fit beside the evaluation sets and simulations ({size}): "
                 "lower evaluation_samples and forecast_runs, or use smaller edge probabilities")
    return Estimate(
        int(base + sims + sets * per_set), f"up to {sets:,} RR sets of about {mean:,.0f} people each", relax,
        {"max_samples": int(params.max_samples), "mean_rr_set_size": round(mean, 1)},
    )
