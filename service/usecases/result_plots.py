"""The plots of job results: a result's stored data in, SVG text out.

Each job kind lists its plots on its ``JobKind`` (``plots={name: function}``); the
functions here read the kind's result document and draw it with
:mod:`service.usecases.plots`. A result that lacks what a plot needs is an
``InvalidParameter`` naming the plot (a 422 that says what to do).
"""

from __future__ import annotations

import math
import re
from typing import Any

from service.analytics.errors import InvalidParameter

from . import plots

__all__ = ["degree_distribution", "reach_curve", "segment_reach", "adoption", "outcomes"]

Z95 = 1.959963984540054  # two-sided 95% normal quantile
Z90 = 1.6448536269514722  # two-sided 90% normal quantile (5th to 95th percentile)


def degree_distribution(data: dict[str, Any]) -> str:
    dist = data["degree_distribution"]["total"]
    edges, density = dist["edges"], dist["density"]
    # Bin centres on the log scale (geometric mean of the bin's smallest and largest degree).
    centres = [(a * max(b - 1, a)) ** 0.5 for a, b in zip(edges[:-1], edges[1:])]
    pts = [(c, d) for c, d in zip(centres, density) if d > 0]
    fit = data.get("power_law") or {}
    alpha, xmin = fit.get("alpha"), fit.get("x_min")
    fx: list[float] = []
    fy: list[float] = []
    if alpha and xmin and fit.get("n") and pts:
        from scipy.special import zeta

        # The fitted law as a probability per degree value, like the histogram's density:
        # share of people in the tail times x^-alpha / zeta(alpha, x_min) (Clauset, Shalizi,
        # Newman 2009, eq. 2.4 for discrete data; continuous approximation when not discrete).
        tail = float(fit.get("n_tail") or 0) / float(fit["n"])
        top = max(float(edges[-1]) - 1, xmin)
        steps = 40
        fx = [xmin * (top / xmin) ** (i / steps) for i in range(steps + 1)]
        if fit.get("discrete", True):
            norm = float(zeta(alpha, xmin))
            fy = [tail * x ** -alpha / norm for x in fx]
        else:
            fy = [tail * (alpha - 1) / xmin * (x / xmin) ** -alpha for x in fx]
    return plots.degree_distribution_svg([p[0] for p in pts], [p[1] for p in pts], fit_x=fx or None,
                                         fit_y=fy or None, alpha=alpha, x_min=xmin)


def _rr_count(source: str | None) -> int | None:
    m = re.search(r"([\d,]+) fresh RR sets", source or "")
    return int(m.group(1).replace(",", "")) if m else None


def reach_curve(data: dict[str, Any]) -> str:
    curve = [float(v) for v in data["reach_curve"]]
    people = int(data.get("nodes") or 0) or None
    unit = str(data.get("reach_unit") or "people")
    low = high = None
    sets = _rr_count(data.get("reach_curve_source"))
    if sets and people and unit == "people":
        # The curve is n times the share f of R random RR sets covered, a binomial share:
        # its standard error is n * sqrt(f (1 - f) / R).
        se = [people * math.sqrt(max(f, 0.0) * max(1 - f, 0.0) / sets) for f in (c / people for c in curve)]
        low = [max(c - Z95 * s, 0.0) for c, s in zip(curve, se)]
        high = [c + Z95 * s for c, s in zip(curve, se)]
    others = {
        plots.nice_name(k): [float(v) for v in b["reach_curve"]]
        for k, b in (data.get("baselines") or {}).items()
        if isinstance(b, dict) and b.get("reach_curve")
    }
    exp = data.get("expected_reach") or {}
    check = (float(exp["mean"]), float(exp["ci_low"]), float(exp["ci_high"])) if unit == "people" and exp else None
    seeds = data.get("seeds") or []
    return plots.reach_curve_svg(curve, low=low, high=high, others=others, budget=len(seeds) or None,
                                 people=people, unit=unit, check=check)


def _forecast_sets(data: dict[str, Any]) -> list[dict[str, Any]]:
    sets = data.get("forecasts") or []
    if not sets:
        raise InvalidParameter("the forecast has no seed sets to plot", field="name")
    return list(sets)


def _set_name(f: dict[str, Any]) -> str:
    return plots.nice_name(str(f["name"]), f.get("seed_count"))


