"""SVG charts for results people would rather look at than read.

Plain SVG written by hand (no plotting library to install): line charts with
optional shaded bands, linear or log axes, titled axes with units, a legend
placed outside the plot area so it never covers data, and "nice" tick steps
so labels do not overlap. Each chart embeds its data as JSON in a
``<metadata>`` element, so a test (or a curious user) can check what was drawn.

Three charts use it: reach versus budget for a shortlist (with baselines),
adoption by round for a forecast (mean with its interval band), and the degree
distribution on log-log axes with the fitted power law.
"""

from __future__ import annotations

import json
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from html import escape

__all__ = ["Series", "line_chart", "reach_curve_svg", "adoption_svg", "degree_distribution_svg"]

PALETTE = ("#1f5fa8", "#d1495b", "#2e8540", "#e6a100", "#6c4f9e", "#3a3a3a")
W, H = 760, 440
LEFT, RIGHT, TOP, BOTTOM = 78, 190, 52, 64


@dataclass(frozen=True)
class Series:
    name: str
    x: Sequence[float]
    y: Sequence[float]
    band_low: Sequence[float] | None = None
    band_high: Sequence[float] | None = None
    dashed: bool = False
    markers: bool = False
    meta: dict[str, object] = field(default_factory=dict)


def _nice_step(span: float, target: int = 6) -> float:
    if span <= 0 or not math.isfinite(span):
        return 1.0
    raw = span / target
    mag = 10.0 ** math.floor(math.log10(raw))
    for m in (1, 2, 2.5, 5, 10):
        if raw <= m * mag:
            return m * mag
    return 10 * mag


def _fmt(v: float) -> str:
    if v == 0:
        return "0"
    a = abs(v)
    if a >= 1e6 or a < 1e-3:
        return f"{v:.0e}".replace("e+0", "e").replace("e-0", "e-")
    if a >= 100 or float(v).is_integer():
        return f"{v:,.0f}"
    return f"{v:.3g}"


class _Axis:
    def __init__(self, lo: float, hi: float, log: bool, pixels: tuple[float, float]) -> None:
        self.log = log
        self.lo: float
        self.hi: float
        if log:
            lo, hi = max(lo, 1e-12), max(hi, 1e-12)
            self.lo, self.hi = math.floor(math.log10(lo)), math.ceil(math.log10(hi))
            if self.hi == self.lo:
                self.hi += 1
        else:
            if hi == lo:
                hi = lo + 1
            step = _nice_step(hi - lo)
            self.lo = math.floor(lo / step) * step
            self.hi = math.ceil(hi / step) * step
            self.step = step
        self.p0, self.p1 = pixels

    def __call__(self, v: float) -> float:
        if self.log:
            v = math.log10(max(v, 1e-12))
        return self.p0 + (v - self.lo) / (self.hi - self.lo) * (self.p1 - self.p0)

    def ticks(self) -> list[tuple[float, str]]:
        if self.log:
            return [(10.0**e, _fmt(10.0**e)) for e in range(int(self.lo), int(self.hi) + 1)]
        out: list[tuple[float, str]] = []
        v = self.lo
        while v <= self.hi + self.step / 2:
            out.append((v, _fmt(round(v, 12))))
            v += self.step
        return out


