"""SVG charts of results, for the figures people plan with.

Drawn with matplotlib's object interface and its SVG backend (no display, no
global state, so worker and API threads can draw at once); matplotlib is
imported on the first chart only. Text stays text in the SVG (searchable and
readable by screen readers), and each chart carries the figures it draws as
JSON in a ``<desc id="chart-data">`` element, so a test (or a curious user)
can check what was drawn.

Five charts:

- :func:`reach_curve_svg`: expected reach against the number of people
  contacted, with its interval band, the chosen budget marked and a second
  axis in percent of all people;
- :func:`segment_reach_svg`: expected reach per segment as bars;
- :func:`adoption_svg`: the adoption curve by round, with the spread of
  campaign outcomes (5th to 95th percentile) and the interval of the mean;
- :func:`outcomes_svg`: a histogram of simulated campaign outcomes;
- :func:`degree_distribution_svg`: the degree distribution on log-log axes
  fitted to the data, with the fitted power law drawn from ``x_min``.
"""

from __future__ import annotations

import io
import json
import textwrap
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from html import escape
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure

__all__ = [
    "AdoptionSeries",
    "reach_curve_svg",
    "segment_reach_svg",
    "adoption_svg",
    "outcomes_svg",
    "degree_distribution_svg",
    "nice_name",
]

PALETTE = ("#1f5fa8", "#d1495b", "#2e8540", "#e6a100", "#6c4f9e", "#3a3a3a")
SIZE = (8.4, 4.8)  # inches at 100 dpi: 840 x 480 pixels


@dataclass(frozen=True)
class AdoptionSeries:
    """One seed set's adoption curve: cumulative mean per round, its interval, the outcome spread."""

    name: str
    rounds: Sequence[int]
    mean: Sequence[float]
    ci_low: Sequence[float]
    ci_high: Sequence[float]
    spread_low: Sequence[float]
    spread_high: Sequence[float]
    final_p5: float | None = None
    final_p95: float | None = None


def _figure() -> tuple[Figure, Axes]:
    from matplotlib.figure import Figure

    fig = Figure(figsize=SIZE, dpi=100, layout="constrained")
    ax = fig.add_subplot()
    _style(ax)
    return fig, ax


def _style(ax: Axes) -> None:
    ax.grid(True, color="#e4e4e4", linewidth=0.8)
    ax.set_axisbelow(True)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)


def _note(fig: Figure, text: str) -> None:
    """A one-line note under the chart, with room kept for it."""
    engine = fig.get_layout_engine()
    if engine is not None:
        engine.set(rect=(0.0, 0.05, 1.0, 0.95))  # type: ignore[call-arg]  # constrained layout takes rect
    fig.text(0.01, 0.012, text, fontsize=8.5, color="#555")


def _svg(fig: Figure, title: str, data: dict[str, Any]) -> str:
    """The figure as SVG text, with the drawn figures as JSON in ``<desc id="chart-data">``."""
    from matplotlib import rc_context
    from matplotlib.backends.backend_svg import FigureCanvasSVG

    buf = io.StringIO()
    params: dict[str, Any] = {"svg.fonttype": "none", "svg.hashsalt": "bellwether", "font.size": 10.5,
              "font.family": ["DejaVu Sans", "Helvetica", "Arial", "sans-serif"]}
    with rc_context(params):  # type: ignore[arg-type]
        FigureCanvasSVG(fig).print_svg(  # type: ignore[no-untyped-call]
            buf, metadata={"Title": title, "Date": None, "Creator": None})
    svg = buf.getvalue()
    payload = escape(json.dumps({"title": title, **data}), quote=False)
    at = svg.index(">", svg.index("<svg")) + 1
    return svg[:at] + f'\n<desc id="chart-data">{payload}</desc>' + svg[at:]


def _thousands(ax: Axes, axis: str = "y") -> None:
    from matplotlib.ticker import FuncFormatter

    fmt = FuncFormatter(lambda v, _pos: f"{v:,.0f}" if abs(v) >= 10 or float(v).is_integer() else f"{v:g}")
    (ax.yaxis if axis == "y" else ax.xaxis).set_major_formatter(fmt)


def _integer_ticks(ax: Axes, axis: str = "x") -> None:
    from matplotlib.ticker import MaxNLocator

    (ax.xaxis if axis == "x" else ax.yaxis).set_major_locator(MaxNLocator(integer=True))


