"""Graph profile: degree distribution with a power-law fit (Clauset, Shalizi and
Newman 2009), clustering, assortativity, sampled distances, communities, and
plain-language readings of each figure."""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any

import numpy as np
from numpy.typing import NDArray

from . import _kernels as _k
from .._chunks import run_chunked
from .communities import leiden
from ..errors import Cancelled, ComputationFailed, EmptyGraph, InvalidParameter
from ..graph import GraphArrays, arcs, csr, to_igraph
from .summary import graph_summary

__all__ = [
    "graph_profile",
    "powerlaw_fit",
    "powerlaw_alpha",
    "log_binned_histogram",
    "sample_distances",
]

Progress = Callable[[float, str], None] | None


def log_binned_histogram(x: NDArray[Any], *, bins_per_decade: int = 5) -> dict[str, Any]:
    """Histogram of positive integers in logarithmic bins.

    Bin ``i`` holds ``edges[i] <= x < edges[i + 1]``; edges are distinct
    integers near ``10^(k / bins_per_decade)``. ``density`` is count over
    (number of positive values x integer width), a probability mass per degree
    value comparable across bins. Zeros are counted apart in ``zeros``.

    Examples
    --------
    >>> h = log_binned_histogram([1, 1, 2, 3, 10, 0], bins_per_decade=2)
    >>> h["edges"], h["counts"], h["zeros"]
    ([1, 3, 10, 11], [3, 1, 1], 1)
    """
    v = np.asarray(x, dtype=np.int64)
    zeros = int(np.count_nonzero(v <= 0))
    v = v[v > 0]
    if v.size == 0:
        return {"edges": [], "counts": [], "density": [], "zeros": zeros}
    top = float(v.max()) + 1
    k = math.ceil(math.log10(top) * bins_per_decade)
    edges = np.unique(np.floor(np.logspace(0, k / bins_per_decade, k + 1)).astype(np.int64))
    edges = edges[edges < top]
    edges = np.append(edges, int(top))
    counts = np.histogram(v, bins=edges)[0]
    density = counts / (v.size * np.diff(edges))
    return {"edges": edges.tolist(), "counts": counts.tolist(), "density": density.tolist(),
            "zeros": zeros}


def _hurwitz(a: float | NDArray[np.float64], q: Any) -> Any:
    from scipy.special import zeta

    return zeta(a, q)


def _alpha_discrete(tail: NDArray[np.float64], x_min: float) -> float:
    """Maximise the discrete likelihood ``-n ln zeta(a, x_min) - a sum ln x``."""
    from scipy.optimize import minimize_scalar

    n = tail.shape[0]
    s = float(np.log(tail).sum())

    def nll(a: float) -> float:
        return float(n * math.log(_hurwitz(a, x_min)) + a * s)

    res = minimize_scalar(nll, bounds=(1.0 + 1e-6, 20.0), method="bounded",
                          options={"xatol": 1e-8})
    return float(res.x)


def powerlaw_alpha(x: NDArray[Any], x_min: float, *, discrete: bool) -> tuple[float, float]:
    """Maximum-likelihood exponent for the tail ``x >= x_min``, and its standard error.

    Continuous: ``alpha = 1 + n / sum ln(x_i / x_min)``, standard error
    ``(alpha - 1) / sqrt(n)`` (Clauset et al. 2009, eqs. 3.1 and 3.2).
    Discrete: the ``alpha`` maximising ``-n ln zeta(alpha, x_min) - alpha sum
    ln x_i`` (Hurwitz zeta; eq. 3.5), standard error ``1 / sqrt(n d^2/dalpha^2
    ln zeta(alpha, x_min))`` (eq. 3.6).

    Examples
    --------
    >>> import numpy as np
    >>> round(powerlaw_alpha(np.array([1.0, np.e]), 1.0, discrete=False)[0], 6)
    3.0
    """
    tail = np.asarray(x, dtype=np.float64)
    tail = tail[tail >= x_min]
    n = tail.shape[0]
    if n < 2:
        raise InvalidParameter("power-law fit needs at least 2 values >= x_min", field="x_min")
    if not discrete:
        alpha = 1.0 + n / float(np.log(tail / x_min).sum())
        return alpha, (alpha - 1.0) / math.sqrt(n)
    alpha = _alpha_discrete(tail, x_min)
    h = 1e-4
    lz = [math.log(_hurwitz(alpha + d, x_min)) for d in (-h, 0.0, h)]
    curvature = (lz[0] - 2 * lz[1] + lz[2]) / h**2
    return alpha, 1.0 / math.sqrt(n * curvature) if curvature > 0 else math.inf


