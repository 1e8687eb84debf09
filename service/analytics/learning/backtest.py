"""Backtests: forecast past campaigns from their real seeds and compare with what happened.

:func:`backtest` holds campaigns out (the latest N together, or each in turn),
learns on the rest (:func:`~service.analytics.learning.probabilities.learn_probabilities`),
forecasts each held-out campaign from its real seeds over its real horizon
with :func:`~service.analytics.diffusion.forecasts.forecast`, and scores every scheme
(learned, weighted cascade, uniform at its best p, trivalency) with the
scoring functions here: the error of the expected reach, whether the actual
reach fell inside the forecast's 5th-95th percentile band, the log-likelihood
of who adopted, and the per-person AUC. This is the evaluation of predicted
against actual spread of held-out seed sets of Goyal et al. [1]_.

References
----------
.. [1] A. Goyal, F. Bonchi, L. V. S. Lakshmanan (2011). A data-based approach
   to social influence maximization. PVLDB 5(1), 73-84.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ._episodes import Campaign, check_campaigns
from ..errors import InvalidParameter
from ..diffusion.forecasts import Progress, forecast
from ..graph import GraphArrays, arcs, edge_probabilities
from .probabilities import LearnedModel, learn_probabilities, learned_diffusion_graph
from ..ties.evaluation import auc

__all__ = [
    "BACKTEST_SCHEMES",
    "BacktestResult",
    "CampaignScore",
    "SchemeSummary",
    "adoption_auc",
    "adoption_log_likelihood",
    "backtest",
    "backtest_verdict",
    "band_covers",
    "reach_error",
]

BACKTEST_SCHEMES: tuple[str, ...] = ("learned", "weighted_cascade", "uniform", "trivalency")
_NAMES = {"learned": "the learned model", "weighted_cascade": "weighted cascade",
          "uniform": "uniform p", "trivalency": "trivalency"}


def reach_error(expected: float, actual: float) -> tuple[float, float]:
    """Absolute and relative error of an expected reach against the actual one.

    The relative error is ``|expected - actual| / actual`` (actual >= 1: the
    seeds count).

    Examples
    --------
    >>> reach_error(112.0, 100)
    (12.0, 0.12)
    """
    if not (math.isfinite(expected) and actual >= 1):
        raise InvalidParameter("need a finite forecast and an actual reach of at least 1",
                               field="actual")
    err = abs(float(expected) - float(actual))
    return err, err / float(actual)


def band_covers(low: float, high: float, actual: float) -> bool:
    """Whether ``actual`` lies in the band ``[low, high]`` (e.g. the p5-p95 band).

    Examples
    --------
    >>> band_covers(80.0, 130.0, 100), band_covers(80.0, 90.0, 100)
    (True, False)
    """
    return bool(low <= actual <= high)


def adoption_log_likelihood(prob: ArrayLike, adopted: ArrayLike, *, eps: float = 1e-6) -> float:
    """Bernoulli log-likelihood of who adopted under per-person adoption probabilities.

    ``sum_v a_v log p_v + (1 - a_v) log(1 - p_v)`` with ``p`` clipped to
    ``[eps, 1 - eps]`` (a forecast from a finite number of simulations cannot
    say 0 or 1; :func:`backtest` uses half a simulation's weight).

    Examples
    --------
    >>> round(adoption_log_likelihood([0.5, 0.25], [True, False]), 4)
    -0.9808
    """
    p = np.clip(np.asarray(prob, dtype=np.float64), eps, 1.0 - eps)
    a = np.asarray(adopted, dtype=bool)
    if p.shape != a.shape:
        raise InvalidParameter("need one probability and one outcome per person", field="adopted")
    return float(np.log(p[a]).sum() + np.log1p(-p[~a]).sum())


def adoption_auc(prob: ArrayLike, adopted: ArrayLike) -> float:
    """Chance that a random adopter was given a higher probability than a random non-adopter.

    Ties count one half; equals the Mann-Whitney U statistic over the product of
    the group sizes [1]_. NaN when everyone or no one adopted.

    References
    ----------
    .. [1] J. A. Hanley, B. J. McNeil (1982). The meaning and use of the area
       under a receiver operating characteristic (ROC) curve. Radiology 143(1).

    Examples
    --------
    >>> adoption_auc([0.9, 0.1, 0.5, 0.5], [True, False, True, False])
    0.875
    """
    p = np.asarray(prob, dtype=np.float64)
    a = np.asarray(adopted, dtype=bool)
    if p.shape != a.shape:
        raise InvalidParameter("need one probability and one outcome per person", field="adopted")
    if a.all() or not a.any():
        return float("nan")
    return float(auc(p[a], p[~a]))


@dataclass(frozen=True)
class CampaignScore:
    """One scheme's forecast of one held-out campaign against what it reached."""

    campaign: str
    scheme: str
    expected: float
    p5: float
    p95: float
    actual: int
    abs_error: float
    rel_error: float
    inside: bool
    log_likelihood: float
    auc: float


@dataclass(frozen=True)
class SchemeSummary:
    """A scheme's scores over every held-out campaign."""

    scheme: str
    campaigns: int
    mean_abs_error: float
    mean_rel_error: float
    inside: int
    log_likelihood: float
    mean_auc: float


@dataclass(frozen=True, eq=False)
class BacktestResult:
    """Scores per campaign and scheme, a summary per scheme and the verdict."""

    scores: tuple[CampaignScore, ...]
    summary: dict[str, SchemeSummary]
    verdict: str
    models: tuple[LearnedModel, ...]


def backtest(
    g: GraphArrays,
    campaigns: Sequence[Campaign],
    *,
    holdout: str = "latest",
    latest: int = 1,
    segments: ArrayLike | None = None,
    features: ArrayLike | None = None,
    feature_names: Sequence[str] = (),
    methods: Sequence[str] | None = None,
    uniform_p: float | None = None,
    simulations: int = 1000,
    random_seed: int = 0,
    folds: int = 5,
    progress: Progress | None = None,
) -> BacktestResult:
    """Hold campaigns out, learn on the rest, forecast them and score every scheme.

    Parameters
    ----------
    g : the graph the campaigns ran on.
    campaigns : past campaigns, oldest first.
    holdout : ``latest`` (the last ``latest`` campaigns, learned on the others
        once) or ``each`` (each campaign in turn, learned on all the others).
    latest : how many of the latest campaigns to hold out (>= 1).
    segments, features, feature_names, methods, folds : passed to
        :func:`~service.analytics.learning.probabilities.learn_probabilities`.
    uniform_p : the uniform scheme's p; None (default) uses the best p learned
        on the training campaigns.
    simulations : forecast simulations per campaign and scheme.
    random_seed : seeds the forecasts and the trivalency draw.
    progress : called as ``progress(fraction, message)`` between and during the
        forecasts (it may raise to stop the backtest, e.g. on cancellation).

    Returns
    -------
    BacktestResult

    Raises
    ------
    InvalidParameter
        Bad campaigns (named), an unknown ``holdout``, or nothing left to learn
        from (learning from zero campaigns).

    Notes
    -----
    Each forecast starts from the campaign's real seeds (round 0) and runs for
    its real horizon; every scheme is simulated on the same random worlds.
    Per-person scores cover everyone but the seeds. Probabilities in the
    log-likelihood are clipped to half a simulation, 0.5 / ``simulations``.

    References
    ----------
    .. [1] A. Goyal, F. Bonchi, L. V. S. Lakshmanan (2011). A data-based
       approach to social influence maximization. PVLDB 5(1), 73-84.

    Examples
    --------
    >>> import numpy as np
    >>> g = from_edges([(0, 1), (1, 2)], directed=True)
    >>> runs = [Campaign(np.array([0, 1, 2]), np.array([0, 1, 2]))] * 3
    >>> r = backtest(g, runs, methods=["uniform"], simulations=50, folds=2)
    >>> r.summary["learned"].inside, r.summary["learned"].mean_abs_error
    (1, 0.0)
    """
    cs = check_campaigns(g.n, campaigns)
    if holdout not in ("latest", "each"):
        raise InvalidParameter(f"holdout must be 'latest' or 'each', got {holdout!r}",
                               field="holdout")
    if holdout == "latest":
        if not isinstance(latest, int) or latest < 1:
            raise InvalidParameter(f"latest must be a whole number >= 1, got {latest!r}",
                                   field="latest")
        if latest >= len(cs):
            raise InvalidParameter(
                f"holding out the latest {latest} of {len(cs)} campaigns leaves none to learn "
                "from: hold out fewer", field="latest")
        splits = [(list(range(len(cs) - latest)), list(range(len(cs) - latest, len(cs))))]
    else:
        if len(cs) < 2:
            raise InvalidParameter("holding out each campaign in turn needs at least two "
                                   "campaigns; with one there is nothing to learn from",
                                   field="campaigns")
        splits = [([j for j in range(len(cs)) if j != i], [i]) for i in range(len(cs))]
    a = arcs(g)
    wc = edge_probabilities(a, "weighted_cascade")
    tri = edge_probabilities(a, "trivalency", random_seed=random_seed)
    scores: list[CampaignScore] = []
    models: list[LearnedModel] = []
    total = sum(len(test) for _, test in splits) * len(BACKTEST_SCHEMES)
    for train, test in splits:
        model = learn_probabilities(g, [cs[j] for j in train], methods=methods,
                                    segments=segments, features=features,
                                    feature_names=feature_names, folds=folds,
                                    random_seed=random_seed,
                                    progress=_at(progress, len(scores) / total))
        models.append(model)
        uni = model.fits["uniform"] if uniform_p is None else np.full(wc.shape, float(uniform_p))
        probs = {"learned": model.arc_prob, "weighted_cascade": wc, "uniform": uni,
                 "trivalency": tri}
        for j in test:
            for scheme in BACKTEST_SCHEMES:
                step = None
                if progress is not None:
                    done, report = len(scores), progress

                    def step(f: float, msg: str, done: int = done, report: Progress = report) -> None:
                        report((done + f) / total, msg)
                scores.append(_score(g, cs[j], scheme, probs[scheme], simulations, random_seed, step))
    summary = {s: _summarise([x for x in scores if x.scheme == s]) for s in BACKTEST_SCHEMES}
    return BacktestResult(tuple(scores), summary, backtest_verdict(summary), tuple(models))


def _at(progress: Progress | None, fraction: float) -> Progress | None:
    """``progress`` held at ``fraction`` (for the learning step of a split)."""
    if progress is None:
        return None
    report = progress

    def step(_f: float, msg: str) -> None:
        report(fraction, msg)
    return step


def _score(g: GraphArrays, c: Campaign, scheme: str, arc_prob: NDArray[np.float64],
           simulations: int, random_seed: int, progress: Progress | None = None) -> CampaignScore:
    seeds = c.node[c.round == 0]
    dg = learned_diffusion_graph(g, arc_prob)
    horizon = max(1, int(c.horizon if c.horizon is not None else c.round.max()))
    res = forecast(dg, {"campaign": seeds}, simulations=simulations, rounds=horizon,
                   random_seed=random_seed, top_nodes=g.n, include_seeds=True,
                   progress=progress)["campaign"]
    prob = np.zeros(g.n)
    for nr in res.top_nodes:
        prob[nr.node] = nr.probability
    adopted = np.zeros(g.n, dtype=bool)
    adopted[c.node] = True
    others = np.ones(g.n, dtype=bool)
    others[seeds] = False
    actual = int(c.node.shape[0])
    expected = float(res.expected_reach.mean)
    err, rel = reach_error(expected, actual)
    p5, p95 = float(res.percentiles[5]), float(res.percentiles[95])
    ll = adoption_log_likelihood(prob[others], adopted[others], eps=0.5 / res.simulations)
    return CampaignScore(c.label, scheme, expected, p5, p95, actual, err, rel,
                         band_covers(p5, p95, actual), ll,
                         adoption_auc(prob[others], adopted[others]))


def _summarise(rows: list[CampaignScore]) -> SchemeSummary:
    aucs = [r.auc for r in rows if not math.isnan(r.auc)]
    return SchemeSummary(
        scheme=rows[0].scheme if rows else "",
        campaigns=len(rows),
        mean_abs_error=float(np.mean([r.abs_error for r in rows])) if rows else float("nan"),
        mean_rel_error=float(np.mean([r.rel_error for r in rows])) if rows else float("nan"),
        inside=sum(r.inside for r in rows),
        log_likelihood=float(sum(r.log_likelihood for r in rows)),
        mean_auc=float(np.mean(aucs)) if aucs else float("nan"),
    )


def backtest_verdict(summary: dict[str, SchemeSummary]) -> str:
    """The backtest in one plain sentence per scheme, the learned model first.

    Examples
    --------
    >>> s = {"learned": SchemeSummary("learned", 10, 5.0, 0.12, 9, -50.0, 0.8),
    ...      "weighted_cascade": SchemeSummary("weighted_cascade", 10, 90.0, 2.4, 1, -90.0, 0.6)}
    >>> backtest_verdict(s)
    "The learned model's forecasts were off by 12% on average and 9 of 10 campaigns fell \
inside its 5-95% band; weighted cascade was off by 240% (1 of 10 inside)."
    """
    parts = []
    for i, (scheme, s) in enumerate(summary.items()):
        pct = f"{100.0 * s.mean_rel_error:.0f}%"
        if i == 0:
            who = _NAMES.get(scheme, scheme)
            parts.append(f"{who[0].upper()}{who[1:]}'s forecasts were off by {pct} on average "
                         f"and {s.inside} of {s.campaigns} campaigns fell inside its 5-95% band")
        else:
            parts.append(f"{_NAMES.get(scheme, scheme)} was off by {pct} "
                         f"({s.inside} of {s.campaigns} inside)")
    return "; ".join(parts) + "."
