"""The console: web pages for the people who decide a campaign, served at ``/console/``.

One more door over the use cases: pages read through ``storage.repo`` and the
use cases, start work through the one queueing use case, and show the job
kinds' own plots. Sign-in exchanges an API key for a short-lived signed
session cookie (:mod:`.sessions`); every answer carries a strict
Content-Security-Policy (:mod:`.web`).
"""

from __future__ import annotations

from fastapi import APIRouter

from . import account, campaigns, jobs, networks, people, picture

__all__ = ["console_router"]

console_router = APIRouter(include_in_schema=False)
for _r in (account.router, networks.router, jobs.router, campaigns.router, picture.router, people.router):
    console_router.include_router(_r)