def reach_curve_svg(
    curve: Sequence[float],
    *,
    low: Sequence[float] | None = None,
    high: Sequence[float] | None = None,
    others: Mapping[str, Sequence[float]] | None = None,
    budget: int | None = None,
    people: int | None = None,
    label: str = "optimised shortlist",
    unit: str = "people",
    check: tuple[float, float, float] | None = None,
    title: str = "Expected reach versus number of people contacted",
) -> str:
    """Reach of the first k people of the shortlist, k = 1..budget, with comparison lists dashed.

    ``low``/``high`` bound the curve (its interval); ``budget`` is marked with a
    vertical line; ``people`` (everyone in the graph) gives the right-hand axis in
    percent; ``check`` is an independent estimate at the budget (mean, low, high)
    drawn as a point with an error bar.
    """
    from matplotlib.figure import Figure

    fig = Figure(figsize=(SIZE[0], SIZE[1] * 1.35), dpi=100, layout="constrained")
    ax, dx = fig.subplots(2, 1, sharex=True, height_ratios=(3, 1.2))
    _style(ax)
    _style(dx)
    ks = list(range(1, len(curve) + 1))
    data: dict[str, Any] = {"series": []}
    if low is not None and high is not None:
        ax.fill_between(ks, low, high, color=PALETTE[0], alpha=0.2, linewidth=0,
                        label="95% interval of the estimate")
    ax.plot(ks, curve, color=PALETTE[0], linewidth=2.2, marker="o" if len(ks) <= 40 else None,
            markersize=3.5, label=label)
    data["series"].append({"name": label, "x": ks, "y": list(curve),
                           **({"low": list(low), "high": list(high)} if low is not None and high is not None
                              else {})})
    dx.axhline(0, color=PALETTE[0], linewidth=1.6)
    if low is not None and high is not None:
        dx.fill_between(ks, [lo - c for lo, c in zip(low, curve)], [h - c for h, c in zip(high, curve)],
                        color=PALETTE[0], alpha=0.2, linewidth=0)
    for i, (name, ys) in enumerate((others or {}).items(), start=1):
        xs = list(range(1, len(ys) + 1))
        color = PALETTE[i % len(PALETTE)]
        ax.plot(xs, ys, color=color, linewidth=1.6, linestyle="--", label=name)
        dx.plot(xs, [y - c for y, c in zip(ys, curve)], color=color, linewidth=1.6, linestyle="--")
        data["series"].append({"name": name, "x": xs, "y": list(ys)})
    if check is not None and budget is not None:
        mean, lo, hi = check
        ax.errorbar([budget], [mean], yerr=[[mean - lo], [hi - mean]], fmt="D", color="#3a3a3a",
                    markersize=5, capsize=4, label="simulated check at the budget (95% interval)")
        data["check"] = {"x": budget, "mean": mean, "low": lo, "high": hi}
    if budget is not None:
        for a in (ax, dx):
            a.axvline(budget, color="#555", linestyle=":", linewidth=1.2)
        ax.annotate(f"budget: {budget:,}", xy=(budget, 1), xycoords=("data", "axes fraction"),
                    xytext=(-4, -14), textcoords="offset points", ha="right", fontsize=9.5, color="#333")
        data["budget"] = budget
    ax.set_xlim(0.5, max(len(curve), budget or 1) + 0.5)
    ax.set_ylim(0, ax.get_ylim()[1] * 1.1)  # room for the budget's label above the curves
    _integer_ticks(dx)
    _thousands(ax)
    _thousands(dx)
    dx.set_xlabel("people contacted, in shortlist order")
    ax.set_ylabel(f"expected reach ({unit})")
    dx.set_ylabel("difference from\nthe shortlist", fontsize=9.5)
    if people and unit == "people":
        n = float(people)

        def to_percent(y: Any) -> Any:
            return y / n * 100.0

        def to_people(p: Any) -> Any:
            return p * n / 100.0

        sec = ax.secondary_yaxis("right", functions=(to_percent, to_people))
        sec.set_ylabel("expected reach (% of all people)")
        data["people"] = people
    ax.set_title(title, loc="left", fontweight="bold")
    ax.legend(loc="lower right", frameon=True, framealpha=0.9, fontsize=9.5)
    return _svg(fig, title, data)


