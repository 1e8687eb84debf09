"""Storage test fixtures: the database fixtures shared with the job tests."""

from __future__ import annotations

from tests.jobs.dbs import db_url, engine, maker

__all__ = ["db_url", "engine", "maker"]
