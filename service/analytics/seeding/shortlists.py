"""Seed shortlists: whom to contact first so that a message travels furthest.

Influence maximisation by reverse-reachable (RR) set sampling, with stated
guarantees: IMM (Tang, Shi, Xiao 2015) in the fixed form of Chen (2018) and
OPIM-C (Tang et al. 2018), which also certifies, on this instance, how close
the set is to the best possible one. Lazy greedy over any spread oracle
(CELF, Leskovec et al. 2007) for small graphs and for checking; degree
discount (Chen, Wang, Yang 2009) and top-score lists as baselines.

Every method takes the same contact rules as one value,
:class:`~service.analytics.seeding.rules.SeedRules`: a count budget or a cost
budget, an eligible mask (consent, not barred: never seeds), must-include
people (placed first) and per-segment caps; target-audience ``weights`` (reach
counts the audience value reached instead of people) are an option beside them.
"""

from __future__ import annotations

import math
import time
from collections.abc import Sequence
from dataclasses import replace

import numpy as np
from numpy.typing import NDArray

from . import _rr_kernels as K
from ._cover import select
from ._estimates import (TAG_EST, TAG_EVAL, TAG_FINAL, check_common, check_eps, degrees_of,
                         forecast, lb_floor, prefix_gains, rr_hits)
from ._greedy import celf_seeds, degree_discount_seeds, top_score_seeds
from ._opim import opim_seeds
from ._reasons import facts, reasons
from ._results import Progress, ReachEstimate, SeedChoice, Shortlist, choices
from ._rr import BYTES_PER_ENTRY, RRCollection, RRSampler
from .rules import ONE_MINUS_INV_E, SeedRules, check_seed_list
from ..errors import InvalidParameter
from ..graph import DiffusionGraph