def segment_reach(data: dict[str, Any]) -> str:
    if "forecasts" in data:
        sets = {_set_name(f): f.get("segment_reach") or [] for f in _forecast_sets(data)}
    else:
        sets = {"optimised shortlist": data.get("segment_reach") or []}
    order = [s["segment"] for s in next(iter(sets.values()))]
    if not order:
        raise InvalidParameter("the result has no segments to plot; upload a segment column with the people",
                            field="name")
    values = {name: [next((float(s["expected"]) for s in rows if s["segment"] == seg), 0.0) for seg in order]
              for name, rows in sets.items()}
    return plots.segment_reach_svg(order, values)


def adoption(data: dict[str, Any]) -> str:
    conf = float(data.get("confidence") or 0.95)
    z = Z95 if abs(conf - 0.95) < 1e-9 else _z(conf)
    series = []
    for f in _forecast_sets(data):
        br = f["by_round"]
        n = max(int(f.get("simulations") or 1), 1)
        mean = [float(x["cumulative_mean"]) for x in br]
        lo = [float(x["ci_low"]) for x in br]
        hi = [float(x["ci_high"]) for x in br]
        # The interval's half-width is z * sd / sqrt(runs): the runs' standard deviation per round.
        sd = [(h - m) * math.sqrt(n) / z for h, m in zip(hi, mean)]
        floor = float(f.get("seed_count") or 0)
        p = f.get("percentiles") or {}
        series.append(plots.AdoptionSeries(
            name=_set_name(f), rounds=[int(x["round"]) for x in br], mean=mean, ci_low=lo, ci_high=hi,
            spread_low=[max(m - Z90 * s, floor) for m, s in zip(mean, sd)],
            spread_high=[m + Z90 * s for m, s in zip(mean, sd)],
            final_p5=p.get("p5"), final_p95=p.get("p95"),
        ))
    return plots.adoption_svg(series, confidence=conf)


def _z(confidence: float) -> float:
    from statistics import NormalDist

    return NormalDist().inv_cdf(0.5 + confidence / 2.0)


def _rebin(src_edges: list[float], src_counts: list[int], edges: list[float]) -> list[int]:
    """Counts moved onto ``edges``, each stored bin shared out by how much of it each new bin covers.

    Sets are stored on bins of their own; moving a whole bin by its left edge piles two
    source bins into one bar now and then (a spike that is not in the data).
    """
    out = [0.0] * (len(edges) - 1)
    for left, right, c in zip(src_edges[:-1], src_edges[1:], src_counts):
        span = max(float(right) - float(left), 1e-12)
        for j in range(len(out)):
            overlap = min(right, edges[j + 1]) - max(left, edges[j])
            if overlap > 0:
                out[j] += c * overlap / span
    # Whole campaigns per bar, keeping the total (largest remainders get the leftovers).
    floors = [int(x) for x in out]
    rest = int(round(sum(src_counts))) - sum(floors)
    for j in sorted(range(len(out)), key=lambda j: out[j] - floors[j], reverse=True)[:max(rest, 0)]:
        floors[j] += 1
    return floors


def outcomes(data: dict[str, Any]) -> str:
    sets = [f for f in _forecast_sets(data) if f.get("outcome_histogram")]
    if not sets:
        raise InvalidParameter("this forecast was stored without its outcome histogram; run it again to plot it",
                            field="name")
    lo = min(f["outcome_histogram"]["edges"][0] for f in sets)
    hi = max(f["outcome_histogram"]["edges"][-1] for f in sets)
    runs = max(sum(int(c) for c in f["outcome_histogram"]["counts"]) for f in sets)
    bins = max(8, min(30, int(math.sqrt(runs))))  # square-root rule (common practice), at most 30 bars
    width = max(1.0, float(math.ceil((hi - lo) / bins)))
    edges = [lo + width * i for i in range(int(math.ceil((hi - lo) / width)) + 1)]
    counts: dict[str, list[int]] = {}
    marks: dict[str, dict[str, float]] = {}
    for f in sets:
        h = f["outcome_histogram"]
        cs = _rebin(h["edges"], h["counts"], edges)
        name = _set_name(f)
        counts[name] = cs
        p = f.get("percentiles") or {}
        marks[name] = {k: float(v) for k, v in (("5th percentile", p.get("p5")),
                                               ("average", f["expected_reach"]["mean"]),
                                               ("95th percentile", p.get("p95"))) if v is not None}
    return plots.outcomes_svg(edges, counts, marks=marks)
