"""Annotated dependencies shared by the routers."""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass
from typing import Annotated, Any

from fastapi import Depends, Request
from sqlalchemy.orm import Session, sessionmaker

from service.settings import Settings
from storage.db import write_session
from storage.repo import graphs as graph_repo

from .errors import InvalidParams

__all__ = ["DbDep", "WriteDbDep", "get_write_db", "SettingsDep", "TenantDep", "Principal", "get_db", "get_settings", "get_principal",
           "reject_unknown_query", "require_graph"]


@dataclass(frozen=True)
class Principal:
    """Who is calling: their tenant and scopes (from the API key)."""

    tenant_id: str
    scopes: frozenset[str]
    key_id: str | None = None


def get_settings(request: Request) -> Settings:
    settings: Settings = request.app.state.settings
    return settings


def get_db(request: Request) -> Iterator[Session]:
    maker: sessionmaker[Session] = request.app.state.sessionmaker
    with maker() as db:
        yield db


def get_principal(request: Request) -> Principal:
    """Set by the auth middleware; a default tenant when auth is off (loopback only)."""
    principal: Principal | None = getattr(request.state, "principal", None)
    if principal is None:
        settings: Settings = request.app.state.settings
        return Principal(settings.default_tenant, frozenset({"read", "write", "admin"}))
    return principal


def get_write_db(request: Request) -> Iterator[Session]:
    """A session whose transaction starts as a write (BEGIN IMMEDIATE on SQLite).

    Routes that read and then write use it, so SQLite never has to upgrade a
    read transaction to a write one (which fails at once under contention).
    """
    maker: sessionmaker[Session] = request.app.state.sessionmaker
    with write_session(maker) as db:
        yield db


DbDep = Annotated[Session, Depends(get_db)]
WriteDbDep = Annotated[Session, Depends(get_write_db)]
SettingsDep = Annotated[Settings, Depends(get_settings)]
PrincipalDep = Annotated[Principal, Depends(get_principal)]


def get_tenant(principal: PrincipalDep) -> str:
    return principal.tenant_id


TenantDep = Annotated[str, Depends(get_tenant)]


def _query_names(dependant: Any) -> set[str]:
    names = {str(getattr(f, "alias", None) or f.name) for f in getattr(dependant, "query_params", ())}
    for sub in getattr(dependant, "dependencies", ()):
        names |= _query_names(sub)
    return names


def reject_unknown_query(request: Request) -> None:
    """A query parameter the route does not read is a 422, not silently ignored (a misspelt filter)."""
    dependant = getattr(request.scope.get("route"), "dependant", None)
    if dependant is None or not request.query_params:
        return
    unknown = sorted(set(request.query_params) - _query_names(dependant))
    if unknown:
        raise InvalidParams(
            f"unknown query parameter {unknown[0]!r}; this route reads "
            + (", ".join(sorted(_query_names(dependant))) or "none"),
            field=unknown[0],
        )


def require_graph(graph_id: str, request: Request, tenant: TenantDep) -> None:
    """404 for a graph the tenant does not have, before the route checks anything else it was sent."""
    maker: sessionmaker[Session] = request.app.state.sessionmaker
    with maker() as db:
        graph_repo.get_graph(db, tenant, graph_id)
