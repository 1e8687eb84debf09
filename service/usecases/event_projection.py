"""How a graph is made from an event table: the projection and backbone settings, and the
step that turns (person, event) rows into a version's edges with the figures saying how.

Used by the events upload (:mod:`service.usecases.event_graphs`) for small tables and by
the ``project_events`` job kind for large ones, so both make the same edges.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, fields
from typing import Any, Literal

import numpy as np
from numpy.typing import NDArray
from pydantic import BaseModel, ConfigDict, Field

from service.analytics.errors import EmptyGraph, InvalidParameter
from service.analytics.events import (
    CORRECTIONS,
    DEFAULT_MAX_EVENT_SIZE,
    PROJECTIONS,
    EmptyBackbone,
    EmptyProjection,
    ProjectionTooLarge,
    SingleParticipantEvent,
    UnknownProjection,
    disparity_filter,
    project_events,
    sdsm,
)
from service.analytics.graph import GraphArrays

from .outcome import Progress

__all__ = ["BACKBONES", "CHOICES", "EventArrays", "ProjectionChoices", "ProjectionParams", "ProjectedGraph",
           "resolve_settings", "project"]

BACKBONES: tuple[str, ...] = ("none", "disparity_filter", "sdsm")
DAY = 86_400.0
# The named settings and their allowed values (the query's enums read them).
CHOICES: dict[str, tuple[str, ...]] = {"projection": PROJECTIONS, "oversized": ("drop", "downweight"),
                                       "single_events": ("refuse", "skip"), "backbone": BACKBONES,
                                       "correction": CORRECTIONS}


@dataclass(frozen=True)
class ProjectionChoices:
    """Every choice that decides the edges; stored with the version and shown by ``GET .../versions/{n}``.

    ``max_event_size`` 0 means no cap; ``half_life_days`` None means no time decay.
    """

    projection: str = "newman"
    half_life_days: float | None = None
    max_event_size: int = DEFAULT_MAX_EVENT_SIZE
    oversized: str = "drop"
    single_events: str = "refuse"
    backbone: str = "none"
    alpha: float = 0.05
    correction: str = "none"


class ProjectionParams(BaseModel):
    """The same choices as a job's params (every field optional: unset ones keep the version's)."""

    model_config = ConfigDict(extra="forbid")

    projection: Literal["count", "newman", "resource_allocation"] | None = Field(
        default=None, description="Tie weight: shared events (`count`), Newman's 1/(n-1) per shared event of n "
        "people (`newman`), or the directed resource-allocation share (`resource_allocation`).")
    half_life_days: float | None = Field(default=None, gt=0, le=36_500,
                                         description="Time decay: an event this many days older counts half.")
    max_event_size: int | None = Field(default=None, ge=0, le=10_000_000,
                                       description="Events with more people than this are dropped or "
                                       "down-weighted (0: no cap).")
    oversized: Literal["drop", "downweight"] | None = None
    single_events: Literal["skip", "refuse"] | None = None
    backbone: Literal["none", "disparity_filter", "sdsm"] | None = None
    alpha: float | None = Field(default=None, gt=0, lt=1, description="Significance level of the backbone.")
    correction: Literal["none", "bonferroni", "fdr_bh"] | None = None


def resolve_settings(given: dict[str, Any], previous: dict[str, Any] | None = None) -> ProjectionChoices:
    """Settings from what the request names, else the previous version's, else the defaults.

    Raises :class:`InvalidParameter` naming the field for an unknown name or a value out of range.
    """
    base = asdict(ProjectionChoices())
    if previous:
        base.update({k: v for k, v in previous.items() if k in base})
    base.update({k: v for k, v in given.items() if v is not None})
    for name, allowed in CHOICES.items():
        if base[name] not in allowed:
            raise InvalidParameter(
                f"there is no {name.replace('_', ' ')} called {base[name]!r}; choose one of "
                + ", ".join(allowed), field=name, value=base[name], choices=list(allowed))
    if not 0.0 < float(base["alpha"]) < 1.0:
        raise InvalidParameter("alpha must lie between 0 and 1 (0.05 is usual)", field="alpha", value=base["alpha"])
    if int(base["max_event_size"]) in (1,) or int(base["max_event_size"]) < 0:
        raise InvalidParameter("max_event_size must be 0 (no cap) or at least 2", field="max_event_size",
                               value=base["max_event_size"])
    if base["half_life_days"] is not None and not float(base["half_life_days"]) > 0:
        raise InvalidParameter("half_life_days must be above 0", field="half_life_days",
                               value=base["half_life_days"])
    names = {f.name for f in fields(ProjectionChoices)}
    return ProjectionChoices(**{k: v for k, v in base.items() if k in names})


@dataclass(frozen=True, eq=False)
class EventArrays:
    """An event table over dense ids: people 0..n_people-1, events 0..n_events-1."""

    person: NDArray[np.int32]
    event: NDArray[np.int32]
    weight: NDArray[np.float64] | None
    time: NDArray[np.float64] | None
    n_people: int
    n_events: int

    @property
    def rows(self) -> int:
        return int(self.person.shape[0])


@dataclass(frozen=True, eq=False)
class ProjectedGraph:
    """The version's edges and what to record about how they were made."""

    graph: GraphArrays
    projection: dict[str, Any]
    backbone: dict[str, Any]


