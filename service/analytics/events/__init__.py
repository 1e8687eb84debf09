"""Relationship graphs built from (person, event) tables: weighted projections
and their statistically significant backbones.

Public names of this family; private modules (leading underscore) hold
the steps and the compiled kernels.
"""

from __future__ import annotations

from .backbone import (
    adjust_p_values,
    Backbone,
    bicm,
    BicmFit,
    CORRECTIONS,
    disparity_filter,
    EmptyBackbone,
    sdsm,
    sdsm_p_values,
)

from .projection import (
    DEFAULT_MAX_EVENT_SIZE,
    DEFAULT_MAX_PAIR_SLOTS,
    EmptyProjection,
    event_table,
    EventTable,
    project_events,
    project_table,
    Projection,
    PROJECTIONS,
    ProjectionTooLarge,
    SingleParticipantEvent,
    UnknownProjection,
)

__all__ = [
    "CORRECTIONS",
    "Backbone",
    "BicmFit",
    "EmptyBackbone",
    "bicm",
    "disparity_filter",
    "sdsm",
    "sdsm_p_values",
    "adjust_p_values",
    "PROJECTIONS",
    "DEFAULT_MAX_EVENT_SIZE",
    "DEFAULT_MAX_PAIR_SLOTS",
    "Projection",
    "EventTable",
    "UnknownProjection",
    "SingleParticipantEvent",
    "ProjectionTooLarge",
    "EmptyProjection",
    "event_table",
    "project_events",
    "project_table",
]