def _ks(tail: NDArray[np.float64], x_min: float, alpha: float, discrete: bool) -> float:
    """Largest gap between the tail's empirical CDF and the fitted one."""
    vals, counts = np.unique(tail, return_counts=True)
    emp = np.cumsum(counts) / tail.shape[0]
    before = np.concatenate(([0.0], emp[:-1]))
    if discrete:
        # Model CDF at each observed value and just below it (the largest gap
        # between two observed values sits at one of these integers).
        z = _hurwitz(alpha, x_min)
        at = 1.0 - _hurwitz(alpha, vals + 1.0) / z
        below = 1.0 - _hurwitz(alpha, vals) / z
        return float(max(np.abs(emp - at).max(), np.abs(before - below).max()))
    model = 1.0 - (vals / x_min) ** (1.0 - alpha)
    return float(max(np.abs(emp - model).max(), np.abs(before - model).max()))


def _candidates(x: NDArray[np.float64], min_tail: int, cap: int) -> NDArray[np.float64]:
    vals: NDArray[np.float64] = np.unique(x)
    # Keep x_min values leaving at least min_tail observations in the tail.
    above = x.shape[0] - np.searchsorted(np.sort(x), vals)
    vals = vals[above >= min_tail]
    if vals.shape[0] > cap:
        pick = np.unique(np.round(np.geomspace(1, vals.shape[0], cap)).astype(np.int64) - 1)
        vals = vals[pick]
    return vals


def _fit(x: NDArray[np.float64], discrete: bool, x_min: float | None, min_tail: int,
         cap: int) -> tuple[float, float, float, float, int]:
    """(alpha, se, x_min, ks, n_tail), x_min by smallest KS distance when not given."""
    cands = np.array([x_min]) if x_min is not None else _candidates(x, min_tail, cap)
    if cands.shape[0] == 0:
        raise InvalidParameter(f"power-law fit needs at least {min_tail} positive values",
                               field="min_tail")
    best: tuple[float, float, float, float, int] | None = None
    for xm in cands:
        tail = x[x >= xm]
        if tail.shape[0] < 2 or np.all(tail == tail[0]):
            continue
        alpha, se = powerlaw_alpha(tail, float(xm), discrete=discrete)
        d = _ks(tail, float(xm), alpha, discrete)
        if best is None or d < best[3]:
            best = (alpha, se, float(xm), d, int(tail.shape[0]))
    if best is None:
        raise InvalidParameter("power-law fit needs a tail with at least two distinct values",
                               field="x")
    return best


def _tail_sampler(alpha: float, x_min: float, discrete: bool
                  ) -> Callable[[int, np.random.Generator], NDArray[np.float64]]:
    """Draws from the fitted law above x_min (inverse transform)."""
    if not discrete:
        def continuous(size: int, rng: np.random.Generator) -> NDArray[np.float64]:
            return np.asarray(x_min * (1.0 - rng.random(size)) ** (-1.0 / (alpha - 1.0)))
        return continuous
    # Exact inverse transform on P(X >= x) = zeta(a, x) / zeta(a, x_min) over a
    # table; past its end, the continuous approximation of Clauset et al. (D.6).
    xs = x_min + np.arange(100_000, dtype=np.float64)
    surv = _hurwitz(alpha, xs) / _hurwitz(alpha, x_min)

    def discrete_draw(size: int, rng: np.random.Generator) -> NDArray[np.float64]:
        u = rng.random(size)
        out = np.empty(size)
        inside = u > surv[-1]
        # Largest x with surv(x) >= u; surv decreases, so search its negation.
        idx = np.searchsorted(-surv, -u[inside], side="right") - 1
        out[inside] = xs[np.clip(idx, 0, xs.shape[0] - 1)]
        far = ~inside
        out[far] = np.floor((x_min - 0.5) * (1.0 - u[far]) ** (-1.0 / (alpha - 1.0)) + 0.5)
        return out

    return discrete_draw


