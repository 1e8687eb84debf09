"""The network as a picture: people placed by a stored layout, sized by a score, coloured by
community or segment, a shortlist's seeds and a forecast's likely-reached people marked.

:func:`network_picture` gathers what to draw (the version's newest layout, the
score to size by, the seeds and the reached people of the jobs named) and
:func:`draw_network` writes the SVG. Networks of more than ``max_people``
people are not drawn whole: the seeds and their neighbourhood are drawn, the
rest as one circle per community sized by membership, and the picture says so.
The SVG uses presentation attributes only (no inline styles or scripts), so a
page with a strict Content-Security-Policy can show it inline.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from html import escape
from typing import Any, Literal

import numpy as np
from numpy.typing import NDArray
from sqlalchemy.orm import Session

from service.analytics.errors import InvalidParameter
from storage.repo import graphs as graph_repo
from storage.repo import jobs as job_repo
from storage.repo import results as result_repo

from .loading import LoadedVersion, load_version

__all__ = ["PictureRequest", "Picture", "PALETTE", "OTHER_COLOUR", "network_picture", "draw_network",
           "MAX_PEOPLE", "MAX_TIES", "LIKELY"]

# Okabe and Ito's eight colours less black, told apart under the common colour-vision deficiencies;
# grey for everyone outside the seven largest groups.
PALETTE = ("#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7")
OTHER_COLOUR = "#B8B8B8"
MAX_PEOPLE = 5000
MAX_TIES = 30_000
LIKELY = 0.5  # a forecast's people reached in at least half of the simulated campaigns
SIZE = 1000.0


@dataclass(frozen=True)
class PictureRequest:
    """What to draw: the score that sizes people, what colours them, the jobs whose people to mark."""

    size_by: str = "degree"
    colour_by: Literal["community", "segment"] = "community"
    shortlist_job: str | None = None
    forecast_job: str | None = None
    max_people: int = MAX_PEOPLE
    legend: bool = True


@dataclass(frozen=True)
class Picture:
    svg: str
    people: int
    drawn: int
    grouped: bool
    seeds: int
    reached: int
    legend: list[tuple[str, str]] = field(default_factory=list)
    note: str | None = None
    size_choices: tuple[str, ...] = ("degree",)


def _newest(db: Session, tenant: str, graph_id: str, kind: str, number: int) -> Any:
    jobs, _ = job_repo.list_jobs(db, tenant, limit=200, graph_id=graph_id, kind=kind, status="succeeded")
    return next((j for j in jobs if j.version == number), None)


def _job_people(db: Session, tenant: str, job_id: str, kind: str, graph_id: str, number: int) -> dict[str, Any]:
    job = job_repo.get_job(db, tenant, job_id)
    if job.kind != kind or job.graph_id != graph_id or job.version != number:
        raise InvalidParameter(f"job {job_id} is not a {kind} of this version", field=kind, value=job_id)
    if job.status != "succeeded":
        raise InvalidParameter(f"the {kind} {job_id} has not finished yet", field=kind, value=job_id)
    data: dict[str, Any] = result_repo.get_result(db, job.id).data
    return data


def network_picture(db: Session, tenant: str, graph_id: str, number: int, request: PictureRequest) -> Picture:
    """Gather the layout, scores and marked people of version ``number`` and draw them."""
    graph = graph_repo.get_graph(db, tenant, graph_id)
    row = graph_repo.get_version(db, graph, number)
    layout = _newest(db, tenant, graph.id, "layout", row.number)
    if layout is None:
        raise InvalidParameter(
            f"version {row.number} has no layout yet; queue a job of kind 'layout' on it and draw again",
            field="version", value=row.number)
    arrays = result_repo.get_result_arrays(db, result_repo.get_result(db, layout.id))
    version = load_version(db, row)
    scores_job = _newest(db, tenant, graph.id, "scores", row.number)
    score_arrays: dict[str, NDArray[Any]] = {}
    if scores_job is not None:
        score_arrays = result_repo.get_result_arrays(db, result_repo.get_result(db, scores_job.id))
    choices = ("degree", *sorted(k.removeprefix("score.") for k in score_arrays if k.startswith("score.")))
    if request.size_by not in choices:
        raise InvalidParameter(f"size_by must be one of {', '.join(choices)} (scores of this version's newest "
                               "scores job)", field="size_by", value=request.size_by)
    sizes = _degree(version) if request.size_by == "degree" else score_arrays["score." + request.size_by]
    seeds: list[str] = []
    reached: list[str] = []
    if request.shortlist_job:
        data = _job_people(db, tenant, request.shortlist_job, "shortlist", graph.id, row.number)
        seeds = [s["node_id"] for s in data.get("seeds") or []]
    if request.forecast_job:
        data = _job_people(db, tenant, request.forecast_job, "forecast", graph.id, row.number)
        first = (data.get("forecasts") or [{}])[0]
        reached = [n["node_id"] for n in first.get("top_nodes") or [] if n.get("probability", 0) >= LIKELY]
        if not seeds:
            seeds = list((data.get("params") or {}).get("seeds") or [])
    picture = draw_network(version, arrays["x"], arrays["y"], arrays["community"], np.asarray(sizes, np.float64),
                           request, seeds=seeds, reached=reached)
    return Picture(**{**picture.__dict__, "size_choices": choices})


def _degree(version: LoadedVersion) -> NDArray[np.float64]:
    g = version.graph
    return np.bincount(np.concatenate([g.src, g.dst]), minlength=g.n).astype(np.float64)


def _chosen(version: LoadedVersion, sizes: NDArray[np.float64], seeds: NDArray[np.int64],
            reached: NDArray[np.int64], limit: int) -> NDArray[np.int64]:
    """Who to draw in a large network: seeds, reached, then the seeds' contacts by size, up to ``limit``."""
    g = version.graph
    keep = np.zeros(g.n, dtype=bool)
    keep[seeds] = True
    keep[reached] = True
    if seeds.size:
        near = np.zeros(g.n, dtype=bool)
        near[g.dst[np.isin(g.src, seeds)]] = True
        near[g.src[np.isin(g.dst, seeds)]] = True
        near &= ~keep
        pool = np.flatnonzero(near)
    else:
        pool = np.flatnonzero(~keep)
    room = max(limit - int(keep.sum()), 0)
    if pool.size > room:
        pool = pool[np.argsort(-sizes[pool], kind="stable")[:room]]
    keep[pool] = True
    return np.flatnonzero(keep)


