"""Alembic, driven from code: no alembic.ini is needed at run time."""

from __future__ import annotations

from pathlib import Path

from alembic import command
from alembic.config import Config
from alembic.runtime.migration import MigrationContext
from alembic.script import ScriptDirectory
from sqlalchemy import Engine

from .db import normalise_url

__all__ = ["alembic_config", "upgrade", "migration_status", "MIGRATIONS"]

MIGRATIONS = Path(__file__).resolve().parent / "migrations"


def alembic_config(url: str) -> Config:
    cfg = Config()
    cfg.set_main_option("script_location", str(MIGRATIONS))
    cfg.set_main_option("sqlalchemy.url", normalise_url(url).replace("%", "%%"))
    return cfg


def upgrade(url: str, revision: str = "head") -> None:
    """Bring the database at ``url`` up to ``revision``."""
    command.upgrade(alembic_config(url), revision)


def migration_status(engine: Engine) -> tuple[str | None, str | None]:
    """(current revision of the database, head revision of the code)."""
    head = ScriptDirectory.from_config(alembic_config(str(engine.url))).get_current_head()
    with engine.connect() as conn:
        current = MigrationContext.configure(conn).get_current_revision()
    return current, head
