"""Shared fixtures for the whole suite: databases, app and HTTP client."""

from __future__ import annotations

import os
import secrets
from collections.abc import AsyncIterator, Iterator
from pathlib import Path

import pytest

PG_ADMIN_URL = os.environ.get("BELLWETHER_TEST_PG", "postgresql://postgres@127.0.0.1:5432/test")


def pytest_configure(config: pytest.Config) -> None:
    os.environ.setdefault("NUMBA_CACHE_DIR", str(Path(__file__).resolve().parent.parent / ".numba-cache"))


def _in_ci() -> bool:
    return os.environ.get("CI", "").lower() in ("1", "true", "yes")


@pytest.fixture(scope="session")
def pg_url() -> Iterator[str]:
    """A fresh PostgreSQL database for this test run, dropped afterwards.

    Skips when the server is unreachable, except in CI (CI=true), where it fails.
    """
    import psycopg

    name = f"bw_test_{secrets.token_hex(6)}"
    try:
        admin = psycopg.connect(PG_ADMIN_URL, autocommit=True, connect_timeout=5)
    except psycopg.OperationalError as exc:
        if _in_ci():
            pytest.fail(f"PostgreSQL at {PG_ADMIN_URL} unreachable in CI: {exc}")
        pytest.skip(f"PostgreSQL at {PG_ADMIN_URL} unreachable: {exc}")
    with admin:
        admin.execute(f'CREATE DATABASE "{name}"')
    base = PG_ADMIN_URL.rsplit("/", 1)[0]
    try:
        yield f"postgresql+psycopg://{base.split('://', 1)[1]}/{name}"
    finally:
        from sqlalchemy import create_engine  # noqa: F401  (engines are disposed by users)

        with psycopg.connect(PG_ADMIN_URL, autocommit=True) as admin:
            admin.execute(
                "SELECT pg_terminate_backend(pid) FROM pg_stat_activity WHERE datname = %s", (name,)
            )
            admin.execute(f'DROP DATABASE IF EXISTS "{name}"')


def _reset_pg(url: str) -> None:
    from sqlalchemy import create_engine, text

    eng = create_engine(url)
    with eng.begin() as conn:
        conn.execute(text("DROP SCHEMA public CASCADE"))
        conn.execute(text("CREATE SCHEMA public"))
    eng.dispose()


@pytest.fixture(params=["sqlite", pytest.param("postgres", marks=pytest.mark.postgres)])
def db_url(request: pytest.FixtureRequest, tmp_path: Path) -> str:
    """A migrated, empty database: a fresh SQLite file, or the run's PostgreSQL database."""
    from storage.migrate import upgrade

    if request.param == "sqlite":
        url = f"sqlite:///{tmp_path / 'test.sqlite3'}"
    else:
        url = request.getfixturevalue("pg_url")
        _reset_pg(url)
    upgrade(url)
    return url


@pytest.fixture
def sqlite_url(tmp_path: Path) -> str:
    from storage.migrate import upgrade

    url = f"sqlite:///{tmp_path / 'test.sqlite3'}"
    upgrade(url)
    return url


def make_settings(url: str, tmp_path: Path, **overrides: object):  # type: ignore[no-untyped-def]
    from service.settings import Settings

    values: dict[str, object] = {"data_dir": tmp_path / "data", "database_url": url, "auth_disabled": True}
    values.update(overrides)
    return Settings(**values)  # type: ignore[arg-type]


@pytest.fixture
def settings(db_url: str, tmp_path: Path):  # type: ignore[no-untyped-def]
    return make_settings(db_url, tmp_path)


@pytest.fixture
async def client(settings) -> AsyncIterator["httpx.AsyncClient"]:  # type: ignore[no-untyped-def]  # noqa: F821
    import httpx

    from service.app import create_app
    from service.usecases.loading import clear_cache

    app = create_app(settings)
    async with app.router.lifespan_context(app):
        transport = httpx.ASGITransport(app=app)
        async with httpx.AsyncClient(transport=transport, base_url="http://testserver") as c:
            c.app = app  # type: ignore[attr-defined]
            yield c
    clear_cache()


@pytest.fixture
def anyio_backend() -> str:
    return "asyncio"