def _colours(version: LoadedVersion, community: NDArray[Any], by: str) -> tuple[NDArray[np.int64],
                                                                                 list[tuple[str, str]]]:
    """Per person an index into PALETTE (-1: grey), and the legend's (colour, words) rows."""
    if by == "segment":
        codes = np.asarray(version.attrs.segment, dtype=np.int64)
        names = list(version.attrs.segment_labels)
        what = "segment"
    else:
        codes = np.asarray(community, dtype=np.int64)
        names = [f"community {i + 1}" for i in range(int(codes.max()) + 1 if codes.size else 0)]
        what = "community"
    valid = codes[codes >= 0]
    counts = np.bincount(valid, minlength=len(names)) if valid.size else np.zeros(len(names), np.int64)
    top = [int(c) for c in np.argsort(-counts, kind="stable")[:len(PALETTE)] if counts[c] > 0]
    slot = np.full(max(len(names), 1), -1, dtype=np.int64)
    for i, c in enumerate(top):
        slot[c] = i
    colour = np.where(codes >= 0, slot[np.clip(codes, 0, None)], -1)
    legend = [(PALETTE[i], f"{names[c]} ({int(counts[c]):,} people)") for i, c in enumerate(top)]
    if (colour < 0).any():
        legend.append((OTHER_COLOUR, f"other {what}s" if by == "community" or names else f"no {what}"))
    return colour, legend


