"""Learning Independent Cascade probabilities from past campaigns.

:func:`em_probabilities` is the maximum-likelihood EM of Saito, Nakano and
Kimura [1]_ (per arc, per pair of segments, or a logistic function of arc
features); :func:`goyal_probabilities` the counting estimators of Goyal,
Bonchi and Lakshmanan [2]_ with a Beta prior; :func:`learn_probabilities`
fits the candidates, compares them by held-out log-likelihood over whole
campaigns and returns the best as a :class:`LearnedModel` whose per-arc
probabilities feed :func:`learned_diffusion_graph` and so every forecast.

References
----------
.. [1] K. Saito, R. Nakano, M. Kimura (2008). Prediction of information
   diffusion probabilities for independent cascade model. KES 2008, LNAI 5179.
.. [2] A. Goyal, F. Bonchi, L. V. S. Lakshmanan (2010). Learning influence
   probabilities in social networks. WSDM '10. doi:10.1145/1718487.1718518
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ._em import EmFit
from ._episodes import (
    Campaign,
    Episodes,
    Pairs,
    build_episodes,
    bucket_rounds,
    check_campaigns,
    gather_pairs,
    require_trials,
)
from ._fits import ParameterEstimate, _design, _fit, _segment_classes
from ._selection import LEARNING_METHODS, LearnedModel, learn_probabilities
from ..errors import InvalidParameter
from ..graph import Arcs, DiffusionGraph, GraphArrays, arcs, csr, edge_probabilities
from ..ties.strength import tie_strength

__all__ = [
    "Campaign",
    "LEARNING_METHODS",
    "LearnedModel",
    "ParameterEstimate",
    "adoption_chance",
    "bucket_rounds",
    "campaign_episodes",
    "edge_features",
    "em_probabilities",
    "goyal_lt_weights",
    "goyal_probabilities",
    "learn_probabilities",
    "learned_diffusion_graph",
    "match_arcs",
    "transfer_probabilities",
]



def campaign_episodes(g: GraphArrays, campaigns: Sequence[Campaign]) -> Episodes:
    """Validate ``campaigns`` and build their Independent Cascade trials on ``g``.

    Examples
    --------
    >>> import numpy as np
    >>> g = from_edges([(0, 1), (0, 2)], directed=True)
    >>> ep = campaign_episodes(g, [Campaign(np.array([0, 1]), np.array([0, 1]))])
    >>> ep.arc.tolist(), ep.event.tolist()
    ([0, 1], [0, -1])
    """
    return build_episodes(arcs(g), check_campaigns(g.n, campaigns))


def adoption_chance(g: GraphArrays, arc_prob: ArrayLike, newly_active: ArrayLike) -> NDArray[np.float64]:
    """Chance that each person adopts in the next round, given who adopted in this one.

    Under Independent Cascade each person v not yet active adopts in round
    t + 1 with probability ``1 - prod(1 - p_uv)`` over the in-neighbours u that
    adopted in round t [1]_.

    Examples
    --------
    >>> import numpy as np
    >>> g = from_edges([(0, 2), (1, 2)], directed=True)
    >>> adoption_chance(g, [0.5, 0.5], [0, 1]).tolist()
    [0.0, 0.0, 0.75]

    References
    ----------
    .. [1] D. Kempe, J. Kleinberg, E. Tardos (2003). Maximizing the spread of
       influence through a social network. KDD '03. doi:10.1145/956750.956769
    """
    a = arcs(g)
    p = _check_arc_prob(a, arc_prob)
    act = np.zeros(a.n, dtype=bool)
    act[np.asarray(newly_active, dtype=np.int64)] = True
    use = act[a.src]
    logq = np.bincount(a.dst[use], weights=np.log1p(-np.minimum(p[use], 1.0 - 1e-15)),
                       minlength=a.n)
    chance: NDArray[np.float64] = 0.0 - np.expm1(logq)
    return chance


def em_probabilities(
    g: GraphArrays,
    campaigns: Sequence[Campaign],
    *,
    parameterisation: str = "per_edge",
    segments: ArrayLike | None = None,
    features: ArrayLike | None = None,
    prior_strength: float = 0.0,
    tol: float = 1e-8,
    max_iter: int = 500,
) -> EmFit:
    """Maximum-likelihood IC probabilities by the EM of Saito et al. [1]_.

    Parameters
    ----------
    g : the graph the campaigns ran on.
    campaigns : past campaigns (node, round) over ``g``'s node indices.
    parameterisation : ``per_edge`` (one probability per arc), ``segment_pair``
        (one per ordered pair of segments, needs ``segments``), ``logistic``
        (``sigmoid(b0 + features @ b)``, needs ``features``, one row per arc) or
        ``uniform`` (one probability for every arc).
    segments : segment code per node (>= 0).
    features : arc features, shape (arcs, k); an intercept is added.
    prior_strength : per-edge only: a Beta prior worth this many trials centred
        on the pooled rate; the result is then the posterior mode (0 = plain MLE).
    tol, max_iter : stop when the objective changes by at most ``tol`` times
        its size, or after ``max_iter`` iterations.

    Returns
    -------
    EmFit
        ``params``, ``arc_prob`` per arc (arcs never tried: the pooled rate or
        the prior mean), ``trace`` (objective per iteration, non-decreasing),
        ``iterations``, ``converged``, ``log_likelihood``.

    Raises
    ------
    InvalidParameter
        Bad campaigns (see :func:`campaign_episodes`), an unknown
        parameterisation, missing or malformed segments or features.

    Notes
    -----
    The likelihood and the E- and M-steps are derived in
    :mod:`service.analytics.learning._em`. The logistic M-step is a weighted logistic
    regression solved by Newton's method (IRLS) with numpy. Failed trials are counted
    per arc once, so an iteration costs O(arcs + credited trials) (plus
    O(arcs tried * k^2) for the logistic M-step); building the trials costs
    O(out-arcs of the adopters) per campaign.

    References
    ----------
    .. [1] K. Saito, R. Nakano, M. Kimura (2008). Prediction of information
       diffusion probabilities for independent cascade model. KES 2008, LNAI 5179.

    Examples
    --------
    >>> import numpy as np
    >>> g = from_edges([(0, 1)], directed=True)
    >>> runs = [Campaign(np.array([0, 1]), np.array([0, 1]))] * 3
    >>> runs += [Campaign(np.array([0, 1]), np.array([0, 2]), horizon=2)]
    >>> fit = em_probabilities(g, runs)
    >>> round(float(fit.arc_prob[0]), 4)
    0.75
    """
    a = arcs(g)
    ep = require_trials(build_episodes(a, check_campaigns(g.n, campaigns)))
    return _fit(ep, a, parameterisation, segments=segments, features=features,
                prior_strength=prior_strength, tol=tol, max_iter=max_iter)[0]


def _credits(g: GraphArrays, campaigns: Sequence[Campaign],
             window: int) -> tuple[Arcs, Pairs, NDArray[np.float64], NDArray[np.float64]]:
    """The arcs, their trials, the credited propagations per arc (``v`` adopting within
    ``window`` rounds after ``u``) and the actions per person, counted once for both of
    Goyal et al.'s estimators."""
    if not isinstance(window, (int, np.integer)) or window < 1:
        raise InvalidParameter(f"window must be a whole number of rounds >= 1, got {window!r}",
                               field="window")
    a = arcs(g)
    cs = check_campaigns(g.n, campaigns)
    p = gather_pairs(a, cs)
    gap = p.rv - p.ru
    credited = (p.rv >= 0) & (gap > 0) & (gap <= window)
    a2 = np.bincount(p.arc[credited], minlength=a.src.shape[0]).astype(np.float64)
    acts = np.zeros(g.n)
    for c in cs:
        acts[c.node] += 1.0
    return a, p, a2, acts