def powerlaw_fit(
    x: NDArray[Any],
    *,
    discrete: bool,
    x_min: float | None = None,
    bootstrap: int = 0,
    min_tail: int = 10,
    max_candidates: int = 60,
    random_seed: int = 0,
    progress: Progress = None,
) -> dict[str, Any]:
    """Fit a power law to the tail of ``x`` (Clauset, Shalizi and Newman 2009).

    Parameters
    ----------
    x : array of positive numbers (integers when ``discrete``)
    discrete : bool
        Discrete law ``p(x) = x^-alpha / zeta(alpha, x_min)`` (degrees) or the
        continuous Pareto density.
    x_min : float, optional
        Fix the lower cut-off; None chooses it by smallest KS distance.
    bootstrap : int
        Semi-parametric bootstrap replicates for the goodness-of-fit p-value;
        0 skips the test.
    min_tail : int
        Smallest tail considered when choosing x_min.
    max_candidates : int
        Most x_min candidates scanned (log-spaced among the distinct values).
    random_seed : int
        Seeds the bootstrap.
    progress : callable, optional
        Called after each tenth of the bootstrap; may raise Cancelled.

    Returns
    -------
    dict
        ``alpha``, ``alpha_se``, ``x_min``, ``ks`` (KS distance), ``n``,
        ``n_tail``, ``discrete``, ``bootstrap`` (replicates run), ``p_value``
        and ``plausible`` (``p > 0.1``; both None without bootstrap),
        ``method``.

    Raises
    ------
    InvalidParameter
        Non-positive values, or too few values for a tail.

    Notes
    -----
    The bootstrap follows section 4.1: each replicate keeps the sample size,
    drawing from the fitted law with probability ``n_tail / n`` and otherwise
    uniformly from the observed values below x_min, then refits x_min and
    alpha; ``p`` is the share of replicates whose KS distance is at least the
    observed one. Each replicate is a full fit, so the cost is (bootstrap + 1)
    times one fit.

    References
    ----------
    .. [1] A. Clauset, C. R. Shalizi, M. E. J. Newman (2009). Power-law
       distributions in empirical data. SIAM Review 51(4), 661-703.

    Examples
    --------
    >>> import numpy as np
    >>> x = (1 - np.random.default_rng(0).random(2000)) ** (-1 / 1.5)
    >>> fit = powerlaw_fit(x, discrete=False, x_min=1.0)
    >>> abs(fit["alpha"] - 2.5) < 3 * fit["alpha_se"]
    True
    """
    data = np.asarray(x, dtype=np.float64)
    if data.size == 0 or not np.all(np.isfinite(data)) or np.any(data <= 0):
        raise InvalidParameter("power-law fit needs finite positive values", field="x")
    if discrete and np.any(data != np.round(data)):
        raise InvalidParameter("discrete power-law fit needs integer values", field="x")
    alpha, se, xm, ks, n_tail = _fit(data, discrete, x_min, min_tail, max_candidates)
    p_value = None
    if bootstrap > 0:
        rng = np.random.default_rng(random_seed)
        body = data[data < xm]
        draw = _tail_sampler(alpha, xm, discrete)
        hits = 0
        for b in range(bootstrap):
            k = int(rng.binomial(data.size, n_tail / data.size))
            rep = np.concatenate((draw(k, rng),
                                  rng.choice(body, data.size - k) if body.size else []))
            try:
                hits += _fit(rep, discrete, x_min, min_tail, max_candidates)[3] >= ks
            except InvalidParameter:
                hits += 1  # a replicate too degenerate to fit is no better than the data
            if progress is not None:  # each replicate is a fit: a cancel point after each
                progress((b + 1) / bootstrap, f"power-law bootstrap {b + 1} of {bootstrap}")
        p_value = hits / bootstrap
    return {
        "alpha": alpha, "alpha_se": se, "x_min": xm, "ks": ks, "n": int(data.size),
        "n_tail": n_tail, "discrete": discrete, "bootstrap": bootstrap, "p_value": p_value,
        "plausible": None if p_value is None else bool(p_value > 0.1),
        "method": "Clauset, Shalizi and Newman 2009: maximum likelihood, x_min by "
        "smallest KS distance, semi-parametric bootstrap p-value",
    }


def _ratio_se(sums: NDArray[np.float64], reached: NDArray[np.int64], mean: float, k: int,
              n: int) -> float:
    """Standard error of a ratio mean over sampled sources (0 when all were used)."""
    if k < 2 or k >= n:
        return 0.0
    resid = sums - mean * reached
    var = float(np.dot(resid, resid)) / (k - 1) / k * (1 - k / n)
    return math.sqrt(var) / float(reached.mean()) if reached.mean() > 0 else 0.0