def draw_network(version: LoadedVersion, x: NDArray[Any], y: NDArray[Any], community: NDArray[Any],
                 sizes: NDArray[np.float64], request: PictureRequest, *, seeds: Sequence[str] = (),
                 reached: Sequence[str] = ()) -> Picture:
    """The SVG picture (see the module docstring)."""
    n = version.graph.n
    index = version.index
    seed_ix = np.array(sorted({index[s] for s in seeds if s in index}), dtype=np.int64)
    reached_ix = np.array(sorted({index[s] for s in reached if s in index} - set(seed_ix.tolist())), dtype=np.int64)
    grouped = n > request.max_people
    drawn = _chosen(version, sizes, seed_ix, reached_ix, request.max_people) if grouped else np.arange(n)
    colour, legend = _colours(version, community, request.colour_by)
    px, py = _fit(np.asarray(x, np.float64), np.asarray(y, np.float64), drawn)
    s = np.asarray(sizes, np.float64)
    top = float(np.nanmax(s[drawn])) if drawn.size and np.isfinite(s[drawn]).any() else 1.0
    rel = np.sqrt(np.clip(np.nan_to_num(s, nan=0.0), 0, None) / (top or 1.0))
    radius = 1.5 + rel * (9.0 if drawn.size > 500 else 14.0)
    out = [f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {SIZE:g} {SIZE + (90 if request.legend else 0):g}" '
           f'class="net" role="img" aria-labelledby="net-title" tabindex="0">',
           '<title id="net-title">The network: people as circles placed by their ties'
           + (", the shortlist's people ringed" if seed_ix.size else "") + "</title>",
           f'<rect width="{SIZE:g}" height="{SIZE:g}" fill="#ffffff"/>']
    note = None
    if grouped:
        out.append(_groups(community, px, py, colour))
        note = (f"{n:,} people are too many to draw one by one: shown are {drawn.size:,} people "
                + ("around the seeds" if seed_ix.size else "with the largest scores")
                + "; everyone else appears as one shaded circle per community, sized by its membership.")
    out.append(_ties(version, drawn, px, py))
    mark = np.zeros(n, dtype=np.int8)
    mark[reached_ix] = 1
    mark[seed_ix] = 2
    order = drawn[np.lexsort((radius[drawn] * -1, mark[drawn]))]  # seeds last, on top; big under small
    ids, labels = version.ids, version.labels
    for i in order.tolist():
        fill = PALETTE[colour[i]] if colour[i] >= 0 else OTHER_COLOUR
        cls, extra = "", ' stroke="#333333" stroke-width="0.4"'
        if mark[i] == 2:
            cls, extra = ' class="seed"', f' stroke="#111111" stroke-width="2.5" data-id="{escape(ids[i])}"'
        elif mark[i] == 1:
            cls, extra = ' class="reached"', ' stroke="#111111" stroke-width="1.5" stroke-dasharray="2 1.5"'
        r = radius[i] + (3 if mark[i] == 2 else 0)
        tip = ids[i] if not labels[i] else f"{ids[i]} ({labels[i]})"
        out.append(f'<circle cx="{px[i]:.1f}" cy="{py[i]:.1f}" r="{r:.1f}" fill="{fill}"{cls}{extra}><title>{escape(tip)}</title></circle>')
    if request.legend:
        out.append(_legend(legend, note, bool(seed_ix.size), bool(reached_ix.size)))
    out.append("</svg>")
    return Picture("\n".join(out), n, int(drawn.size), grouped, int(seed_ix.size), int(reached_ix.size),
                   legend, note)