def goyal_probabilities(
    g: GraphArrays,
    campaigns: Sequence[Campaign],
    *,
    form: str = "bernoulli",
    window: int = 1,
    prior: tuple[float, float] | None = None,
) -> NDArray[np.float64]:
    """Counting estimates of the arc probabilities by Goyal et al. [1]_.

    Parameters
    ----------
    g : the graph the campaigns ran on.
    campaigns : past campaigns.
    form : ``bernoulli`` p_uv = A_u2v / A_u or ``jaccard`` p_uv = A_u2v / A_u|v,
        where A_u counts campaigns u adopted, A_u2v those where v adopted within
        ``window`` rounds after u (``0 < r_v - r_u <= window``), A_u|v those
        where u or v adopted.
    window : credit window in rounds (>= 1).
    prior : Beta(a, b) prior; the result is the posterior mean
        ``(A_u2v + a) / (A + a + b)``. None (default): a Beta prior worth 2
        campaigns centred on the pooled rate sum A_u2v / sum A over all arcs, so
        that an arc seen a few times is pulled toward what the graph as a whole
        shows rather than toward 0, 1 or one half. ``(0, 0)``: the plain ratio
        (arcs with no data then get 0).

    Returns
    -------
    numpy.ndarray of float64, one probability per arc (order of :func:`~.graph.arcs`).

    Raises
    ------
    InvalidParameter
        Bad campaigns, an unknown form, ``window < 1`` or a negative prior.

    References
    ----------
    .. [1] A. Goyal, F. Bonchi, L. V. S. Lakshmanan (2010). Learning influence
       probabilities in social networks. WSDM '10. doi:10.1145/1718487.1718518

    Examples
    --------
    >>> import numpy as np
    >>> g = from_edges([(0, 1)], directed=True)
    >>> runs = [Campaign(np.array([0, 1]), np.array([0, 1])),
    ...         Campaign(np.array([0, 1]), np.array([0, 3]))]
    >>> goyal_probabilities(g, runs, prior=(0.0, 0.0)).tolist()
    [0.5]
    """
    if form not in ("bernoulli", "jaccard"):
        raise InvalidParameter(f"unknown form {form!r}; expected bernoulli or jaccard",
                               field="form")
    if prior is not None and (len(prior) != 2 or min(prior) < 0):
        raise InvalidParameter("prior must be two numbers a, b >= 0", field="prior")
    a, p, a2, acts = _credits(g, campaigns, window)
    m = a.src.shape[0]
    denom = acts[a.src]
    if form == "jaccard":
        both = np.bincount(p.arc[p.rv >= 0], minlength=m).astype(np.float64)
        denom = acts[a.src] + acts[a.dst] - both
    if prior is None:
        rate = float(a2.sum() / denom.sum()) if denom.sum() > 0 else 0.0
        prior = (2.0 * rate, 2.0 * (1.0 - rate))
    pa, pb = float(prior[0]), float(prior[1])
    with np.errstate(invalid="ignore", divide="ignore"):
        out = (a2 + pa) / (denom + pa + pb)
    result: NDArray[np.float64] = np.where(np.isfinite(out), out, 0.0)
    return result


