"""Fitting one parameterisation by EM, with intervals for the few-parameter ones.

Private to :mod:`service.analytics.learning.probabilities`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ._em import EmFit, em, fisher_information
from ._episodes import Episodes
from ..errors import InvalidParameter
from ..graph import Arcs

_Z95 = 1.959963984540054


@dataclass(frozen=True)
class ParameterEstimate:
    """One parameter of a few-parameter model with its 95% interval."""

    name: str
    value: float
    low: float
    high: float



def _fit(ep: Episodes, a: Arcs, kind: str, *, segments: ArrayLike | None,
         features: ArrayLike | None, prior_strength: float, tol: float,
         max_iter: int) -> tuple[EmFit, tuple[ParameterEstimate, ...]]:
    if kind == "per_edge":
        rate = _pooled_rate(ep)
        prior = (prior_strength * rate, prior_strength * (1.0 - rate))
        return em(ep, "per_edge", prior=prior, tol=tol, max_iter=max_iter), ()
    if kind in ("segment_pair", "uniform"):
        if kind == "uniform":
            classes, names = np.zeros(a.src.shape[0], dtype=np.int64), ["p"]
        else:
            classes, names = _segment_classes(a, segments)
        fit = em(ep, "classes", classes=classes, n_classes=len(names), tol=tol,
                 max_iter=max_iter)
        return fit, _class_intervals(ep, fit, classes, names)
    if kind == "logistic":
        x = _design(a, features)
        fit = em(ep, "logistic", features=x, tol=tol, max_iter=max_iter)
        info = fisher_information(ep, "logistic", fit.params, features=x)
        se = _standard_errors(info)
        names = ["intercept"] + [f"feature {j}" for j in range(1, x.shape[1])]
        return fit, tuple(ParameterEstimate(n, float(v), float(v - _Z95 * s), float(v + _Z95 * s))
                          for n, v, s in zip(names, fit.params, se))
    raise InvalidParameter(f"unknown parameterisation {kind!r}; expected per_edge, "
                           "segment_pair, logistic or uniform", field="parameterisation")


def _pooled_rate(ep: Episodes) -> float:
    n = ep.arc.shape[0]
    return float(ep.n_events / n) if n else 0.0


def _segment_classes(a: Arcs, segments: ArrayLike | None) -> tuple[NDArray[np.int64], list[str]]:
    if segments is None:
        raise InvalidParameter("segment_pair needs a segment code per person", field="segments")
    seg = np.asarray(segments)
    if seg.shape != (a.n,) or seg.dtype.kind not in "iu" or (seg.size and seg.min() < 0):
        raise InvalidParameter(f"segments need one code >= 0 per person ({a.n})",
                               field="segments")
    k = int(seg.max()) + 1 if seg.size else 1
    cls = seg[a.src].astype(np.int64) * k + seg[a.dst]
    return cls, [f"segment {i} -> segment {j}" for i in range(k) for j in range(k)]


def _design(a: Arcs, features: ArrayLike | None) -> NDArray[np.float64]:
    if features is None:
        raise InvalidParameter("logistic needs features, one row per arc", field="features")
    f = np.asarray(features, dtype=np.float64)
    m = a.src.shape[0]
    if f.ndim == 1:
        f = f[:, None]
    if f.ndim != 2 or f.shape[0] != m or not np.isfinite(f).all():
        raise InvalidParameter(f"features need one row of finite numbers per arc ({m})",
                               field="features")
    return np.hstack([np.ones((m, 1)), f])


def _standard_errors(info: NDArray[np.float64]) -> NDArray[np.float64]:
    try:
        cov = np.linalg.pinv(info)
    except np.linalg.LinAlgError:
        return np.full(info.shape[0], np.inf)
    out: NDArray[np.float64] = np.sqrt(np.maximum(np.diag(cov), 0.0))
    return out


def _class_intervals(ep: Episodes, fit: EmFit, classes: NDArray[np.int64],
                     names: list[str]) -> tuple[ParameterEstimate, ...]:
    """Wald intervals from the observed information; rule of three at zero."""
    trials = np.bincount(classes[ep.arc], minlength=len(names))
    tried = np.flatnonzero(trials > 0)
    info = fisher_information(ep, "classes", fit.params, classes=classes)
    se = np.full(len(names), np.inf)
    if tried.size:
        se[tried] = _standard_errors(info[np.ix_(tried, tried)])
    out = []
    for i, name in enumerate(names):
        v = float(fit.params[i])
        if trials[i] == 0:
            continue
        if v <= 0.0:  # no success: the rule of three (common practice) bounds it
            lo, hi = 0.0, min(1.0, 3.0 / float(trials[i]))
        else:
            lo, hi = max(0.0, v - _Z95 * se[i]), min(1.0, v + _Z95 * se[i])
        out.append(ParameterEstimate(name, v, float(lo), float(hi)))
    return tuple(out)


