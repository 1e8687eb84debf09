"""The query parameters of an events upload (``POST /v1/graphs/{id}/versions?part=events``)."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Annotated, Any, Literal

from fastapi import Query

from service.intake.events import EventColumns
from service.usecases.event_projection import CHOICES

__all__ = ["EventQuery"]


def _choice(names: tuple[str, ...], text: str) -> Any:
    return Query(max_length=40, description=text, json_schema_extra={"enum": list(names)})


@dataclass
class EventQuery:
    """Columns and projection settings; read only when ``part=events``."""

    person: Annotated[str, Query(min_length=1, max_length=200, description="part=events: the person column.")] = (
        "person")
    event: Annotated[str, Query(min_length=1, max_length=200, description="part=events: the event column.")] = (
        "event")
    time: Annotated[str | None, Query(max_length=200, description="part=events: the time column (seconds since "
                                      "1970 or ISO 8601); a column named `time` is used when present.")] = None
    projection: Annotated[str | None, _choice(CHOICES["projection"], "part=events: how shared events weigh a tie "
                                              "(default newman).")] = None
    half_life_days: Annotated[float | None, Query(gt=0, le=36_500, description="part=events: an event this many "
                                                  "days older than the newest counts half.")] = None
    max_event_size: Annotated[int | None, Query(ge=0, le=10_000_000, description="part=events: events with "
                                                "more people are dropped or down-weighted (default 100; 0: no "
                                                "cap).")] = None
    oversized: Annotated[str | None, _choice(CHOICES["oversized"], "part=events: what happens to events above "
                                             "the cap (default drop).")] = None
    single_events: Annotated[str | None, _choice(CHOICES["single_events"], "part=events: events with one person tie "
                                                 "nobody: skip them, or refuse the table (default refuse).")] = None
    backbone: Annotated[str | None, _choice(CHOICES["backbone"], "part=events: keep only significant ties (default "
                                            "none).")] = None
    alpha: Annotated[float | None, Query(gt=0, lt=1, description="part=events: significance level of the "
                                         "backbone (default 0.05).")] = None
    correction: Annotated[str | None, _choice(CHOICES["correction"], "part=events: correction for testing many ties "
                                              "(default none).")] = None

    def columns(self, weight: str | None, extra_columns: Literal["error", "ignore"]) -> EventColumns:
        return EventColumns(self.person, self.event, self.time, weight, extra_columns)

    def settings(self) -> dict[str, Any]:
        names = ("projection", "half_life_days", "max_event_size", "oversized", "single_events", "backbone",
                 "alpha", "correction")
        return {k: getattr(self, k) for k in names if getattr(self, k) is not None}