__all__ = [
    "SeedChoice",
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


def rr_estimate(
    dg: DiffusionGraph,
    seeds: Sequence[int],
    *,
    samples: int = 100_000,
    random_seed: int = 0,
    weights: NDArray[np.float64] | None = None,
    rounds: int | None = None,
    progress: Progress | None = None,
) -> ReachEstimate:
    """Unbiased estimate of the expected reach of ``seeds`` from RR sets.

    sigma(S) = n * Pr[a random RR set meets S] [1]_; with target-audience
    ``weights`` the roots are drawn with probability proportional to their
    value and the estimate is (total value) * (share of sets hit).

    Parameters
    ----------
    dg : the diffusion graph (IC or LT, see :func:`~service.analytics.graph.diffusion_graph`).
    seeds : node indices.
    samples : number of RR sets.
    random_seed : seeds the RR streams (reproducible).
    weights : optional value per node; reach counts value instead of people.
    rounds : optional horizon (campaign length in rounds).
    progress : optional ``progress(fraction, message)``; may raise ``Cancelled``.

    Returns
    -------
    ReachEstimate
        ``mean``, ``stderr`` (binomial standard error), ``runs`` = samples.

    Raises
    ------
    UnknownNode
        A seed index outside ``0..n-1``.
    InvalidParameter
        Non-positive ``samples``, bad ``weights`` or ``rounds``.

    Notes
    -----
    Each set stops at the first seed it meets, so estimating costs less than
    sampling full sets; the sets are the same ones :func:`imm_seeds` would
    draw from the same stream. Horizon: an RR set keeps nodes within
    ``rounds`` reverse steps of its root (live-edge equivalence per round,
    Kempe et al. 2003).

    References
    ----------
    .. [1] C. Borgs, M. Brautbar, J. Chayes, B. Lucier (2014). Maximizing
       social influence in nearly optimal time. SODA '14.

    Examples
    --------
    >>> import numpy as np
    >>> from service.analytics.graph import GraphArrays, diffusion_graph
    >>> g = GraphArrays(4, True, np.array([0, 0, 0], np.int32),
    ...                 np.array([1, 2, 3], np.int32), np.ones(3))
    >>> dg = diffusion_graph(g, scheme="uniform", p=1.0)
    >>> rr_estimate(dg, [0], samples=1000).mean
    4.0
    """
    w = check_common(dg, weights, rounds, random_seed)
    if isinstance(samples, bool) or not isinstance(samples, (int, np.integer)) or samples < 1:
        raise InvalidParameter("samples must be a positive integer", field="samples")
    s = check_seed_list(dg.n, seeds, field="seeds")
    sampler = RRSampler(dg, weights=w, rounds=rounds)
    return rr_hits(sampler, s, samples=int(samples), key=K.stream_key(random_seed, TAG_EVAL),
                    progress=progress)


# ---------------------------------------------------------------- IMM

# Provenance of IMM's formulas (Tang, Shi, Xiao 2015; Chen 2018). None of the
# following has been checked against the full paper text:
# - lambda* = 2n((1-1/e) alpha + beta)^2 / eps^2 with alpha, beta (Eq. 6): from
#   memory, the same form as REFERENCES.md (itself marked "from memory");
# - lambda' = (2 + 2/3 eps')(ln C(n,k) + l ln n + ln log2 n) n / eps'^2 with
#   eps' = sqrt(2) eps, x = n / 2^i for i = 1..log2(n) - 1, stop when
#   n F_R(S_i) >= (1 + eps') x, LB = n F_R(S_i) / (1 + eps'), LB = 1 otherwise:
#   from memory;
# - l <- l (1 + ln 2 / ln n): from memory.
# Verified: Chen's fix (final RR sets drawn afresh) is stated as published in
# REFERENCES.md and the abstract of arXiv:1808.09363 confirms a fix by a minor
# change to the algorithm. Derived here: replacing 1 - 1/e by another greedy
# ratio (1/2 for caps, 0.405 for a cost budget) in lambda*, and the union bound
# over the sets the rules allow instead of all C(n, k).


def imm_lambda_prime(n: int, ln_sets: float, *, epsilon_prime: float, ell: float,
                     scale: float | None = None) -> float:
    """lambda' of IMM's estimation phase (Tang, Shi, Xiao 2015, Eq. 9; from memory):
    (2 + 2/3 eps') (ln C(n,k) + l ln n + ln log2 n) n / eps'^2, with ``ln_sets``
    standing for ln C(n,k) and ``scale`` (total audience value) for the leading n."""
    s = float(n) if scale is None else scale
    return ((2.0 + 2.0 * epsilon_prime / 3.0)
            * (ln_sets + ell * math.log(n) + math.log(max(math.log2(n), 1.0)))
            * s / epsilon_prime ** 2)


def imm_lambda_star(n: int, ln_sets: float, *, epsilon: float, ell: float,
                    factor: float = ONE_MINUS_INV_E, scale: float | None = None) -> float:
    """lambda* of IMM (Tang, Shi, Xiao 2015, Eq. 6; from memory):
    2n((1-1/e) alpha + beta)^2 / eps^2, alpha = sqrt(l ln n + ln 2),
    beta = sqrt((1-1/e)(ln C(n,k) + l ln n + ln 2)). ``factor`` replaces the
    greedy ratio 1-1/e for other rules (derived here by the same argument)."""
    s = float(n) if scale is None else scale
    alpha = math.sqrt(ell * math.log(n) + math.log(2.0))
    beta = math.sqrt(factor * (ln_sets + ell * math.log(n) + math.log(2.0)))
    return 2.0 * s * (factor * alpha + beta) ** 2 / epsilon ** 2



def imm_seeds(
    dg: DiffusionGraph,
    rules: SeedRules,
    *,
    epsilon: float = 0.1,
    l: float = 1.0,  # noqa: E741 - the paper's name
    random_seed: int = 0,
    weights: NDArray[np.float64] | None = None,
    rounds: int | None = None,
    progress: Progress | None = None,
    max_rr_sets: int = 20_000_000,
    forecast_runs: int = 1000,
    communities: NDArray[np.integer] | None = None,
) -> Shortlist:
    """Choose seeds by IMM with fresh final samples (Chen's fix).

    Estimation phase [1]_: for x = n/2, n/4, ..., sample lambda'/x RR sets
    and stop once the greedy set covers a share showing OPT >= x, giving a
    lower bound LB of the optimum. Then, as Chen [2]_ requires, draw
    theta = lambda*/LB RR sets afresh, independent of the estimation phase,
    and pick the seeds greedily on them under the contact rules.

    Parameters
    ----------
    dg : the diffusion graph (IC or LT).
    rules : the contact rules (:meth:`SeedRules.build`): budget or cost budget,
        who may be contacted, must-include people (placed first, in this order),
        caps per segment; built for ``dg.n`` people.
    epsilon, l : approximation slack and failure exponent (probability 1 - n^-l).
    random_seed : seeds every RR stream; the same inputs give the same shortlist.
    weights : target-audience value per node; reach counts value.
    rounds : campaign horizon in rounds.
    progress : ``progress(fraction, message)``; may raise ``Cancelled``, which propagates.
    max_rr_sets : cap on RR sets per phase; hitting it voids the guarantee (stated).
    forecast_runs : forward Monte Carlo runs for the independent forecast (0: none).
    communities : used only for the seeds' reasons.

    Returns
    -------
    Shortlist
        Seeds in order with marginal gain, cumulative reach and reason; the
        reach curve from the coverage of the selection RR sets; a forward
        Monte Carlo forecast; ``theta``; the guarantee.

    Raises
    ------
    InvalidParameter
        Bad epsilon, l, weights or rounds; rules built for another graph size
        (``field="rules"``). The rules themselves are checked by :meth:`SeedRules.build`.

    Notes
    -----
    The guarantee is (1 - 1/e - eps) with probability >= 1 - n^-l for a
    count budget; with segment caps 1/2 - eps; with a cost budget alone
    0.405 - eps; always relative to the best set obeying the same rules. As
    in the paper, l is raised to l (1 + ln 2 / ln n) so that both phases
    together fail with probability at most n^-l. The union bound counts the
    sets the rules allow (ln C(N, k) for N candidates), which is the paper's
    ln C(n, k) when nothing is restricted.

    References
    ----------
    .. [1] Y. Tang, Y. Shi, X. Xiao (2015). Influence maximization in
       near-linear time: a martingale approach. SIGMOD '15.
    .. [2] W. Chen (2018). An issue in the martingale analysis of the
       influence maximization algorithm IMM. arXiv:1808.09363.

    Examples
    --------
    >>> import numpy as np
    >>> from service.analytics.graph import GraphArrays, diffusion_graph
    >>> g = GraphArrays(4, True, np.array([0, 0, 0], np.int32),
    ...                 np.array([1, 2, 3], np.int32), np.ones(3))
    >>> rules = SeedRules.build(4, budget=1)
    >>> sl = imm_seeds(diffusion_graph(g, scheme="uniform", p=1.0), rules, forecast_runs=0)
    >>> sl.nodes, float(sl.reach_curve[-1]), sl.guarantee["approximation_formula"]
    ((0,), 4.0, '1 - 1/e - epsilon')
    """
    t_all = time.perf_counter()
    w = check_common(dg, weights, rounds, random_seed)
    check_eps(epsilon)
    if not (isinstance(l, (int, float)) and l > 0):
        raise InvalidParameter("l must be > 0", field="l")
    rules.check_size(dg.n)
    rules = rules.with_tiebreak(degrees_of(dg))
    sampler = RRSampler(dg, weights=w, rounds=rounds)
    n, scale = dg.n, sampler.total_weight
    promise = rules.guarantee()
    factor, formula, caveat = promise.ratio, promise.formula_with("epsilon"), promise.caveat
    ln_sets = rules.log_feasible_sets()
    timings: dict[str, float] = {}

    if n < 2 or rules.free_places == 0:  # nothing to choose: place the must-include people
        ell = float(l)
        lam_p = lam_s = lb = float("nan")
        est_sets = 0
        theta = min(max_rr_sets, 10_000)
    else:
        ell = float(l) * (1.0 + math.log(2.0) / math.log(n))  # IMM, Sec. 3 (from memory)
        eps_p = math.sqrt(2.0) * epsilon
        lam_p = imm_lambda_prime(n, ln_sets, epsilon_prime=eps_p, ell=ell, scale=scale)
        lam_s = imm_lambda_star(n, ln_sets, epsilon=epsilon, ell=ell, factor=factor, scale=scale)
        est = RRCollection(sampler, K.stream_key(random_seed, TAG_EST))
        t0 = time.perf_counter()
        lb = lb_floor(rules, w)
        iters = max(int(math.floor(math.log2(n) - 1.0)), 0)
        for i in range(1, iters + 1):
            x = scale / 2.0 ** i
            theta_i = min(int(math.ceil(lam_p / x)), max_rr_sets)
            est.extend_to(theta_i, progress=progress, span=(0.4 * (i - 1) / iters, 0.4 * i / iters),
                          message=f"estimating the optimum (round {i} of at most {iters})")
            cov = select(est, rules).covered
            if scale * cov / est.count >= (1.0 + eps_p) * x:
                lb = max(lb, scale * cov / est.count / (1.0 + eps_p))
                break
            if theta_i >= max_rr_sets:
                break
        est_sets = est.count
        del est  # Chen (2018): the final sets must not reuse these
        timings["estimation"] = time.perf_counter() - t0
        theta = int(math.ceil(lam_s / lb)) if lb > 0 else max_rr_sets

    capped = theta > max_rr_sets
    theta = min(theta, max_rr_sets)
    t0 = time.perf_counter()
    final = RRCollection(sampler, K.stream_key(random_seed, TAG_FINAL))
    final.extend_to(theta, progress=progress, span=(0.4, 0.9), message="sampling RR sets")
    timings["sampling"] = time.perf_counter() - t0
    t0 = time.perf_counter()
    res = select(final, rules)
    timings["selection"] = time.perf_counter() - t0

    if progress is not None:
        progress(0.9, "forecasting reach of the chosen set")
    t0 = time.perf_counter()
    fc = forecast(dg, res.seeds, runs=forecast_runs, random_seed=random_seed, weights=w,
                  rounds=rounds)
    timings["forecast"] = time.perf_counter() - t0
    seed_facts = facts(res, final, rules, communities=communities)
    unit = "people" if w is None else "audience value"
    seeds, curve = choices(res.seeds, [g * final.scale() for g in res.gains],
                           reasons(seed_facts, n=n, unit=unit), rules.must, seed_facts)
    notes = list(promise.notes) + ([caveat] if caveat else [])
    approx: float | None = factor - epsilon
    if capped:
        approx = None
        notes.append(f"the sample cap max_rr_sets={max_rr_sets} was hit before theta was "
                     "reached, so the guarantee does not hold")
    if caveat:
        approx = None
    if n < 2 or rules.free_places == 0:
        approx, formula = 1.0, "exact (no choice to make)"
    prob = 1.0 - 2.0 * n ** (-ell) if n >= 2 else 1.0
    timings["total"] = time.perf_counter() - t_all
    return Shortlist(
        method="imm",
        seeds=seeds,
        reach_curve=curve,
        reach_curve_source="coverage of the theta RR sets the seeds were chosen on "
                           "(optimistic for the chosen set; see expected_reach)",
        expected_reach=fc,
        guarantee={
            "method": "IMM (Tang, Shi, Xiao 2015), final RR sets drawn afresh (Chen 2018)",
            "approximation": approx,
            "approximation_formula": formula if approx is not None else "none",
            "epsilon": epsilon,
            "probability": prob if approx is not None else None,
            "certified_ratio": None,
            "notes": notes,
        },
        theta=theta,
        samples=int(theta + est_sets),
        timings=timings,
        details={
            "lower_bound": lb, "lambda_prime": lam_p, "lambda_star": lam_s, "ell": ell,
            "ln_feasible_sets": ln_sets, "estimation_sets": est_sets,
            "rr_entries": final.entries, "rr_bytes": final.nbytes,
            "bytes_per_entry": BYTES_PER_ENTRY, "edges_examined": final.examined,
            "sampling_seconds": final.seconds, "greedy": res.rule,
        },
    )


def evaluate_shortlist(
    dg: DiffusionGraph,
    shortlist: Shortlist,
    *,
    samples: int = 200_000,
    random_seed: int = 0,
    weights: NDArray[np.float64] | None = None,
    rounds: int | None = None,
    progress: Progress | None = None,
    rules: SeedRules | None = None,
) -> Shortlist:
    """Fill in marginal gains, cumulative reach and the reach curve of any
    ordered shortlist (e.g. a baseline) from fresh RR sets.

    The sets are drawn after the list is fixed, so the estimates are unbiased
    for it (Borgs et al. 2014); ``expected_reach`` becomes the RR estimate of
    the whole list with its binomial standard error.

    Parameters
    ----------
    dg : the diffusion graph.
    shortlist : from any method of this module.
    samples, random_seed, weights, rounds, progress : as in :func:`rr_estimate`.
    rules : the rules the list was chosen under; with them, "the most of anyone
        eligible" in the reasons is judged on the fresh sets too.

    Returns
    -------
    Shortlist
        A copy with the reach figures replaced. Reasons that quote reach
        (those of IMM, OPIM-C and CELF) are rewritten from the fresh figures,
        so a reason always agrees with the marginal gain beside it; the
        baselines' reasons quote no reach and are kept.

    Raises
    ------
    UnknownNode
        A seed outside the graph.

    Examples
    --------
    >>> import numpy as np
    >>> from service.analytics.graph import GraphArrays, diffusion_graph
    >>> g = GraphArrays(4, True, np.array([0, 0, 0], np.int32),
    ...                 np.array([1, 2, 3], np.int32), np.ones(3))
    >>> dg = diffusion_graph(g, scheme="uniform", p=1.0)
    >>> top = top_score_seeds(np.array([3., 0, 1, 2]), SeedRules.build(4, budget=2))
    >>> sl = evaluate_shortlist(dg, top, samples=1000)
    >>> sl.nodes, sl.reach_curve.tolist()
    ((0, 3), [4.0, 4.0])
    """
    w = check_common(dg, weights, rounds, random_seed)
    if isinstance(samples, bool) or not isinstance(samples, (int, np.integer)) or samples < 1:
        raise InvalidParameter("samples must be a positive integer", field="samples")
    nodes = check_seed_list(dg.n, shortlist.nodes, field="seeds")
    if rules is not None:
        rules.check_size(dg.n)
    sampler = RRSampler(dg, weights=w, rounds=rounds)
    coll = RRCollection(sampler, K.stream_key(random_seed, TAG_EVAL + 16))
    coll.relax = "lower evaluation_samples, or use smaller edge probabilities"
    coll.extend_to(int(samples), progress=progress, message="sampling RR sets to evaluate")
    scale = coll.scale()
    hits = prefix_gains(coll, nodes)
    gains = hits.astype(np.float64) * scale
    curve = np.cumsum(gains)
    # The share of sets hit, from the integer count: the float sum of the scaled gains
    # can exceed the total by a rounding error when every set is hit (complete coverage).
    share = min(int(hits.sum()) / coll.count, 1.0)
    se = sampler.total_weight * math.sqrt(share * (1.0 - share) / coll.count)
    texts = [s.reason for s in shortlist.seeds]
    if nodes and all(s.facts is not None for s in shortlist.seeds):
        counts0 = coll.index()[2]
        pool = None if rules is None else rules.eligible.copy()
        if pool is not None:
            pool[nodes] = True
        new_facts = []
        for s, g in zip(shortlist.seeds, gains):
            assert s.facts is not None
            best = (float(counts0[pool].max()) * scale if pool is not None
                    else s.facts.best_alone)
            new_facts.append(replace(s.facts, gain=float(g),
                                     alone=float(counts0[s.node]) * scale, best_alone=best))
        texts = reasons(new_facts, n=dg.n, unit="people" if w is None else "audience value")
    seeds = tuple(SeedChoice(s.node, float(g), float(c), t, s.required, s.facts)
                  for s, g, c, t in zip(shortlist.seeds, gains, curve, texts))
    return Shortlist(
        method=shortlist.method, seeds=seeds, reach_curve=curve,
        reach_curve_source=f"coverage of {coll.count} fresh RR sets drawn after the list was fixed",
        expected_reach=ReachEstimate(float(curve[-1]) if len(curve) else 0.0, se, coll.count,
                                     "rr"),
        guarantee=shortlist.guarantee, theta=shortlist.theta,
        samples=shortlist.samples + coll.count, timings=shortlist.timings,
        details=shortlist.details)