def sample_distances(g: GraphArrays, *, samples: int = 100,
                     random_seed: int = 0, progress: Progress = None) -> dict[str, Any]:
    """Average distance and effective diameter from BFS out of sampled sources.

    Sources are drawn uniformly without replacement (all nodes when
    ``samples >= n``); distances are hops along arc directions. The
    effective diameter is the 90th percentile of the distances between
    reachable pairs, interpolated between whole hops (Leskovec, Kleinberg
    and Faloutsos 2005); ``effective_diameter_hops`` is the smallest whole
    number of hops covering 90 %. ``average_distance_se`` is the standard
    error of the average from sampling sources (ratio estimator with finite
    population correction; 0 when every node is a source).

    Examples
    --------
    >>> import numpy as np
    >>> g = from_edges([(0, 1), (1, 2), (2, 3)])
    >>> d = sample_distances(g)
    >>> d["average_distance"], d["sources"], d["histogram"]
    (1.6666666666666667, 4, [0, 6, 4, 2])
    """
    n = g.n
    a = arcs(g)
    keep = a.src != a.dst
    out = csr(n, a.src[keep], a.dst[keep], a.weight[keep])
    rng = np.random.default_rng(random_seed)
    k = min(int(samples), n)
    sources = np.sort(rng.choice(n, size=k, replace=False)).astype(np.int64)
    counts = np.zeros(n + 1, dtype=np.int64)
    sums = np.zeros(k, dtype=np.float64)
    reached = np.zeros(k, dtype=np.int64)

    def bfs(start: int, count: int) -> None:  # sources in slices of about a quarter second
        c, s, r = _k.bfs_distance_counts(n, out.indptr, out.indices, sources[start:start + count])
        counts[:] += c
        sums[start:start + count] = s
        reached[start:start + count] = r

    def after(done: int) -> None:
        if progress is not None:
            progress(done / k, f"distances: {done} of {k} sources")

    run_chunked(k, bfs, after=after, first=8)
    last = int(np.flatnonzero(counts)[-1]) if counts.any() else 0
    hist = counts[:last + 1]
    pairs = int(hist.sum())
    result: dict[str, Any] = {"sources": k, "pairs": pairs,
                              "reachable_share": pairs / (k * (n - 1)) if n > 1 else None,
                              "histogram": hist.tolist(), "average_distance": None,
                              "average_distance_se": None, "effective_diameter": None,
                              "effective_diameter_hops": None,
                              "max_distance_seen": last if pairs else None}
    if pairs:
        cdf = np.cumsum(hist) / pairs
        d = int(np.searchsorted(cdf, 0.9 - 1e-12))
        below = cdf[d - 1] if d > 0 else 0.0
        eff = d - 1 + (0.9 - below) / (cdf[d] - below) if cdf[d] > below else float(d)
        mean = float(np.dot(np.arange(last + 1), hist) / pairs)
        result.update(average_distance=mean, effective_diameter=float(eff),
                      effective_diameter_hops=d,
                      average_distance_se=_ratio_se(sums, reached, mean, k, n))
    return result


