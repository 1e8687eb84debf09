"""Past campaigns: plain functions over a Session; the caller owns the transaction."""

from __future__ import annotations

from datetime import datetime
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from ..errors import Conflict, NotFound
from ..models import Campaign, Graph, new_id

__all__ = ["add_campaign", "get_campaign", "list_campaigns", "find_campaigns", "add_campaign_log",
           "delete_campaign", "get_graph_tenant"]


def add_campaign(
    db: Session,
    *,
    tenant_id: str,
    graph_id: str,
    name: str,
    started_at: datetime,
    channel: str | None = None,
    notes: str | None = None,
) -> Campaign:
    row = Campaign(id=new_id("c"), tenant_id=tenant_id, graph_id=graph_id, name=name,
                   started_at=started_at, channel=channel, notes=notes)
    db.add(row)
    db.flush()
    return row


def get_campaign(db: Session, tenant_id: str, graph_id: str, campaign_id: str) -> Campaign:
    """The campaign, or :class:`NotFound` when it is not this tenant's and graph's."""
    row = db.get(Campaign, campaign_id)
    if row is None or row.tenant_id != tenant_id or row.graph_id != graph_id:
        raise NotFound("campaign not found", resource="campaign", id=campaign_id)
    return row


def list_campaigns(db: Session, tenant_id: str, graph_id: str) -> list[Campaign]:
    """The graph's campaigns, oldest start first."""
    return list(db.scalars(
        select(Campaign)
        .where(Campaign.tenant_id == tenant_id, Campaign.graph_id == graph_id)
        .order_by(Campaign.started_at, Campaign.id)
    ))


def find_campaigns(db: Session, tenant_id: str, graph_id: str, ids: list[str]) -> dict[str, Campaign]:
    """The campaigns among ``ids`` that exist for this tenant and graph, by id."""
    rows = db.scalars(select(Campaign).where(
        Campaign.tenant_id == tenant_id, Campaign.graph_id == graph_id, Campaign.id.in_(ids)))
    return {r.id: r for r in rows}


def add_campaign_log(db: Session, row: Campaign, *, log: list[Any], report: dict[str, Any],
                     version: int, now: datetime) -> Campaign:
    """Write the campaign's log once; a second upload is a :class:`Conflict`."""
    if row.uploaded_at is not None:
        raise Conflict("this campaign's log was already uploaded and cannot change",
                       resource="campaign", id=row.id)
    row.log = log
    row.report = report
    row.version = version
    row.uploaded_at = now
    db.flush()
    return row


def delete_campaign(db: Session, row: Campaign) -> None:
    db.delete(row)
    db.flush()


def get_graph_tenant(db: Session, graph_id: str) -> str:
    """The tenant that owns ``graph_id`` (for work that holds only the graph's id)."""
    tenant = db.scalar(select(Graph.tenant_id).where(Graph.id == graph_id))
    if tenant is None:
        raise NotFound("graph not found", resource="graph", id=graph_id)
    return tenant