def goyal_lt_weights(
    g: GraphArrays,
    campaigns: Sequence[Campaign],
    *,
    window: int = 1,
) -> NDArray[np.float64]:
    """Linear Threshold weights from past campaigns by counting, after Goyal et al. [1]_.

    ``b_uv = A_u2v / max(A_v, sum_w A_w2v)``: the share of v's adoptions that
    followed an adoption by u within ``window`` rounds, scaled down where
    several in-neighbours share the credit for the same adoptions, so that
    every person's incoming weights sum to at most 1 (as Linear Threshold
    needs, see :func:`~.graph.check_lt_weights`).

    Raises
    ------
    InvalidParameter
        Bad campaigns or ``window < 1``.

    References
    ----------
    .. [1] A. Goyal, F. Bonchi, L. V. S. Lakshmanan (2010). Learning influence
       probabilities in social networks. WSDM '10. doi:10.1145/1718487.1718518

    Examples
    --------
    >>> import numpy as np
    >>> g = from_edges([(0, 2), (1, 2)], directed=True)
    >>> runs = [Campaign(np.array([0, 1, 2]), np.array([0, 0, 1])),
    ...         Campaign(np.array([0, 2]), np.array([0, 1]))]
    >>> goyal_lt_weights(g, runs).tolist()
    [0.6666666666666666, 0.3333333333333333]
    """
    a, _, a2, acts = _credits(g, campaigns, window)
    credit_in = np.bincount(a.dst, weights=a2, minlength=g.n)
    denom = np.maximum(acts, credit_in)[a.dst]
    out: NDArray[np.float64] = np.where(denom > 0, a2 / np.maximum(denom, 1.0), 0.0)
    return out


