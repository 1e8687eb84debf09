"""The HTTP layer: routers (thin), schemas, dependencies and problem handlers.

May import ``service.jobs``, ``service.intake``, ``service.analytics``
(through the job and loader modules) and ``storage``. Every router is
included here, in one list.
"""

from __future__ import annotations

from fastapi import APIRouter, Depends

from . import campaigns, graphs, health, jobs, layouts, plots, recommendations, result_exports, schedules, scores, webhooks
from .auth import authorize
from .deps import reject_unknown_query

__all__ = ["api_router", "ROUTERS", "OPEN_ROUTERS"]

# Routers under /v1: every one needs a bearer key (see auth.py).
ROUTERS = [
    graphs.router, jobs.router, schedules.router, webhooks.router, recommendations.router, result_exports.router,
    plots.router, scores.router, campaigns.router, layouts.router,
]
# Operations endpoints: no key.
OPEN_ROUTERS = [health.router]

api_router = APIRouter()
for _r in OPEN_ROUTERS:
    api_router.include_router(_r)
for _r in ROUTERS:
    api_router.include_router(_r, dependencies=[Depends(authorize), Depends(reject_unknown_query)])