def segment_reach_svg(
    segments: Sequence[str],
    values: Mapping[str, Sequence[float]],
    *,
    unit: str = "people",
    title: str = "Expected reach per segment",
) -> str:
    """Horizontal bars: expected reach in each segment, one bar per seed set (grouped)."""
    fig, ax = _figure()
    ax.grid(True, axis="x", color="#e4e4e4")
    ax.grid(False, axis="y")
    names = list(values)
    height = 0.8 / max(len(names), 1)
    rows = list(range(len(segments)))[::-1]  # the first segment on top
    top = max((v for vs in values.values() for v in vs), default=1.0) or 1.0
    for i, name in enumerate(names):
        ys = [r + 0.4 - height * (i + 0.5) for r in rows]
        bars = ax.barh(ys, values[name], height=height * 0.92, color=PALETTE[i % len(PALETTE)], label=name)
        ax.bar_label(bars, labels=[f"{v:,.1f}" for v in values[name]], padding=3, fontsize=9)
    ax.set_yticks(rows, labels=list(segments))
    ax.set_xlim(0, top * 1.15)
    _thousands(ax, "x")
    ax.set_xlabel(f"expected reach ({unit})")
    ax.set_title(title, loc="left", fontweight="bold")
    if len(names) > 1:
        ax.legend(loc="lower right", frameon=True, framealpha=0.9, fontsize=9.5)
    fig.set_size_inches(SIZE[0], max(2.6, 1.2 + 0.32 * len(segments) * max(1, len(names) * 0.7)))
    data = {"segments": list(segments), "series": [{"name": k, "y": list(v)} for k, v in values.items()]}
    return _svg(fig, title, data)


def adoption_svg(series: Sequence[AdoptionSeries], *, confidence: float = 0.95,
                 title: str = "Adoption by round") -> str:
    """Cumulative adoption by round: the average with its interval and the spread of single campaigns.

    The x-axis ends where every curve has reached 99.5% of its final value (at
    least three rounds), so the flat tail does not take up the chart.
    """
    fig, ax = _figure()
    last = 2
    for s in series:
        final = s.mean[-1] if s.mean else 0.0
        grow = [r for r, m in zip(s.rounds, s.mean) if m < 0.995 * final]
        last = max(last, (max(grow) + 1) if grow else 2)
    data: dict[str, Any] = {"series": [], "last_round_shown": last}
    for i, s in enumerate(series):
        color = PALETTE[i % len(PALETTE)]
        keep = [j for j, r in enumerate(s.rounds) if r <= last]
        xs = [s.rounds[j] for j in keep]

        def pick(v: Sequence[float], keep: list[int] = keep) -> list[float]:
            return [float(v[j]) for j in keep]

        half = max((h - m for h, m in zip(s.ci_high, s.mean)), default=0.0)
        band = f"{s.name}: 90% of campaigns fall in this band"
        if i == 0:
            ax.fill_between(xs, pick(s.spread_low), pick(s.spread_high), color=color, alpha=0.15, linewidth=0,
                            label=band)
        else:  # later sets' bands as outlines, so overlapping bands stay readable
            ax.plot(xs, pick(s.spread_low), color=color, linewidth=1.0, linestyle="--", label=band)
            ax.plot(xs, pick(s.spread_high), color=color, linewidth=1.0, linestyle="--")
        ax.fill_between(xs, pick(s.ci_low), pick(s.ci_high), color=color, alpha=0.45, linewidth=0.6,
                        edgecolor=color)
        ax.plot(xs, pick(s.mean), color=color, linewidth=2.2, marker="o", markersize=3.5,
                label=f"{s.name}: average campaign ({confidence:.0%} interval ±{half:,.1f})")
        if s.final_p5 is not None and s.final_p95 is not None:
            ax.errorbar([xs[-1] + 0.15 + 0.1 * i], [s.mean[-1]],
                        yerr=[[s.mean[-1] - s.final_p5], [s.final_p95 - s.mean[-1]]],
                        fmt="none", ecolor=color, capsize=4, linewidth=1.4)
        data["series"].append({"name": s.name, "x": xs, "mean": pick(s.mean), "ci_low": pick(s.ci_low),
                               "ci_high": pick(s.ci_high), "spread_low": pick(s.spread_low),
                               "spread_high": pick(s.spread_high), "final_p5": s.final_p5,
                               "final_p95": s.final_p95})
    ax.set_xlim(-0.3, last + 0.6)
    ax.set_ylim(bottom=0)
    _integer_ticks(ax)
    _thousands(ax)
    ax.set_xlabel("round of the campaign (0: the people contacted)")
    ax.set_ylabel("people reached so far")
    ax.set_title(title, loc="left", fontweight="bold")
    ax.legend(loc="lower right", frameon=True, framealpha=0.9, fontsize=9)
    _note(fig, "The wide band per round assumes a normal spread; the bar at the right end is the simulated "
               "5th to 95th percentile of final reach.")
    return _svg(fig, title, data)