def graph_profile(
    g: GraphArrays,
    *,
    random_seed: int = 0,
    bfs_samples: int = 100,
    bootstrap: int = 0,
    progress: Progress = None,
) -> dict[str, Any]:
    """Profile a graph: size, degrees and their power-law fit, clustering,
    assortativity, distances, communities, and a plain-language reading of each.

    Parameters
    ----------
    g : GraphArrays
    random_seed : int
        Seeds the BFS source sample, the bootstrap and Leiden.
    bfs_samples : int
        BFS sources for the distance estimates (all nodes when larger than n);
        each costs one BFS over all arcs (100 take about 7 s on 2 million arcs).
    bootstrap : int
        Power-law goodness-of-fit replicates (0 = no p-value). Each costs one
        fit, about a tenth of a second on 10^4 degrees.
    progress : callable, optional
        ``progress(fraction, message)`` after each stage; may raise Cancelled.

    Returns
    -------
    dict
        ``summary`` (:func:`graph_summary`), ``degree_distribution`` (log-binned
        ``total`` degree, plus ``in`` and ``out`` when directed), ``power_law``
        (:func:`powerlaw_fit` on positive total degrees, discrete; None when
        too few), ``clustering`` (``average`` local, zeros below degree 2, and
        ``global`` transitivity, both on the undirected simple view),
        ``assortativity`` (degree, Newman 2002; out-degree of source against
        in-degree of target when directed, as NetworkX), ``distances``
        (:func:`sample_distances`), ``communities`` (``count``, ``modularity``,
        ``largest_share``), ``readings`` (one sentence per figure) and
        ``random_seed``.

    Raises
    ------
    EmptyGraph
        The graph has no nodes.
    ComputationFailed
        igraph failed.

    References
    ----------
    .. [1] A. Clauset, C. R. Shalizi, M. E. J. Newman (2009). Power-law
       distributions in empirical data. SIAM Review 51(4), 661-703.
    .. [2] M. E. J. Newman (2002). Assortative mixing in networks. Phys. Rev.
       Lett. 89, 208701.
    .. [3] J. Leskovec, J. Kleinberg, C. Faloutsos (2005). Graphs over time:
       densification laws, shrinking diameters and possible explanations. KDD '05.

    Examples
    --------
    >>> import numpy as np
    >>> g = from_edges([(0, 1), (1, 2), (2, 3), (3, 0)])
    >>> p = graph_profile(g)
    >>> p["distances"]["average_distance"], p["clustering"]["global"]
    (1.3333333333333333, 0.0)
    """
    if g.n == 0:
        raise EmptyGraph("the graph has no nodes")
    steps = 6

    def step(i: int, message: str) -> None:
        if progress is not None:
            progress(i / steps, message)

    summary = graph_summary(g)
    out_deg = np.bincount(g.src, minlength=g.n)
    in_deg = np.bincount(g.dst, minlength=g.n)
    total = out_deg + in_deg
    dist: dict[str, Any] = {"total": log_binned_histogram(total)}
    if g.directed:
        dist["in"] = log_binned_histogram(in_deg)
        dist["out"] = log_binned_histogram(out_deg)
    step(1, "summary and degree distribution")
    try:
        power = powerlaw_fit(total[total > 0], discrete=True, bootstrap=bootstrap,
                             random_seed=random_seed,
                             progress=None if progress is None else
                             (lambda f, m: progress((1 + f) / steps, m)))
    except InvalidParameter:
        power = None
    step(2, "power-law fit")
    ig = to_igraph(g, weights=False)
    try:
        simple = ig.as_undirected(mode="collapse")
        simple.simplify()
        clustering = {"average": float(simple.transitivity_avglocal_undirected(mode="zero")),
                      "global": float(simple.transitivity_undirected(mode="zero"))}
        h = ig.copy()
        h.simplify(multiple=False, loops=True)
        r = float(h.assortativity_degree(directed=True)) if h.ecount() else math.nan
    except Cancelled:
        raise
    except Exception as exc:
        raise ComputationFailed(f"igraph failed in the graph profile: {exc}") from exc
    assortativity = r if math.isfinite(r) else None
    step(3, "clustering and assortativity")
    distances = sample_distances(g, samples=bfs_samples, random_seed=random_seed,
                                 progress=None if progress is None else
                                 (lambda f, m: progress((3 + f) / steps, m)))
    step(4, "distances")
    membership, q = leiden(g, weights=True, random_seed=random_seed)
    sizes = np.bincount(membership)
    communities = {"count": int(sizes.shape[0]), "modularity": q,
                   "largest_share": float(sizes.max() / g.n),
                   "algorithm": "Leiden, modularity, undirected view"}
    step(5, "communities")
    profile = {
        "summary": summary,
        "degree_distribution": dist,
        "power_law": power,
        "clustering": clustering,
        "assortativity": assortativity,
        "distances": distances,
        "communities": communities,
        "random_seed": random_seed,
    }
    profile["readings"] = _readings(profile)
    step(6, "profile done")
    return profile


