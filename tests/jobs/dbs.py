"""Database fixtures for the job tests: a fresh SQLite file, or the run's PostgreSQL database.

Both are brought to head by the migrations. PostgreSQL comes from the
suite's session fixture ``pg_url`` (tests/conftest.py: a ``bw_test_<random>``
database, skipped when unreachable except in CI); instead of dropping the
schema before every test, as the suite's ``db_url`` does, these tests empty
the tables with one TRUNCATE (``jobs_db_url``), which is several times faster.
"""

from __future__ import annotations

from collections.abc import Iterator

import numpy as np
import pytest
from sqlalchemy import Engine, text
from sqlalchemy.orm import Session, sessionmaker

from service.analytics.graph import GraphArrays, NodeAttributes
from service.usecases.loading import version_arrays
from storage.db import make_engine, make_sessionmaker
from storage.migrate import upgrade
from storage.models import Base, Graph, GraphVersion
from storage.repo import graphs as graph_repo

__all__ = ["jobs_db_url", "engine", "maker", "add_tiny_graph"]


def _truncate(url: str) -> None:
    eng = make_engine(url)
    names = ", ".join(f'"{t.name}"' for t in Base.metadata.sorted_tables)
    with eng.begin() as conn:
        conn.execute(text(f"TRUNCATE TABLE {names} CASCADE"))
    eng.dispose()


@pytest.fixture(params=["sqlite", pytest.param("postgres", marks=pytest.mark.postgres)])
def jobs_db_url(request: pytest.FixtureRequest, tmp_path: object) -> Iterator[str]:
    """A migrated, empty database. PostgreSQL: the run's database (``pg_url``), emptied by TRUNCATE."""
    if request.param == "sqlite":
        url = f"sqlite:///{tmp_path}/bellwether.sqlite3"
        upgrade(url)
    else:
        url = request.getfixturevalue("pg_url")
        upgrade(url)  # a no-op once at head
        _truncate(url)
    yield url


@pytest.fixture
def engine(jobs_db_url: str) -> Iterator[Engine]:
    eng = make_engine(jobs_db_url)
    yield eng
    eng.dispose()


@pytest.fixture
def maker(engine: Engine) -> sessionmaker[Session]:
    return make_sessionmaker(engine)


def add_tiny_graph(
    db: Session, tenant_id: str = "default", *, edges: list[tuple[int, int]] | None = None, n: int | None = None
) -> tuple[Graph, GraphVersion]:
    """A graph with one version (default: the path 0-1-2-3), stored as the intake would."""
    edges = edges if edges is not None else [(0, 1), (1, 2), (2, 3)]
    n = n if n is not None else 1 + max(max(e) for e in edges)
    g = GraphArrays(
        n=n,
        directed=False,
        src=np.array([e[0] for e in edges], dtype=np.int32),
        dst=np.array([e[1] for e in edges], dtype=np.int32),
        weight=np.ones(len(edges)),
    )
    attrs = NodeAttributes.empty(n)
    arrays, extra = version_arrays(g, [f"n{i}" for i in range(n)], attrs)
    graph = graph_repo.add_graph(db, tenant_id=tenant_id, name="tiny", directed=False)
    version = graph_repo.add_version(
        db, graph, based_on=0, arrays=arrays, manifest_extra=extra, summary={}, origin={"test": True},
        nodes=n, edges=len(edges),
    )
    return graph, version