def _fit(x: NDArray[np.float64], y: NDArray[np.float64], drawn: NDArray[np.int64]) -> tuple[NDArray[Any], NDArray[Any]]:
    """Picture coordinates: the middle 98% of the drawn people fill the square (aspect kept); the few
    far-out ones (people with no tie, small separate groups) are pulled in to the edge."""
    if drawn.size == 0:
        return x, y
    lo = np.array([np.quantile(x[drawn], 0.01), np.quantile(y[drawn], 0.01)])
    hi = np.array([np.quantile(x[drawn], 0.99), np.quantile(y[drawn], 0.99)])
    span = float((hi - lo).max()) or 1.0
    mid = (lo + hi) / 2
    fx = np.clip((x - mid[0]) / span, -0.52, 0.52) + 0.5
    fy = np.clip((y - mid[1]) / span, -0.52, 0.52) + 0.5
    return 40 + fx * (SIZE - 80), 40 + fy * (SIZE - 80)


def _ties(version: LoadedVersion, drawn: NDArray[np.int64], px: NDArray[Any], py: NDArray[Any]) -> str:
    g = version.graph
    inside = np.zeros(g.n, dtype=bool)
    inside[drawn] = True
    both = np.flatnonzero(inside[g.src] & inside[g.dst])[:MAX_TIES]
    a, b = g.src[both], g.dst[both]
    path = "".join(f"M{px[i]:.0f} {py[i]:.0f}L{px[j]:.0f} {py[j]:.0f}" for i, j in zip(a.tolist(), b.tolist()))
    return f'<path class="tie" d="{path}" stroke="#9aa5ab" stroke-opacity="0.45" stroke-width="0.6" fill="none"/>'


def _groups(community: NDArray[Any], px: NDArray[Any], py: NDArray[Any], colour: NDArray[np.int64]) -> str:
    comm = np.asarray(community, dtype=np.int64)
    count = np.bincount(comm)
    cx = np.bincount(comm, weights=px) / np.maximum(count, 1)
    cy = np.bincount(comm, weights=py) / np.maximum(count, 1)
    biggest = np.argsort(-count, kind="stable")[:200]
    scale = 120.0 / np.sqrt(max(int(count.max()), 1))
    parts = []
    for c in biggest.tolist():
        if count[c] == 0:
            continue
        members = np.flatnonzero(comm == c)
        slot = int(np.bincount(colour[members] + 1).argmax()) - 1
        fill = PALETTE[slot] if slot >= 0 else OTHER_COLOUR
        parts.append(f'<circle class="group" cx="{cx[c]:.1f}" cy="{cy[c]:.1f}" r="{scale * np.sqrt(count[c]):.1f}" '
                     f'fill="{fill}" fill-opacity="0.3" stroke="{fill}"><title>community of {int(count[c]):,} people'
                     "</title></circle>")
    return "".join(parts)


def _legend(rows: list[tuple[str, str]], note: str | None, seeds: bool, reached: bool) -> str:
    out = [f'<g class="legend" font-family="sans-serif" font-size="13" fill="#222222" transform="translate(20 {SIZE + 12:g})">']
    x = 0.0
    for colour, words in rows:
        out.append(f'<circle cx="{x + 6:.0f}" cy="6" r="6" fill="{colour}" stroke="#333333" stroke-width="0.5"/>'
                   f'<text x="{x + 16:.0f}" y="11">{escape(words)}</text>')
        x += 24 + 7.2 * len(words)
        if x > SIZE - 200:
            break
    y = 34
    if seeds:
        out.append(f'<circle cx="6" cy="{y}" r="7" fill="#ffffff" stroke="#111111" stroke-width="2.5"/>'
                   f'<text x="18" y="{y + 5}">on the shortlist</text>')
    if reached:
        out.append(f'<circle cx="170" cy="{y}" r="6" fill="#ffffff" stroke="#111111" stroke-dasharray="2 1.5"/>'
                   f'<text x="182" y="{y + 5}">reached in at least half of the simulated campaigns</text>')
    if note:
        line, lines = "", []
        for w in note.split():
            if len(line) + len(w) > 130:
                lines.append(line)
                line = ""
            line = f"{line} {w}".strip()
        lines.append(line)
        for k, text in enumerate(lines[:2]):
            out.append(f'<text x="0" y="{y + 24 + 15 * k}" font-size="12">{escape(text)}</text>')
    out.append("</g>")
    return "".join(out)