def outcomes_svg(
    edges: Sequence[float],
    counts: Mapping[str, Sequence[int]],
    *,
    marks: Mapping[str, Mapping[str, float]] | None = None,
    unit: str = "people",
    title: str = "How many people one campaign reaches",
) -> str:
    """Histogram of simulated campaign outcomes (share of runs per reach bin), percentiles marked."""
    fig, ax = _figure()
    data: dict[str, Any] = {"edges": list(edges), "series": []}
    single = len(counts) == 1
    legend_lines = 0
    for i, (name, cs) in enumerate(counts.items()):
        color = PALETTE[i % len(PALETTE)]
        total = float(sum(cs)) or 1.0
        shares = [100.0 * c / total for c in cs]
        m = dict((marks or {}).get(name, {}))
        text = name
        if "average" in m and "5th percentile" in m and "95th percentile" in m:
            text = (f"{name}: average {m['average']:,.0f}; 90% of campaigns between "
                    f"{m['5th percentile']:,.0f} and {m['95th percentile']:,.0f}")
        # Long set names wrap inside the legend instead of running past the figure's edge.
        text = textwrap.fill(text, 78, subsequent_indent="  ")
        legend_lines += text.count("\n") + 1
        if single:
            ax.stairs(shares, list(edges), fill=True, color=color, alpha=0.55, label=text)
        else:
            ax.stairs(shares, list(edges), color=color, linewidth=2.0, label=text)
        for what, x in m.items():
            ax.axvline(x, color=color, linestyle="-" if what == "average" else ":", linewidth=1.4)
        data["series"].append({"name": name, "counts": list(cs), "marks": m})
    _thousands(ax, "x")
    ax.set_xlim(edges[0], edges[-1])
    # Room for the legend above the bars: more for more legend lines.
    ax.set_ylim(0, ax.get_ylim()[1] * (1.25 + 0.1 * max(0, legend_lines - len(counts))))
    ax.set_xlabel(f"reach of one campaign ({unit})")
    ax.set_ylabel("share of simulated campaigns (%)")
    ax.set_title(title, loc="left", fontweight="bold")
    ax.legend(loc="upper left", frameon=True, framealpha=0.95, fontsize=9)
    _note(fig, "Solid line: the average campaign; dotted lines: 5th and 95th percentiles.")
    return _svg(fig, title, data)


def degree_distribution_svg(
    degrees: Sequence[float],
    share: Sequence[float],
    *,
    fit_x: Sequence[float] | None = None,
    fit_y: Sequence[float] | None = None,
    alpha: float | None = None,
    x_min: float | None = None,
    title: str = "How many ties people have",
) -> str:
    """Share of people by number of ties, log-log, axes fitted to the data, the power law from ``x_min``."""
    fig, ax = _figure()
    ax.set_xscale("log")
    ax.set_yscale("log")
    pts = [(float(d), float(s)) for d, s in zip(degrees, share) if d > 0 and s > 0]
    xs, ys = [p[0] for p in pts], [p[1] for p in pts]
    ax.plot(xs, ys, linestyle="none", marker="o", markersize=5, color=PALETTE[0], label="people in the data")
    data: dict[str, Any] = {"series": [{"name": "observed", "x": xs, "y": ys}]}
    all_y = list(ys)
    if fit_x and fit_y and alpha is not None and x_min is not None:
        ax.plot(list(fit_x), list(fit_y), color=PALETTE[1], linestyle="--", linewidth=1.8,
                label=f"power law fitted from {x_min:g} ties (exponent {alpha:.2f})")
        data["series"].append({"name": "power law", "x": list(fit_x), "y": list(fit_y),
                               "alpha": alpha, "x_min": x_min})
        all_y += [y for y in fit_y if y > 0]
    if xs:
        ax.set_xlim(min(xs) / 1.3, max(xs) * 1.3)
        lo, hi = min(all_y), max(all_y)
        ax.set_ylim(max(lo, min(ys) / 3.0) / 1.6, hi * 1.6)
    from matplotlib.ticker import FuncFormatter

    ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _pos: f"{v:,.0f}" if v >= 1 else f"{v:g}"))
    ax.set_xlabel("ties per person (log scale)")
    ax.set_ylabel("share of people per tie count (log scale)")
    ax.set_title(title, loc="left", fontweight="bold")
    ax.legend(loc="lower left", frameon=True, framealpha=0.9, fontsize=9.5)
    return _svg(fig, title, data)


def nice_name(name: str, count: int | None = None) -> str:
    """A seed set's or method's name in plain words (``top_degree`` -> "25 best-connected people")."""
    known = {
        "top_degree": "best-connected people",
        "degree": "best-connected people",
        "degree_discount": "best-connected, skipping close neighbours",
        "top_pagerank": "highest PageRank",
        "top_betweenness": "best brokers (betweenness)",
        "random": "people picked at random",
        "imm": "optimised shortlist",
        "opim": "optimised shortlist",
        "celf": "optimised shortlist",
    }
    text = known.get(name, name.replace("_", " "))
    if count is not None:
        return f"{count:,} {text}" if name in known and name.startswith(("top_", "degree", "random")) \
            else f"{text} ({count:,} people)"
    return text