def line_chart(
    series: Sequence[Series],
    *,
    title: str,
    x_label: str,
    y_label: str,
    log_x: bool = False,
    log_y: bool = False,
    y_from_zero: bool = True,
    note: str | None = None,
) -> str:
    """An SVG line chart; bands are shaded under their line."""
    xs = [float(v) for s in series for v in s.x if not log_x or v > 0]
    ys = [float(v) for s in series for v in list(s.y) + list(s.band_low or []) + list(s.band_high or []) if not log_y or v > 0]
    xs = [v for v in xs if math.isfinite(v)] or [0.0, 1.0]
    ys = [v for v in ys if math.isfinite(v)] or [0.0, 1.0]
    ax = _Axis(min(xs), max(xs), log_x, (LEFT, W - RIGHT))
    ylo = 0.0 if (y_from_zero and not log_y) else min(ys)
    ay = _Axis(ylo, max(ys), log_y, (H - BOTTOM, TOP))
    out = [
        f'<svg xmlns="http://www.w3.org/2000/svg" width="{W}" height="{H}" viewBox="0 0 {W} {H}" '
        f'font-family="Helvetica, Arial, sans-serif" font-size="12" role="img" aria-label="{escape(title)}">',
        f"<title>{escape(title)}</title>",
        '<rect width="100%" height="100%" fill="white"/>',
        f'<text x="{W / 2 - (RIGHT - LEFT) / 2:.0f}" y="28" text-anchor="middle" font-size="16" font-weight="bold">{escape(title)}</text>',
    ]
    # Grid and ticks.
    for v, label in ax.ticks():
        x = ax(v)
        out.append(f'<line x1="{x:.1f}" y1="{TOP}" x2="{x:.1f}" y2="{H - BOTTOM}" stroke="#e4e4e4"/>')
        out.append(f'<text x="{x:.1f}" y="{H - BOTTOM + 18}" text-anchor="middle">{escape(label)}</text>')
    for v, label in ay.ticks():
        y = ay(v)
        out.append(f'<line x1="{LEFT}" y1="{y:.1f}" x2="{W - RIGHT}" y2="{y:.1f}" stroke="#e4e4e4"/>')
        out.append(f'<text x="{LEFT - 8}" y="{y + 4:.1f}" text-anchor="end">{escape(label)}</text>')
    out.append(
        f'<rect x="{LEFT}" y="{TOP}" width="{W - RIGHT - LEFT}" height="{H - BOTTOM - TOP}" fill="none" stroke="#555"/>'
    )
    out.append(
        f'<text x="{(LEFT + W - RIGHT) / 2:.0f}" y="{H - 18}" text-anchor="middle" font-size="13">{escape(x_label)}</text>'
    )
    out.append(
        f'<text transform="translate(20 {(TOP + H - BOTTOM) / 2:.0f}) rotate(-90)" text-anchor="middle" '
        f'font-size="13">{escape(y_label)}</text>'
    )
    data = []
    for i, s in enumerate(series):
        color = PALETTE[i % len(PALETTE)]
        pts = [(float(a), float(b)) for a, b in zip(s.x, s.y) if math.isfinite(float(b)) and (not log_x or a > 0) and (not log_y or b > 0)]
        if s.band_low is not None and s.band_high is not None:
            lo = [(float(a), float(b)) for a, b in zip(s.x, s.band_low)]
            hi = [(float(a), float(b)) for a, b in zip(s.x, s.band_high)]
            poly = " ".join(f"{ax(a):.1f},{ay(b):.1f}" for a, b in hi + lo[::-1])
            out.append(f'<polygon points="{poly}" fill="{color}" fill-opacity="0.18" stroke="none"/>')
        if pts:
            path = " ".join(f"{ax(a):.1f},{ay(b):.1f}" for a, b in pts)
            dash = ' stroke-dasharray="6 4"' if s.dashed else ""
            out.append(f'<polyline points="{path}" fill="none" stroke="{color}" stroke-width="2"{dash}/>')
            if s.markers:
                out += [f'<circle cx="{ax(a):.1f}" cy="{ay(b):.1f}" r="3" fill="{color}"/>' for a, b in pts]
        ly = TOP + 8 + i * 22
        lx = W - RIGHT + 14
        dash = ' stroke-dasharray="6 4"' if s.dashed else ""
        out.append(f'<line x1="{lx}" y1="{ly}" x2="{lx + 24}" y2="{ly}" stroke="{color}" stroke-width="2"{dash}/>')
        out.append(f'<text x="{lx + 30}" y="{ly + 4}">{escape(s.name[:24])}</text>')
        data.append(
            {
                "name": s.name,
                "x": [float(v) for v in s.x],
                "y": [float(v) for v in s.y],
                **({"band_low": [float(v) for v in s.band_low]} if s.band_low is not None else {}),
                **({"band_high": [float(v) for v in s.band_high]} if s.band_high is not None else {}),
                **s.meta,
            }
        )
    if note:
        out.append(f'<text x="{LEFT}" y="{H - 2}" font-size="11" fill="#555">{escape(note)}</text>')
    out.append(f"<metadata>{escape(json.dumps({'title': title, 'series': data}))}</metadata>")
    out.append("</svg>")
    return "\n".join(out)


def reach_curve_svg(curve: Sequence[float], baselines: Mapping[str, Sequence[float]], *, title: str | None = None) -> str:
    """Expected reach against the number of seeds, with baseline methods dashed."""
    series = [Series("optimised", list(range(1, len(curve) + 1)), list(curve), markers=len(curve) <= 40)]
    for name, ys in baselines.items():
        series.append(Series(name, list(range(1, len(ys) + 1)), list(ys), dashed=True))
    return line_chart(
        series,
        title=title or "Expected reach versus budget",
        x_label="seeds contacted (people)",
        y_label="expected reach (people)",
    )


def adoption_svg(
    rounds: Sequence[int], mean: Sequence[float], low: Sequence[float], high: Sequence[float], *, label: str = "forecast",
    others: Mapping[str, tuple[Sequence[int], Sequence[float], Sequence[float], Sequence[float]]] | None = None,
) -> str:
    """Cumulative adoption by round: the mean with its confidence band."""
    series = [Series(label, list(rounds), list(mean), band_low=list(low), band_high=list(high))]
    for name, (r, m, lo, hi) in (others or {}).items():
        series.append(Series(name, list(r), list(m), band_low=list(lo), band_high=list(hi), dashed=True))
    return line_chart(
        series,
        title="Adoption by round",
        x_label="round of the campaign",
        y_label="people reached so far",
        note="band: confidence interval of the mean, not the spread of outcomes",
    )


def degree_distribution_svg(
    degrees: Sequence[float], share: Sequence[float], *, fit: dict[str, float] | None = None
) -> str:
    """Share of people by number of ties, log-log, with the fitted power law."""
    series = [Series("observed", list(degrees), list(share), markers=True)]
    note = None
    if fit and fit.get("alpha") and fit.get("x_min"):
        alpha, xmin = float(fit["alpha"]), float(fit["x_min"])
        xs = [d for d in degrees if d >= xmin]
        if xs:
            # Anchor the line at the observed share at x_min (tail shape only).
            anchor = next((s for d, s in zip(degrees, share) if d >= xmin), None) or 1.0
            ys = [anchor * (x / xmin) ** (-alpha) for x in xs]
            series.append(Series(f"power law, alpha {alpha:.2f}", xs, ys, dashed=True, meta={"alpha": alpha, "x_min": xmin}))
            note = f"fit for degree >= {xmin:g} (Clauset, Shalizi, Newman 2009)"
    return line_chart(
        series,
        title="Degree distribution",
        x_label="ties per person (log scale)",
        y_label="share of people (log scale)",
        log_x=True,
        log_y=True,
        y_from_zero=False,
        note=note,
    )