def _readings(p: dict[str, Any]) -> dict[str, str]:
    """Short sentences read off the figures; thresholds are common practice."""
    s = p["summary"]
    out: dict[str, str] = {}
    out["size"] = (f"{s['nodes']:,} people and {s['edges']:,} ties; on average each person "
                   f"has {2 * s['edges'] / s['nodes']:.1f} ties." if not s["directed"] else
                   f"{s['nodes']:,} people and {s['edges']:,} directed ties.")
    share = s["largest_weak_share"]
    if share >= 0.99:
        out["components"] = "Everyone is connected in one network."
    elif share >= 0.5:
        out["components"] = (f"Most people ({share:.0%}) form one connected network; the rest "
                             f"sit in {s['weak_components'] - 1:,} smaller groups out of reach.")
    else:
        out["components"] = (f"Fragmented: the largest connected group holds only {share:.0%} "
                             "of the people, so a message cannot reach most of them.")
    if s["reciprocity"] is not None:
        rec = s["reciprocity"]
        out["reciprocity"] = (f"{rec:.0%} of ties are returned; "
                              + ("most relationships are mutual." if rec >= 0.5 else
                                 "most ties run one way."))
    # One reading of how uneven the degrees are, used by "degrees" and "assortativity" alike,
    # so the two never contradict each other: the best connected against the median person.
    top, median = s["degree_max"], s["degree_median"]
    spread = "even"
    if top is not None and median is not None and top > 0:
        ratio = top / max(median, 1.0)
        spread = "heavy" if ratio >= 8 and top >= 10 else "uneven" if ratio >= 3 else "even"
    if top is None or top == 0:
        out["degrees"] = "Nobody has any ties yet."
    elif spread == "heavy":
        out["degrees"] = (f"Heavy-tailed: a few people hold many ties (the best connected "
                          f"has {top:,}, the median person {median:g}).")
    elif spread == "uneven":
        out["degrees"] = (f"Somewhat uneven: a few people stand out (the best connected has "
                          f"{top:,} ties, the median person {median:g}).")
    else:
        out["degrees"] = (f"Ties are spread fairly evenly (the best connected has {top:,}, the "
                          f"median person {median:g}); nobody holds a large share of them.")
    pl = p["power_law"]
    if pl is None:
        out["power_law"] = "Too few connected people to fit a power law."
    elif pl["p_value"] is None:
        out["power_law"] = (f"Above {pl['x_min']:g} ties the degrees decay like a power law "
                            f"with exponent {pl['alpha']:.2f} (not tested for plausibility).")
    elif pl["plausible"]:
        out["power_law"] = (f"A power law is a plausible fit above {pl['x_min']:g} ties "
                            f"(exponent {pl['alpha']:.2f}, p = {pl['p_value']:.2f}).")
    else:
        out["power_law"] = (f"The power law is not a plausible fit (p = {pl['p_value']:.2f}); "
                            "the degrees follow some other law.")
    c = p["clustering"]["average"]
    base = s["density"]  # expected clustering of random ties at this density
    times = f", {c / base:,.0f} times what random ties would give" if base > 0 else ""
    if c >= 0.3 or (c >= 0.1 and c >= 5 * base):
        out["clustering"] = f"Friends of friends are often friends (clustering {c:.2f}{times})."
    elif c >= 0.05:
        out["clustering"] = f"Some clustering ({c:.2f}{times})."
    else:
        out["clustering"] = f"Little clustering ({c:.2f}): friends of friends are rarely linked."
    r = p["assortativity"]
    if r is None:
        out["assortativity"] = "Degree mixing is undefined here (all degrees equal)."
    elif r > 0.1:
        out["assortativity"] = (f"Well-connected people tend to link to each other "
                                f"(assortativity {r:.2f}).")
    elif r < -0.1 and spread != "even":
        out["assortativity"] = (f"Well-connected people link mostly to less-connected ones, "
                                f"hub-and-spoke (assortativity {r:.2f}).")
    elif r < -0.1:
        out["assortativity"] = (f"People with more ties link somewhat more often to people with fewer "
                                f"(assortativity {r:.2f}), though nobody stands out as a hub.")
    else:
        out["assortativity"] = f"No strong pattern in who links to whom by degree ({r:.2f})."
    d = p["distances"]
    if d["average_distance"] is None:
        out["distances"] = "No two people are connected."
    else:
        out["distances"] = (f"About {d['average_distance']:.1f} steps separate two connected "
                            f"people on average; 90% are within {d['effective_diameter_hops']} "
                            f"steps (estimated from {d['sources']:,} starting points).")
    q = p["communities"]["modularity"]
    k = p["communities"]["count"]
    out["communities"] = (f"{k:,} communities with clear boundaries (modularity {q:.2f})."
                          if q >= 0.3 else
                          f"{k:,} communities, loosely separated (modularity {q:.2f}).")
    return out
