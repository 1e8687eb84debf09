"""The backtest's plot: each held-out campaign's forecast per scheme, with its band, against what it reached.

Drawn with the helpers of :mod:`service.usecases.plots` (same size, palette,
fonts and embedded chart data).
"""

from __future__ import annotations

import textwrap
from typing import Any

from service.analytics.errors import InvalidParameter

from .plots import PALETTE, _figure, _note, _svg, _thousands

__all__ = ["forecast_vs_actual", "forecast_vs_actual_svg"]

NAMES = {"learned": "learned model", "weighted_cascade": "weighted cascade", "uniform": "uniform p",
         "trivalency": "trivalency"}


def forecast_vs_actual(data: dict[str, Any]) -> str:
    """Plot of a ``backtest`` result document."""
    campaigns = data.get("campaigns") or []
    if not campaigns:
        raise InvalidParameter("this backtest holds no campaigns to plot", field="forecast_vs_actual")
    return forecast_vs_actual_svg(campaigns)


def _pick(c: dict[str, Any], scheme: str, key: str) -> float | None:
    f = next((f for f in c["forecasts"] if f["scheme"] == scheme), None)
    return None if f is None else float(f[key])


def forecast_vs_actual_svg(campaigns: list[dict[str, Any]], *,
                           title: str = "Forecasts of past campaigns against what they reached") -> str:
    """One group per campaign: a dot at each scheme's expected reach with its 5-95% band, a bar at the actual."""
    fig, ax = _figure()
    schemes = list(dict.fromkeys(f["scheme"] for c in campaigns for f in c["forecasts"]))
    width = 0.8 / max(len(schemes), 1)
    values: list[float] = []
    for k, c in enumerate(campaigns):
        label = "actual reach" if k == 0 else "_nolegend_"
        ax.hlines(c["actual"], k - 0.45, k + 0.45, colors="#111", linewidth=2.4, label=label, zorder=3)
        values.append(float(c["actual"]))
    for i, s in enumerate(schemes):
        xs, ys, lo, hi = [], [], [], []
        for k, c in enumerate(campaigns):
            f = next((f for f in c["forecasts"] if f["scheme"] == s), None)
            if f is None:
                continue
            xs.append(k - 0.4 + width * (i + 0.5))
            ys.append(float(f["expected"]))
            lo.append(max(float(f["expected"]) - float(f["p5"]), 0.0))
            hi.append(max(float(f["p95"]) - float(f["expected"]), 0.0))
            values += [float(f["p5"]), float(f["p95"])]
        ax.errorbar(xs, ys, yerr=[lo, hi], fmt="o", color=PALETTE[i % len(PALETTE)], capsize=3, markersize=5,
                    linewidth=1.4, label=NAMES.get(s, s), zorder=4)
    positive = [v for v in values if v > 0]
    if positive and max(positive) / min(positive) > 30:
        ax.set_yscale("log")
    else:
        ax.set_ylim(0, (max(values) if values else 1.0) * 1.15)
    _thousands(ax)  # plain numbers (10, 100), on a log scale too
    names = [textwrap.fill(textwrap.shorten(str(c.get("name") or c["id"]), 40, placeholder="..."), 16)
             for c in campaigns]  # whole names on up to three short lines
    ax.set_xticks(range(len(campaigns)), labels=names, rotation=30 if len(campaigns) > 6 else 0,
                  ha="right" if len(campaigns) > 6 else "center")
    ax.set_xlim(-0.6, len(campaigns) - 0.4)
    ax.set_ylabel("people reached")
    ax.set_title(title, loc="left", fontweight="bold")
    ax.legend(loc="center left", bbox_to_anchor=(1.01, 0.5), frameon=False, fontsize=9)
    _note(fig, "Dots: expected reach; whiskers: 5th to 95th percentile of simulated campaigns; "
               "black bar: what the campaign reached.")
    labels = [str(c.get("name") or c["id"]) for c in campaigns]
    series = [{"name": NAMES.get(sc, sc), "x": labels,
               "y": [_pick(c, sc, "expected") for c in campaigns],
               "p5": [_pick(c, sc, "p5") for c in campaigns],
               "p95": [_pick(c, sc, "p95") for c in campaigns]} for sc in schemes]
    data = {"series": [{"name": "actual reach", "x": labels, "y": [c["actual"] for c in campaigns]}, *series]}
    return _svg(fig, title, data)
