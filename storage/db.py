"""Engine and session factory; SQLite pragmas for the embedded default.

SQLite runs in WAL mode with a busy timeout and foreign keys on, so API
processes and worker processes can share one file. PostgreSQL URLs use
psycopg 3 (``postgresql+psycopg://``).
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

from sqlalchemy import Engine, create_engine, event
from sqlalchemy.engine import make_url
from sqlalchemy.orm import Session, sessionmaker

__all__ = ["make_engine", "make_sessionmaker", "is_sqlite", "normalise_url", "write_session"]

SQLITE_BUSY_TIMEOUT_MS = 30_000


def normalise_url(url: str) -> str:
    """Point plain ``postgresql://`` URLs at psycopg 3."""
    if url.startswith("postgresql://") or url.startswith("postgres://"):
        return "postgresql+psycopg://" + url.split("://", 1)[1]
    return url


def is_sqlite(engine_or_url: Engine | str) -> bool:
    url = engine_or_url if isinstance(engine_or_url, str) else str(engine_or_url.url)
    return make_url(url).get_backend_name() == "sqlite"


def make_engine(url: str, *, echo: bool = False, pool_size: int = 5) -> Engine:
    """Create an engine; SQLite connections get WAL, busy timeout, foreign keys."""
    url = normalise_url(url)
    if is_sqlite(url):
        engine = create_engine(
            url,
            echo=echo,
            connect_args={"timeout": SQLITE_BUSY_TIMEOUT_MS / 1000, "check_same_thread": False},
        )
        _install_sqlite_pragmas(engine)
        return engine
    return create_engine(url, echo=echo, pool_size=pool_size, pool_pre_ping=True, max_overflow=10)


def make_sessionmaker(engine: Engine) -> sessionmaker[Session]:
    return sessionmaker(engine, expire_on_commit=False)


def _install_sqlite_pragmas(engine: Engine) -> None:
    @event.listens_for(engine, "connect")
    def _on_connect(dbapi_conn: Any, _record: Any) -> None:
        # Let SQLAlchemy, not pysqlite, decide where transactions begin, so that
        # BEGIN IMMEDIATE can be issued for job claims.
        dbapi_conn.isolation_level = None
        cur = dbapi_conn.cursor()
        cur.execute("PRAGMA journal_mode=WAL")
        cur.execute(f"PRAGMA busy_timeout={SQLITE_BUSY_TIMEOUT_MS}")
        cur.execute("PRAGMA foreign_keys=ON")
        cur.execute("PRAGMA synchronous=NORMAL")
        cur.close()

    @event.listens_for(engine, "begin")
    def _on_begin(conn: Any) -> None:
        mode = conn.info.pop("sqlite_begin", "DEFERRED")
        conn.exec_driver_sql(f"BEGIN {mode}")


@contextmanager
def write_session(maker: sessionmaker[Session]) -> Iterator[Session]:
    """A session whose first transaction is ``BEGIN IMMEDIATE`` on SQLite (plain elsewhere)."""
    bind = maker.kw.get("bind")
    if not isinstance(bind, Engine) or not is_sqlite(bind):
        with maker() as db:
            yield db
        return
    with bind.connect() as conn:
        conn.info["sqlite_begin"] = "IMMEDIATE"
        try:
            with maker(bind=conn) as db:
                yield db
        finally:
            conn.info.pop("sqlite_begin", None)
