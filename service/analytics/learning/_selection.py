"""Choosing among learned and fixed probability models by held-out likelihood.

Private to :mod:`service.analytics.learning.probabilities`, which re-exports its public names.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ._em import EmFit, log_likelihood
from ._episodes import Campaign, Episodes, build_episodes, check_campaigns, require_trials
from ._fits import ParameterEstimate, _fit
from ..errors import InvalidParameter
from ..graph import GraphArrays, arcs, edge_probabilities

LEARNING_METHODS: tuple[str, ...] = (
    "per_edge", "segment_pair", "logistic", "uniform", "weighted_cascade", "trivalency")
_FITTED = ("per_edge", "segment_pair", "logistic", "uniform")
_EPS = 1e-6  # probabilities are clipped to [_EPS, 1 - _EPS] when scoring held-out campaigns
_WORDS = {
    "per_edge": "one probability per connection",
    "segment_pair": "one probability per pair of segments",
    "logistic": "a probability from each connection's features",
    "uniform": "one probability for every connection",
    "weighted_cascade": "weighted cascade (1 / number of contacts)",
    "trivalency": "trivalency (0.1, 0.01 or 0.001 at random)",
}


@dataclass(frozen=True, eq=False)
class LearnedModel:
    """A probability model learned from past campaigns.

    Attributes
    ----------
    method : the chosen method, one of :data:`LEARNING_METHODS`.
    reason : why it was chosen, in plain words.
    arc_prob : probability per arc of the version (order of :func:`~.graph.arcs`).
    parameters : the chosen model's parameters with intervals (empty for per-arc
        and fixed models).
    held_out : held-out log-likelihood per method tried (higher is better).
    log_likelihood : the chosen model's log-likelihood on all campaigns.
    trace : log-likelihood after each EM iteration (empty for fixed models).
    iterations, converged : of the chosen model's EM.
    campaigns, trials, activations, unexplained : counts in the data; an
        unexplained adoption had no active in-neighbour in the round before
        and is left out of the likelihood.
    fallback : probability given to arcs never tried in the data.
    fits : per-arc probabilities of the methods refitted on every campaign (the
        chosen one, ``uniform`` and the best few-parameter method).
    coefficients : raw parameters of the refitted few-parameter methods
        (``uniform``: [p]; ``segment_pair``: k*k row-major table; ``logistic``:
        intercept then one coefficient per feature), used to carry the model to
        later versions.
    new_arc_method : the few-parameter method that gives arcs never seen in the
        data their probability (the best by held-out likelihood).
    """

    method: str
    reason: str
    arc_prob: NDArray[np.float64]
    parameters: tuple[ParameterEstimate, ...]
    held_out: dict[str, float]
    log_likelihood: float
    trace: tuple[float, ...]
    iterations: int
    converged: bool
    campaigns: int
    trials: int
    activations: int
    unexplained: int
    fallback: float
    fits: dict[str, NDArray[np.float64]] = field(default_factory=dict)
    coefficients: dict[str, NDArray[np.float64]] = field(default_factory=dict)
    new_arc_method: str = "uniform"


def learn_probabilities(
    g: GraphArrays,
    campaigns: Sequence[Campaign],
    *,
    methods: Sequence[str] | None = None,
    segments: ArrayLike | None = None,
    features: ArrayLike | None = None,
    feature_names: Sequence[str] = (),
    prior_strength: float = 2.0,
    folds: int = 5,
    random_seed: int = 0,
    tol: float = 1e-7,
    max_iter: int = 300,
    progress: Callable[[float, str], None] | None = None,
) -> LearnedModel:
    """Learn IC probabilities from past campaigns; keep the model that predicts best.

    Each method in ``methods`` is fitted by the EM of Saito et al. [1]_ on all
    campaigns but one fold and scored by the log-likelihood of the held-out
    fold's adoptions (folds of whole campaigns, campaign i in fold i mod
    ``folds``); the fixed schemes are scored the same way. The method with the
    highest total wins and is refitted on every campaign.

    Parameters
    ----------
    g : the graph the campaigns ran on.
    campaigns : past campaigns over ``g``'s node indices.
    methods : subset of :data:`LEARNING_METHODS`; default all that the inputs
        allow (``segment_pair`` needs ``segments``, ``logistic`` ``features``).
    segments : segment code per person (>= 0).
    features : arc features, one row per arc (e.g. :func:`edge_features`).
    feature_names : names of the feature columns, for the parameters.
    prior_strength : per-edge: a Beta prior worth this many trials, centred on
        the pooled rate, so that a connection tried a few times is neither 0
        nor 1 (default 2).
    folds : number of folds (>= 2; at most the number of campaigns).
    random_seed : seeds the trivalency draw.
    tol, max_iter : EM stopping rule.
    progress : called as ``progress(fraction, message)`` before each fit (it may
        raise to stop, e.g. on cancellation).

    Returns
    -------
    LearnedModel

    Raises
    ------
    InvalidParameter
        No campaigns or a bad one (each error names it), an unknown method,
        ``folds < 2``, or a method that needs segments or features without them.

    Notes
    -----
    Held-out probabilities are clipped to [1e-6, 1 - 1e-6] so that one
    adoption along a connection a model says can never carry the campaign
    costs a finite penalty. Intervals: observed Fisher information (Wald, 95%);
    a probability estimated at 0 gets 0 to 3 / trials (rule of three).

    References
    ----------
    .. [1] K. Saito, R. Nakano, M. Kimura (2008). Prediction of information
       diffusion probabilities for independent cascade model. KES 2008, LNAI 5179.

    Examples
    --------
    >>> import numpy as np
    >>> g = from_edges([(0, 1)], directed=True)
    >>> runs = [Campaign(np.array([0, 1]), np.array([0, 1]))] * 2
    >>> runs += [Campaign(np.array([0, 1]), np.array([0, 2]), horizon=2)] * 2
    >>> m = learn_probabilities(g, runs, methods=["uniform", "weighted_cascade"], folds=2)
    >>> m.method, round(float(m.arc_prob[0]), 2)
    ('uniform', 0.5)
    """
    a = arcs(g)
    cs = check_campaigns(g.n, campaigns)
    ep = require_trials(build_episodes(a, cs))
    chosen = _check_methods(methods, segments, features)
    if not isinstance(folds, int) or folds < 2:
        raise InvalidParameter(f"folds must be a whole number >= 2, got {folds!r}", field="folds")
    k = min(folds, len(cs))

    fits_to_run = k * len(chosen) + 3 if k >= 2 else 3
    fits_done = [0]

    def fit(data: Episodes, mth: str) -> tuple[EmFit, tuple[ParameterEstimate, ...]]:
        if progress is not None:
            progress(min(fits_done[0] / fits_to_run, 1.0), f"fitting {_WORDS[mth]}")
        fits_done[0] += 1
        return _fit(data, a, mth, segments=segments, features=features,
                    prior_strength=prior_strength, tol=tol, max_iter=max_iter)

    fixed = {s: edge_probabilities(a, s, random_seed=random_seed)
             for s in ("weighted_cascade", "trivalency") if s in chosen}
    held: dict[str, float] = {}
    if k >= 2:
        fold = np.arange(len(cs)) % k
        held = {mth: 0.0 for mth in chosen}
        for f in range(k):
            train, test = ep.subset(fold != f), ep.subset(fold == f)
            for mth in chosen:
                p = fixed[mth] if mth in fixed else fit(train, mth)[0].arc_prob
                held[mth] += _scored(test, p)
        best = max(chosen, key=lambda mth: (held[mth], -chosen.index(mth)))
        reason = _reason(best, held, k)
    else:
        best = "uniform"
        reason = ("With a single campaign no model can be checked on a campaign it did not see, "
                  "so the simplest learned model is used: one probability for every connection.")
    few = [m for m in ("segment_pair", "logistic", "uniform") if m in chosen or m == "uniform"]
    new_arc = max(few, key=lambda m: (held.get(m, -np.inf), m == "uniform"))
    fits: dict[str, NDArray[np.float64]] = {}
    coefficients: dict[str, NDArray[np.float64]] = {}
    params: tuple[ParameterEstimate, ...] = ()
    trace: tuple[float, ...] = ()
    iterations, converged = 0, True
    for mth in dict.fromkeys([best, "uniform", new_arc]):
        if mth in fixed:
            fits[mth] = fixed[mth]
            continue
        fitted, ps = fit(ep, mth)
        fits[mth] = fitted.arc_prob
        if mth != "per_edge":
            coefficients[mth] = fitted.params
        if mth == best:
            params, trace = ps, fitted.trace
            iterations, converged = fitted.iterations, fitted.converged
    if best == "logistic" and feature_names:
        names = ["intercept", *feature_names]
        params = tuple(ParameterEstimate(names[i] if i < len(names) else q.name,
                                         q.value, q.low, q.high) for i, q in enumerate(params))
    arc_prob = fits[best]
    if best == "per_edge":  # arcs never tried get the best few-parameter estimate
        tried = np.bincount(ep.arc, minlength=a.src.shape[0]) > 0
        arc_prob = np.where(tried, arc_prob, fits[new_arc])
        fits[best] = arc_prob
    trials = ep.arc.shape[0]
    rate = float(ep.n_events / trials) if trials else 0.0
    return LearnedModel(
        method=best, reason=reason, arc_prob=arc_prob, parameters=params, held_out=held,
        log_likelihood=log_likelihood(ep, arc_prob[ep.arc]), trace=trace,
        iterations=iterations, converged=converged, campaigns=len(cs), trials=int(trials),
        activations=int(ep.n_events), unexplained=int(ep.unexplained.sum()),
        fallback=rate, fits=fits, coefficients=coefficients, new_arc_method=new_arc)


def _scored(test: Episodes, arc_prob: NDArray[np.float64]) -> float:
    return log_likelihood(test, np.clip(arc_prob[test.arc], _EPS, 1.0 - _EPS))


def _check_methods(methods: Sequence[str] | None, segments: object,
                   features: object) -> list[str]:
    if methods is None:
        return [m for m in LEARNING_METHODS
                if not (m == "segment_pair" and segments is None)
                and not (m == "logistic" and features is None)]
    out = list(dict.fromkeys(methods))
    for m in out:
        if m not in LEARNING_METHODS:
            raise InvalidParameter(f"unknown method {m!r}; expected one of "
                                   f"{', '.join(LEARNING_METHODS)}", field="methods")
    if "segment_pair" in out and segments is None:
        raise InvalidParameter("segment_pair needs a segment code per person", field="segments")
    if "logistic" in out and features is None:
        raise InvalidParameter("logistic needs features, one row per arc", field="features")
    if not out:
        raise InvalidParameter("give at least one method", field="methods")
    return out


def _reason(best: str, held: dict[str, float], k: int) -> str:
    order = sorted(held, key=lambda m: -held[m])
    text = (f"Chosen: {_WORDS[best]}. Learning on all campaigns but one group and predicting "
            f"the adoptions of the group left out ({k} groups in turn), it gave the observed "
            f"adoptions the highest likelihood (log-likelihood {held[best]:,.1f}")
    if len(order) > 1:
        nxt = order[1]
        text += f"; next best {_WORDS[nxt]}, {held[nxt]:,.1f}"
    return text + ")."