def edge_features(g: GraphArrays) -> tuple[NDArray[np.float64], tuple[str, ...]]:
    """Arc features the service already has, one row per arc, and their names.

    Columns: log(1 + interaction count), reciprocity (an arc runs each way),
    neighbourhood overlap and tie strength (see :func:`~.ties.tie_strength`).
    Columns that are constant on ``g`` (reciprocity on an undirected graph) are
    left out, as they would duplicate the intercept.

    Examples
    --------
    >>> import numpy as np
    >>> g = from_edges([(0, 1), (1, 0), (1, 2)], directed=True, weights=[1.0, 3.0, 1.0])
    >>> x, names = edge_features(g); x.shape, names
    ((3, 3), ('interactions (log)', 'reciprocity', 'tie strength'))
    """
    a = arcs(g)
    t = tie_strength(g)
    cols = [np.log1p(a.weight), t.reciprocal[a.edge].astype(np.float64),
            t.overlap[a.edge], t.strength[a.edge]]
    names = ("interactions (log)", "reciprocity", "overlap", "tie strength")
    keep = [i for i, c in enumerate(cols) if c.size and np.ptp(c) > 0]
    if not keep:
        return np.zeros((a.src.shape[0], 0)), ()
    return np.column_stack([cols[i] for i in keep]), tuple(names[i] for i in keep)


def learned_diffusion_graph(g: GraphArrays, arc_prob: ArrayLike) -> DiffusionGraph:
    """The Independent Cascade graph of ``g`` with a learned probability per arc.

    Examples
    --------
    >>> import numpy as np
    >>> g = from_edges([(0, 1)])
    >>> learned_diffusion_graph(g, [0.2, 0.7]).out_prob.tolist()
    [0.2, 0.7]
    """
    a = arcs(g)
    p = _check_arc_prob(a, arc_prob)
    out = csr(a.n, a.src, a.dst, p)
    inn = csr(a.n, a.dst, a.src, p)
    return DiffusionGraph(a.n, "ic", out.indptr, out.indices, out.data,
                          inn.indptr, inn.indices, inn.data)


def _check_arc_prob(a: Arcs, arc_prob: ArrayLike) -> NDArray[np.float64]:
    p = np.asarray(arc_prob, dtype=np.float64)
    if p.shape != a.src.shape or not np.all((p >= 0) & (p <= 1)):
        raise InvalidParameter(f"need one probability in [0, 1] per arc ({a.src.shape[0]})",
                               field="arc_prob")
    return p




def match_arcs(previous: GraphArrays, g: GraphArrays, node_map: ArrayLike) -> NDArray[np.int64]:
    """For each arc of ``g``, the index of the same arc in ``previous``, or -1 when new.

    ``node_map[i]`` is the index in ``previous`` of node ``i`` of ``g`` (-1 for a new
    person). Arcs are in the order of :func:`~.graph.arcs`.

    Examples
    --------
    >>> import numpy as np
    >>> old = from_edges([(0, 1)], directed=True)
    >>> new = from_edges([(1, 2), (2, 0)], directed=True)
    >>> match_arcs(old, new, [-1, 0, 1]).tolist()
    [0, -1]
    """
    nm = np.asarray(node_map, dtype=np.int64)
    if nm.shape != (g.n,) or (nm.size and (nm.min() < -1 or nm.max() >= previous.n)):
        raise InvalidParameter(f"node_map needs one index into the previous version (or -1) "
                               f"per person ({g.n})", field="node_map")
    pa, na = arcs(previous), arcs(g)
    n = max(previous.n, 1)
    old_key = pa.src.astype(np.int64) * n + pa.dst
    order = np.argsort(old_key, kind="stable")
    s, d = nm[na.src], nm[na.dst]
    key = s * n + d
    pos = np.searchsorted(old_key[order], key)
    pos = np.minimum(pos, max(old_key.size - 1, 0))
    found = (s >= 0) & (d >= 0) & (old_key.size > 0)
    if old_key.size:
        found &= old_key[order][pos] == key
    out: NDArray[np.int64] = np.where(found, order[pos] if old_key.size else -1, -1)
    return out


