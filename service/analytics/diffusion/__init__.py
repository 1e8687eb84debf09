"""How adoption spreads: Independent Cascade and Linear Threshold runs, spread
estimates, forecasts with intervals, and paired comparisons on common campaigns.

Public names of this family; private modules (leading underscore) hold
the steps and the compiled kernels.
"""

from __future__ import annotations

from .cascades import (
    estimate_spread,
    independent_cascade,
    linear_threshold,
    SpreadEstimate,
    stream_key,
)

from .forecasts import (
    forecast,
    ForecastResult,
    IntervalEstimate,
    NodeReach,
    PERCENTILES,
    RoundForecast,
)

from .paired import (
    compare_reach,
    Interval,
    paired_interval,
    PairedComparison,
    world_key,
    WORLDS_LABEL,
)

__all__ = [
    "SpreadEstimate",
    "stream_key",
    "independent_cascade",
    "linear_threshold",
    "estimate_spread",
    "PERCENTILES",
    "IntervalEstimate",
    "RoundForecast",
    "NodeReach",
    "ForecastResult",
    "forecast",
    "WORLDS_LABEL",
    "world_key",
    "Interval",
    "PairedComparison",
    "paired_interval",
    "compare_reach",
]
