"""Migrations: an empty database upgraded to head matches the models exactly."""

from __future__ import annotations

from alembic.autogenerate import compare_metadata
from alembic.runtime.migration import MigrationContext

from storage.db import make_engine
from storage.models import Base


def test_head_matches_models(db_url: str) -> None:
    engine = make_engine(db_url)
    try:
        with engine.connect() as conn:
            ctx = MigrationContext.configure(conn, opts={"compare_type": True})
            diff = compare_metadata(ctx, Base.metadata)
        assert diff == [], diff
    finally:
        engine.dispose()
