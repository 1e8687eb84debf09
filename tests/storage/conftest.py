"""Storage test fixtures: the database fixtures shared with the job tests."""

from __future__ import annotations

from tests.jobs.dbs import engine, jobs_db_url, maker

__all__ = ["engine", "jobs_db_url", "maker"]