def _quiet(fraction: float, message: str | None = None) -> None:
    return None


def _people_tied(src: NDArray[np.int32], dst: NDArray[np.int32], n: int) -> int:
    """People with at least one tie (a mask, not a sort: the ties may number tens of millions)."""
    tied = np.zeros(n, bool)
    tied[src] = True
    tied[dst] = True
    return int(tied.sum())


def _ties(n: object) -> str:
    return f"{n:,} tie{'s' if n != 1 else ''}"


def _share(x: float) -> float:
    return round(float(x), 4)


def project(table: EventArrays, settings: ProjectionChoices, *, directed: bool,
            progress: Progress | None = None) -> ProjectedGraph:
    """Project ``table`` by ``settings`` and keep the backbone; the edges of a ``directed`` graph are arcs.

    Raises
    ------
    InvalidParameter
        A refused setting or table (one-participant events with ``single_events=refuse``,
        resource allocation on an undirected graph, time decay without times, too many pairs).
    EmptyGraph
        No two people share a kept event, or the backbone keeps no tie (``EmptyBackbone``).
    """
    s = settings
    if s.projection == "resource_allocation" and not directed:
        raise InvalidParameter("resource allocation gives one-way ties (j passes a share to i): create the "
                               "graph with directed=true, or choose projection=newman or count",
                               field="projection", value=s.projection)
    if s.half_life_days is not None and table.time is None:
        raise InvalidParameter("time decay needs a time on every row: add a time column, or leave "
                               "half_life_days out", field="half_life_days", value=s.half_life_days)
    weight = table.weight if s.projection != "resource_allocation" else None
    if table.weight is not None and s.projection == "resource_allocation":
        raise InvalidParameter("participation weights are not defined for resource allocation: leave the "
                               "weight column out, or choose projection=newman or count", field="weight")
    report: Progress = progress or _quiet
    report(0.1, "projecting events onto people")
    cap = s.max_event_size or None
    decay = None if s.half_life_days is None else s.half_life_days * DAY
    try:
        proj = project_events(table.person, table.event, method=s.projection, weight=weight,
                              time=table.time if decay is not None else None, half_life=decay,
                              max_event_size=cap, oversized=s.oversized,  # type: ignore[arg-type]
                              singletons="skip" if s.single_events == "skip" else "refuse",
                              n_people=table.n_people, n_events=table.n_events,
                              progress=lambda done: report(0.1 + 0.4 * done, "projecting events onto people"))
    except UnknownProjection as exc:  # pragma: no cover - resolve_settings refuses it first
        raise InvalidParameter(f"there is no projection called {s.projection!r}", field="projection") from exc
    except SingleParticipantEvent as exc:
        raise InvalidParameter(
            (f"{exc.data['events']} events have" if exc.data["events"] != 1 else "an event has")
            + " a single participant, which ties nobody: remove such events, or send single_events=skip", field="single_events", events=exc.data["events"]) from exc
    except ProjectionTooLarge as exc:
        raise InvalidParameter(
            f"the kept events would form {exc.data['pair_slots']:,} pairs, more than the limit of "
            f"{exc.data['limit']:,} (largest event: {exc.data['largest_event']:,} people): lower max_event_size",
            field="max_event_size", pairs=exc.data["pair_slots"], limit=exc.data["limit"]) from exc
    except EmptyProjection as exc:
        raise EmptyGraph("no two people share an event that is kept, so there would be no ties: check the "
                         "event column, or raise max_event_size", field="body",
                         events=exc.data.get("events"), events_over_cap=exc.data.get("events_over_cap")) from exc
    report(0.5, "testing ties")
    stats = {
        "rows": proj.rows, "duplicate_rows": proj.duplicate_rows, "events": proj.events,
        "largest_event": proj.largest_event, "events_dropped": proj.events_dropped,
        "events_downweighted": proj.events_downweighted, "events_single": proj.events_single,
        "people_in_events": proj.people_in_events, "people_without_ties": proj.people_without_ties,
        "ties": proj.pairs if not proj.directed else proj.pairs // 2,
    }
    src, dst, w = proj.src, proj.dst, proj.weight
    backbone: dict[str, Any] = {"method": s.backbone}
    if s.backbone != "none":
        backbone.update(alpha=s.alpha, correction=s.correction)
    try:
        if s.backbone == "disparity_filter":
            b = disparity_filter(proj, alpha=s.alpha, correction=s.correction)
            keep = b.keep
        elif s.backbone == "sdsm":
            b = sdsm(table.person, table.event, alpha=s.alpha, correction=s.correction,
                     singletons="skip", n_people=table.n_people, n_events=table.n_events)
            kept = np.sort(b.src.astype(np.int64) * table.n_people + b.dst)  # pairs with src < dst
            mine = np.minimum(src, dst).astype(np.int64) * table.n_people + np.maximum(src, dst)
            at = np.minimum(np.searchsorted(kept, mine), max(kept.size - 1, 0))
            keep = kept[at] == mine
        else:
            keep = None
    except EmptyBackbone as exc:
        smallest = float(exc.data["smallest_p_value"])  # type: ignore[arg-type]
        raise EmptyBackbone(
            f"no tie is significant at alpha={s.alpha} with correction={s.correction} "
            f"({_ties(exc.data['edges_tested'])} tested, smallest p-value "
            f"{smallest:.3g}): raise alpha"
            + (", use correction=none" if s.correction != "none" else "") + ", or send backbone=none",
            ties_tested=exc.data["edges_tested"], ties_kept=0, alpha=s.alpha, correction=s.correction,
            smallest_p_value=round(smallest, 6)) from exc
    if keep is not None:
        if not keep.any():
            raise EmptyBackbone(
                f"the backbone's significant ties all come from events left out of the projection "
                f"({_ties(len(keep))} tested): raise max_event_size or send backbone=none",
                ties_tested=len(keep), ties_kept=0, alpha=s.alpha, correction=s.correction)
        total = float(w.sum())
        people_tied = _people_tied(src, dst, table.n_people)
        src, dst, w = src[keep], dst[keep], w[keep]
        left = people_tied - _people_tied(src, dst, table.n_people)
        backbone.update(ties_tested=int(keep.size),
                        ties_kept=int(keep.sum()), edge_share_kept=_share(keep.mean()),
                        weight_share_kept=_share(w.sum() / total if total > 0 else 0.0),
                        people_left_without_ties=int(left),
                        people_left_without_ties_share=_share(left / max(people_tied, 1)))
    if directed and not proj.directed:
        src, dst, w = np.concatenate([src, dst]), np.concatenate([dst, src]), np.concatenate([w, w])
    report(0.9, "storing ties")
    graph = GraphArrays(table.n_people, directed, src.astype(np.int32), dst.astype(np.int32),
                        np.asarray(w, np.float64), None)
    projection = {"method": s.projection, "half_life_days": s.half_life_days,
                  "max_event_size": s.max_event_size, "oversized": s.oversized,
                  "single_events": s.single_events, **stats}
    return ProjectedGraph(graph, projection, backbone)
