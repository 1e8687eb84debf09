"""Why each seed was chosen: the numbers behind a choice, and the reason in plain words.

Private to :mod:`service.analytics.seeding`. :func:`facts` reads a seed's numbers
from an RR collection's coverage, :func:`facts_from` from given gains; :func:`reasons`
writes them as the sentence a campaign planner reads.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from ._cover import GreedyResult
from ._rr import RRCollection
from .rules import SeedRules

__all__ = ["SeedFacts", "facts", "facts_from", "reasons"]


@dataclass(frozen=True)
class SeedFacts:
    """The numbers one seed's reason is written from."""

    node: int
    required: bool
    gain: float  # reach no earlier seed has
    alone: float  # reach of this seed on its own
    best_alone: float  # the largest reach on its own among eligible people
    degree_rank: int  # 1 = highest degree
    segment: str | None  # label of its segment if it is the first seed there
    community: int | None  # its community if it is the first seed there
    cost: float | None


def facts(res: GreedyResult, coll: RRCollection, rules: SeedRules, *,
          communities: object) -> list[SeedFacts]:
    """The numbers behind each seed's reason, from an RR collection's coverage."""
    scale = coll.scale()
    counts0 = coll.index()[2]
    pool = rules.candidates.copy()
    pool[list(rules.must)] = True
    best_alone = float(counts0[pool].max()) * scale if pool.any() else 0.0
    alone = [float(counts0[v]) * scale for v in res.seeds]
    return facts_from(res.seeds, [g * scale for g in res.gains], alone, best_alone, rules,
                      communities=communities)


def facts_from(seeds: Sequence[int], gains: Sequence[float], alone: Sequence[float],
               best_alone: float, rules: SeedRules, *, communities: object,
               degrees: NDArray[np.float64] | None = None) -> list[SeedFacts]:
    """Seed facts from given gains; ``degrees`` (default: the rules' tie-break
    degrees) gives the rank; first seed of each segment / community flagged."""
    deg = rules.tiebreak if degrees is None else degrees
    srt = np.sort(deg)
    seg = rules.segments
    segment_labels = rules.segment_labels
    com = None if communities is None else np.asarray(communities)
    seen_seg: set[int] = set()
    seen_com: set[int] = set()
    must = set(rules.must)
    out = []
    for v, g, a in zip(seeds, gains, alone):
        rank = 1 + int(srt.size - np.searchsorted(srt, deg[v], side="right"))
        s_label = None
        if seg is not None and int(seg[v]) >= 0 and int(seg[v]) not in seen_seg:
            seen_seg.add(int(seg[v]))
            code = int(seg[v])
            s_label = segment_labels[code] if segment_labels and code < len(segment_labels) \
                else str(code)
        c_first = None
        if com is not None and int(com[v]) >= 0 and int(com[v]) not in seen_com:
            seen_com.add(int(com[v]))
            c_first = int(com[v])
        cost = None if rules.costs is None else float(rules.costs[v])
        out.append(SeedFacts(int(v), v in must, float(g), float(a), best_alone, rank, s_label,
                             c_first, cost))
    return out


def reasons(facts: Sequence[SeedFacts], *, n: int, unit: str = "people") -> list[str]:
    """Plain-words reason for each seed, built from its numbers."""
    out = []
    for i, f in enumerate(facts):
        parts: list[str] = []
        if f.required:
            parts.append("already signed up (must include)")
        if i == 0 or (f.required and f.gain >= f.alone - 1e-9):
            text = f"reaches about {_num(f.gain)} {unit} on its own"
            if f.best_alone > 0 and f.alone >= 0.999 * f.best_alone:
                text += ", the most of anyone eligible"
            parts.append(text)
        elif f.gain < 0.05 * max(f.best_alone, 1e-12) and f.gain < 0.5:
            parts.append(f"adds almost no reach beyond earlier seeds ({_num(f.gain)} {unit})")
        else:
            share = f.gain / f.alone if f.alone > 0 else 1.0
            parts.append(
                f"reaches about {_num(f.gain)} {unit} no earlier seed reaches "
                f"({min(share, 1.0):.0%} of the {_num(f.alone)} it reaches alone)")
        if f.segment is not None:
            parts.append(f"first seed in segment '{f.segment}'")
        if f.community is not None:
            parts.append(f"first seed in community {f.community}")
        parts.append(f"degree rank {f.degree_rank:,} of {n:,}")
        if f.cost is not None and np.isfinite(f.cost):
            per = f"{f.gain / f.cost:.3g} {unit} per unit of cost" if f.cost > 0 else "no cost"
            parts.append(f"cost {f.cost:.3g} ({per})")
        out.append("; ".join(parts))
    return out


def _num(x: float) -> str:
    if not np.isfinite(x):
        return "?"
    return f"{x:.1f}" if abs(x) < 10 else f"{x:,.0f}"
