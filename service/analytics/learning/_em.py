"""The EM of Saito, Nakano and Kimura (2008) for Independent Cascade probabilities.

Private to :mod:`service.analytics.learning.probabilities`. Three parameterisations share one
E-step: one probability per arc (with an optional Beta prior, giving the
posterior mode), one per class of arcs (a pair of segments, or a single class
for "uniform at its best p"), and a logistic function of arc features.

Likelihood (derived again here, as the references are recalled): in an
episode, v adopting in round t + 1 with parents A (arcs whose tail adopted in
round t) has probability ``1 - prod_{a in A} (1 - p_a)``; a failed trial has
``1 - p_a``. Introduce for each trial the unseen coin x_a (did this parent's
attempt succeed). The complete-data log-likelihood is
``sum_a x_a log p_a + (1 - x_a) log(1 - p_a)``; given the data, failed trials
have x_a = 0 and, for an event, ``E[x_a | at least one coin of A] = p_a / (1 -
prod_{A} (1 - p))``. So the E-step credits each parent with that ratio and the
M-step maximises ``sum_a q_a log p_a + (1 - q_a) log(1 - p_a)`` over the
parameters: per arc, credits over trials; per class, the pooled ratio; for the
logistic model, a weighted logistic regression (Newton's method, IRLS, with
step halving so that each M-step does not lower the expected complete-data
log-likelihood, hence the observed one does not fall either).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from ._episodes import Episodes

TINY = 1e-12  # probabilities are kept in [TINY, 1 - TINY] inside logarithms


@dataclass(frozen=True, eq=False)
class EmFit:
    """One EM fit: parameters, per-arc probabilities and the objective per iteration."""

    kind: str  # "per_edge", "classes" or "logistic"
    params: NDArray[np.float64]
    arc_prob: NDArray[np.float64]  # per arc of the version (arcs without trials: fallback)
    trace: tuple[float, ...]  # log-likelihood (+ log prior for per_edge) after each iteration
    iterations: int
    converged: bool
    log_likelihood: float


def log_likelihood(ep: Episodes, p_trial: NDArray[np.float64]) -> float:
    """Observed-data log-likelihood of the episodes under per-trial probabilities."""
    pt = np.clip(p_trial, 0.0, 1.0)
    s = np.log1p(-np.minimum(pt, 1.0 - TINY))
    hit = ep.event >= 0
    total = float(s[~hit].sum())
    if ep.n_events:
        logq = np.bincount(ep.event[hit], weights=s[hit], minlength=ep.n_events)
        total += float(np.log(np.maximum(-np.expm1(logq), 1e-300)).sum())
    return total


def e_step(ep: Episodes, p_trial: NDArray[np.float64]) -> tuple[NDArray[np.float64], float]:
    """Expected success of every trial and the observed log-likelihood."""
    pt = np.minimum(np.clip(p_trial, 0.0, 1.0), 1.0 - TINY)
    s = np.log1p(-pt)
    hit = ep.event >= 0
    q = np.zeros(pt.shape[0])
    ll = float(s[~hit].sum())
    if ep.n_events:
        logq = np.bincount(ep.event[hit], weights=s[hit], minlength=ep.n_events)
        pe = np.maximum(-np.expm1(logq), 1e-300)
        q[hit] = pt[hit] / pe[ep.event[hit]]
        ll += float(np.log(pe).sum())
    return q, ll


def _e_step_by_arc(p_arc: NDArray[np.float64], fails: NDArray[np.float64],
                   h_arc: NDArray[np.int64], h_ev: NDArray[np.int64],
                   n_events: int) -> tuple[NDArray[np.float64], float]:
    """:func:`e_step` with the failed trials counted per arc: credits of the credited trials."""
    pa = np.minimum(np.clip(p_arc, 0.0, 1.0), 1.0 - TINY)
    s = np.log1p(-pa)
    ll = float(fails @ s)
    if not n_events:
        return np.zeros(0), ll
    logq = np.bincount(h_ev, weights=s[h_arc], minlength=n_events)
    pe = np.maximum(-np.expm1(logq), 1e-300)
    q: NDArray[np.float64] = pa[h_arc] / pe[h_ev]
    return q, ll + float(np.log(pe).sum())


def _sigmoid(z: NDArray[np.float64]) -> NDArray[np.float64]:
    out: NDArray[np.float64] = 0.5 * (1.0 + np.tanh(0.5 * z))
    return out


def em(ep: Episodes, kind: str, *, classes: NDArray[np.int64] | None = None,
       n_classes: int = 1, features: NDArray[np.float64] | None = None,
       prior: tuple[float, float] = (0.0, 0.0), tol: float = 1e-8,
       max_iter: int = 500) -> EmFit:
    """Run the EM to ``tol`` (relative change of the objective) or ``max_iter``."""
    arc = ep.arc
    trials = np.bincount(arc, minlength=ep.n_arcs).astype(np.float64)
    total_trials = float(trials.sum())
    rate = ep.n_events / total_trials if total_trials else 0.0
    start = min(max(rate, 1e-3), 0.5)
    a, b = prior
    if kind == "per_edge":
        params = np.full(ep.n_arcs, start)
    elif kind == "classes":
        assert classes is not None
        params = np.full(n_classes, start)
        ctrials = np.bincount(classes, weights=trials, minlength=n_classes)
    elif kind == "logistic":
        assert features is not None
        params = np.zeros(features.shape[1])
        params[0] = math.log(start / (1.0 - start))
        seen = np.flatnonzero(trials > 0)
        xs = features[seen]
    else:
        raise ValueError(kind)

    def arc_prob(theta: NDArray[np.float64]) -> NDArray[np.float64]:
        if kind == "per_edge":
            return theta
        if kind == "classes":
            assert classes is not None
            return theta[classes]
        assert features is not None
        return _sigmoid(features @ theta)

    def log_prior(p: NDArray[np.float64]) -> float:
        if kind != "per_edge" or (a == 0.0 and b == 0.0):
            return 0.0
        seen = trials > 0
        pp = np.clip(p[seen], TINY, 1.0 - TINY)
        return float((a * np.log(pp) + b * np.log1p(-pp)).sum())

    # Failed trials only ever contribute (1 - p_a) per trial: count them per arc once, so
    # that an iteration costs O(arcs + credited trials), not O(trials).
    hit = ep.event >= 0
    h_arc, h_ev = arc[hit], ep.event[hit]
    fails = np.bincount(arc[~hit], minlength=ep.n_arcs).astype(np.float64)
    trace: list[float] = []
    converged = False
    prev = -math.inf
    it = 0
    for it in range(1, max_iter + 1):
        p_arc = arc_prob(params)
        q, ll = _e_step_by_arc(p_arc, fails, h_arc, h_ev, ep.n_events)
        obj = ll + log_prior(p_arc)
        trace.append(obj)
        if it > 1 and abs(obj - prev) <= tol * (1.0 + abs(obj)):
            converged = True
            break
        prev = obj
        credit = np.bincount(h_arc, weights=q, minlength=ep.n_arcs).astype(np.float64)
        if kind == "per_edge":
            with np.errstate(invalid="ignore", divide="ignore"):
                new = (credit + a) / (trials + a + b)
            params = np.where(trials > 0, new, params)
        elif kind == "classes":
            assert classes is not None
            cc = np.bincount(classes, weights=credit, minlength=n_classes)
            params = np.where(ctrials > 0, cc / np.maximum(ctrials, 1.0), params)
        else:
            params = _irls(xs, credit[seen], trials[seen], params)
    p_arc = arc_prob(params)
    if kind == "per_edge":
        fallback = (a / (a + b)) if a + b > 0 else rate
        p_arc = np.where(trials > 0, p_arc, fallback)
    ll = log_likelihood(ep, p_arc[arc])
    return EmFit(kind, params, p_arc, tuple(trace), it, converged, ll)


def _irls(x: NDArray[np.float64], succ: NDArray[np.float64], n: NDArray[np.float64],
          beta: NDArray[np.float64], *, steps: int = 25) -> NDArray[np.float64]:
    """Maximise sum succ log p + (n - succ) log(1 - p), p = sigmoid(x beta), by Newton."""
    def q(bb: NDArray[np.float64]) -> float:
        z = x @ bb
        # log sigmoid(z) = -log1p(exp(-z)); computed stably with logaddexp.
        return float((succ * -np.logaddexp(0.0, -z) + (n - succ) * -np.logaddexp(0.0, z)).sum())

    cur = q(beta)
    ridge = 1e-8 * np.eye(x.shape[1])
    for _ in range(steps):
        p = _sigmoid(x @ beta)
        grad = x.T @ (succ - n * p)
        hess = (x * (n * p * (1.0 - p))[:, None]).T @ x + ridge
        try:
            step = np.linalg.solve(hess, grad)
        except np.linalg.LinAlgError:
            step = np.linalg.lstsq(hess, grad, rcond=None)[0]
        t = 1.0
        while t > 1e-6:
            cand = beta + t * step
            val = q(cand)
            if val >= cur:
                break
            t *= 0.5
        else:
            return beta
        gain = val - cur
        beta, cur = cand, val
        if gain <= 1e-12 * (1.0 + abs(cur)):
            break
    return beta


def fisher_information(ep: Episodes, kind: str, params: NDArray[np.float64], *,
                       classes: NDArray[np.int64] | None = None,
                       features: NDArray[np.float64] | None = None) -> NDArray[np.float64]:
    """Observed Fisher information (minus the Hessian of the observed log-likelihood).

    With s_a = log(1 - p_a) and S_e the sum of s over an event's parents, the
    log-likelihood is sum_e log(1 - exp S_e) + sum_failed s_a; its Hessian is
    sum_e h_e G_e G_e^T + sum_trials c_a d2 s_a, with G_e the event's sum of
    ds_a, h_e = -P/(1-P)^2, c_a = -P/(1-P) for credited trials (P the event's
    product of 1 - p) and 1 for failed ones.
    """
    arc = ep.arc
    hit = ep.event >= 0
    if kind == "classes":
        assert classes is not None
        k = params.shape[0]
        th = np.minimum(params, 1.0 - 1e-9)
        cls = classes[arc]
        p = th[cls]
        ds_scalar = -1.0 / (1.0 - p)
        d2 = -1.0 / (1.0 - p) ** 2
    else:
        assert features is not None
        k = params.shape[0]
        p = _sigmoid(features @ params)[arc]
    s = np.log1p(-np.minimum(p, 1.0 - 1e-12))
    c = np.ones(p.shape[0])
    h = np.zeros(ep.n_events)
    if ep.n_events:
        logq = np.bincount(ep.event[hit], weights=s[hit], minlength=ep.n_events)
        big = np.exp(logq)
        one_minus = np.maximum(1.0 - big, 1e-300)
        c[hit] = (-big / one_minus)[ep.event[hit]]
        h = -big / one_minus**2
    hess = np.zeros((k, k))
    if kind == "classes":
        g = np.zeros((ep.n_events, k))
        if ep.n_events:
            flat = np.bincount(ep.event[hit] * k + cls[hit], weights=ds_scalar[hit],
                               minlength=ep.n_events * k)
            g = flat.astype(np.float64).reshape(ep.n_events, k)
        hess += (g * h[:, None]).T @ g
        hess += np.diag(np.bincount(cls, weights=c * d2, minlength=k))
    else:
        assert features is not None
        x = features[arc]
        g = np.zeros((ep.n_events, k))
        for j in range(k):
            g[:, j] = np.bincount(ep.event[hit], weights=-p[hit] * x[hit, j],
                                  minlength=ep.n_events)
        hess += (g * h[:, None]).T @ g
        hess -= (x * (c * p * (1.0 - p))[:, None]).T @ x
    out: NDArray[np.float64] = -hess
    return out
