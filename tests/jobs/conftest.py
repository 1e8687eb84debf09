"""Fixtures of the job tests (the database ones live in tests/jobs/dbs.py)."""

from __future__ import annotations

from tests.jobs.dbs import engine, jobs_db_url, maker

__all__ = ["engine", "jobs_db_url", "maker"]
