"""Migration 0002: old webhook secrets keep their HMAC key in the whsec_<base64> form, both ways."""

from __future__ import annotations

import base64
from pathlib import Path

import pytest
import sqlalchemy as sa
from alembic import command

from service.jobs import webhooks as wh
from storage.db import make_engine
from storage.migrate import alembic_config, upgrade
from tests.conftest import _reset_pg


@pytest.fixture(params=["sqlite", pytest.param("postgres", marks=pytest.mark.postgres)])
def bare_url(request: pytest.FixtureRequest, tmp_path: Path) -> str:
    """An empty database with no migration applied."""
    if request.param == "sqlite":
        return f"sqlite:///{tmp_path / 'bare.sqlite3'}"
    url: str = request.getfixturevalue("pg_url")
    _reset_pg(url)
    return url


OLD = {"wh_a": "whsec_" + "Q" * 43, "wh_b": "s" * 200, "wh_c": "naïve-secret-16chars"}


def test_old_secrets_keep_their_key_and_come_back_on_downgrade(bare_url: str) -> None:
    upgrade(bare_url, "0001")
    engine = make_engine(bare_url)
    try:
        with engine.begin() as conn:
            for ident, secret in OLD.items():
                conn.execute(
                    sa.text("INSERT INTO webhook (id, tenant_id, url, events, secret, active, created_at) "
                            "VALUES (:id, 't', 'https://hooks.example.com/', '[]', :s, :a, :c)"),
                    {"id": ident, "s": secret, "a": True, "c": "2026-12-01 00:00:00+00:00"},
                )
        upgrade(bare_url)
        with engine.connect() as conn:
            rows = dict(conn.execute(sa.text("SELECT id, secret FROM webhook")).all())
            extra = conn.execute(sa.text("SELECT previous_secret, previous_secret_expires_at FROM webhook")).all()
        for ident, old in OLD.items():
            # The old scheme keyed HMAC with the secret string's bytes; so does the new form.
            assert rows[ident] == "whsec_" + base64.b64encode(old.encode()).decode()
            assert wh.secret_key(rows[ident]) == old.encode()
        assert all(r == (None, None) for r in extra)
        command.downgrade(alembic_config(bare_url), "0001")
        with engine.connect() as conn:
            assert dict(conn.execute(sa.text("SELECT id, secret FROM webhook")).all()) == OLD
        upgrade(bare_url)
    finally:
        engine.dispose()