def transfer_probabilities(
    model: LearnedModel,
    g: GraphArrays,
    *,
    previous_arc: ArrayLike,
    segments: ArrayLike | None = None,
    features: ArrayLike | None = None,
) -> NDArray[np.float64]:
    """Probabilities of a model learned on an earlier version, on the arcs of ``g``.

    A few-parameter model (uniform, per segment pair, logistic) is evaluated on
    ``g``'s own segments or features; a per-arc model keeps each matched arc's
    learned probability and gives new arcs the estimate of
    ``model.new_arc_method``; a fixed scheme is recomputed on ``g``.

    Parameters
    ----------
    model : from :func:`learn_probabilities`.
    g : the later version.
    previous_arc : per arc of ``g``, its index in the learned version (-1: new);
        see :func:`match_arcs`.
    segments : segment code per person of ``g`` (segment-pair models); a code
        the model never saw gets the uniform estimate.
    features : arc features of ``g``, same columns as when learning (logistic).

    Returns
    -------
    numpy.ndarray of float64, one probability per arc of ``g``.

    Raises
    ------
    InvalidParameter
        ``previous_arc`` of the wrong length or pointing outside the learned
        version; segments or features missing for a model that needs them.

    Examples
    --------
    >>> import numpy as np
    >>> g = from_edges([(0, 1)], directed=True)
    >>> runs = [Campaign(np.array([0, 1]), np.array([0, 1]))] * 2
    >>> runs += [Campaign(np.array([0, 1]), np.array([0, 2]), horizon=2)] * 2
    >>> m = learn_probabilities(g, runs, methods=["uniform"], folds=2)
    >>> g2 = from_edges([(0, 1), (1, 2)], directed=True)
    >>> transfer_probabilities(m, g2, previous_arc=[0, -1]).tolist()
    [0.5, 0.5]
    """
    a = arcs(g)
    prev = np.asarray(previous_arc, dtype=np.int64)
    m_old = model.arc_prob.shape[0]
    if prev.shape != a.src.shape or (prev.size and (prev.min() < -1 or prev.max() >= m_old)):
        raise InvalidParameter(f"previous_arc needs one index into the learned version's "
                               f"{m_old} arcs (or -1) per arc ({a.src.shape[0]})",
                               field="previous_arc")
    if model.method in ("weighted_cascade", "trivalency"):
        return edge_probabilities(a, model.method)
    if model.method != "per_edge":
        return _evaluate(model, model.method, a, segments, features)
    fresh = _evaluate(model, model.new_arc_method, a, segments, features)
    out: NDArray[np.float64] = np.where(prev >= 0, model.arc_prob[np.maximum(prev, 0)], fresh)
    return out


def _evaluate(model: LearnedModel, method: str, a: Arcs, segments: ArrayLike | None,
              features: ArrayLike | None) -> NDArray[np.float64]:
    coef = model.coefficients[method]
    uniform = float(model.coefficients["uniform"][0])
    if method == "uniform":
        return np.full(a.src.shape[0], uniform)
    if method == "segment_pair":
        k = int(round(np.sqrt(coef.shape[0])))
        _segment_classes(a, segments)  # validates the codes
        seg = np.asarray(segments, dtype=np.int64)
        known = (seg[a.src] < k) & (seg[a.dst] < k)
        idx = np.where(known, seg[a.src] * k + seg[a.dst], 0)
        return np.where(known, coef[idx], uniform)
    x = _design(a, features)
    if x.shape[1] != coef.shape[0]:
        raise InvalidParameter(f"features need the {coef.shape[0] - 1} columns the model was "
                               "learned with", field="features")
    out: NDArray[np.float64] = 1.0 / (1.0 + np.exp(-(x @ coef)))
    return out
