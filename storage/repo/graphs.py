"""Graphs and versions: plain functions over a Session; the caller owns the transaction."""

from __future__ import annotations

import base64
import json
from datetime import datetime
from typing import Any


from numpy.typing import NDArray
from sqlalchemy import delete, select, tuple_, update
from sqlalchemy.orm import Session

from ..arrays import read_arrays, write_arrays
from ..errors import Conflict, NotFound
from ..models import Graph, GraphVersion, Job, VersionArray, new_id

__all__ = [
    "add_graph",
    "get_graph",
    "list_graphs",
    "delete_graph",
    "add_version",
    "get_version",
    "find_version",
    "list_versions",
    "get_version_arrays",
    "list_same_edges",
    "encode_cursor",
    "decode_cursor",
]


def encode_cursor(created_at: datetime, ident: str) -> str:
    raw = json.dumps([created_at.isoformat(), ident]).encode()
    return base64.urlsafe_b64encode(raw).decode().rstrip("=")


def decode_cursor(cursor: str) -> tuple[datetime, str]:
    try:
        raw = base64.urlsafe_b64decode(cursor + "=" * (-len(cursor) % 4))
        when, ident = json.loads(raw)
        return datetime.fromisoformat(when), str(ident)
    except (ValueError, TypeError) as exc:
        raise ValueError("cursor is not one this service issued") from exc


def add_graph(
    db: Session,
    *,
    tenant_id: str,
    name: str,
    directed: bool,
    description: str | None = None,
    allow_self_loops: bool = False,
) -> Graph:
    graph = Graph(
        id=new_id("g"),
        tenant_id=tenant_id,
        name=name,
        directed=directed,
        description=description,
        allow_self_loops=allow_self_loops,
        latest_version=0,
    )
    db.add(graph)
    db.flush()
    return graph


def get_graph(db: Session, tenant_id: str, graph_id: str) -> Graph:
    graph = db.get(Graph, graph_id)
    if graph is None or graph.tenant_id != tenant_id:
        raise NotFound("graph not found", resource="graph", id=graph_id)
    return graph


def list_graphs(
    db: Session, tenant_id: str, *, limit: int, cursor: str | None = None
) -> tuple[list[Graph], str | None]:
    """Newest first; the cursor continues after the last graph returned."""
    q = select(Graph).where(Graph.tenant_id == tenant_id)
    if cursor:
        when, ident = decode_cursor(cursor)
        q = q.where(tuple_(Graph.created_at, Graph.id) < tuple_(when, ident))
    rows = list(db.execute(q.order_by(Graph.created_at.desc(), Graph.id.desc()).limit(limit + 1)).scalars())
    nxt = encode_cursor(rows[limit - 1].created_at, rows[limit - 1].id) if len(rows) > limit else None
    return rows[:limit], nxt


def delete_graph(db: Session, graph: Graph) -> None:
    """Delete a graph with its versions, jobs and results (cascades)."""
    version_ids = select(GraphVersion.id).where(GraphVersion.graph_id == graph.id)
    db.execute(delete(VersionArray).where(VersionArray.version_id.in_(version_ids)))
    db.execute(delete(GraphVersion).where(GraphVersion.graph_id == graph.id))
    db.execute(delete(Job).where(Job.graph_id == graph.id))
    db.delete(graph)
    db.flush()


def add_version(
    db: Session,
    graph: Graph,
    *,
    based_on: int,
    arrays: dict[str, NDArray[Any]],
    manifest_extra: dict[str, Any],
    summary: dict[str, Any],
    origin: dict[str, Any],
    nodes: int,
    edges: int,
    edges_digest: str | None = None,
) -> GraphVersion:
    """Write a new version numbered ``based_on + 1``.

    The compare-and-set on ``graph.latest_version`` makes concurrent uploads
    safe: a delta computed from an older version than the newest raises
    :class:`Conflict` instead of silently dropping the other upload.
    """
    res = db.execute(
        update(Graph)
        .where(Graph.id == graph.id, Graph.latest_version == based_on)
        .values(latest_version=based_on + 1)
    )
    if res.rowcount != 1:  # type: ignore[attr-defined]
        raise Conflict(
            "another upload created a newer version while this one was processed; retry",
            resource="graph",
            id=graph.id,
        )
    version = GraphVersion(
        id=new_id("v"),
        graph_id=graph.id,
        number=based_on + 1,
        nodes=nodes,
        edges=edges,
        origin=origin,
        summary=summary,
        manifest={},
        edges_digest=edges_digest,
    )
    db.add(version)
    db.flush()
    manifest = write_arrays(db, VersionArray, version.id, arrays)
    version.manifest = {"arrays": manifest, **manifest_extra}
    db.flush()
    return version


def get_version(db: Session, graph: Graph, number: int | None = None) -> GraphVersion:
    """A version by number, or the newest when ``number`` is None."""
    n = graph.latest_version if number is None else number
    version = db.execute(
        select(GraphVersion).where(GraphVersion.graph_id == graph.id, GraphVersion.number == n)
    ).scalar_one_or_none()
    if version is None:
        what = "graph has no versions yet" if number is None else "version not found"
        raise NotFound(what, resource="version", id=f"{graph.id}/{'latest' if number is None else n}")
    return version


def find_version(db: Session, version_id: str) -> GraphVersion | None:
    """A version by id, of any graph (the caller checks it belongs where it should); None when gone."""
    return db.get(GraphVersion, version_id)


def list_versions(db: Session, graph: Graph) -> list[GraphVersion]:
    return list(
        db.execute(
            select(GraphVersion).where(GraphVersion.graph_id == graph.id).order_by(GraphVersion.number)
        ).scalars()
    )


def get_version_arrays(
    db: Session, version: GraphVersion, names: list[str] | None = None
) -> dict[str, NDArray[Any]]:
    manifest = version.manifest["arrays"]
    wanted = list(manifest) if names is None else names
    return read_arrays(db, VersionArray, version.id, manifest, wanted)




def list_same_edges(db: Session, version: GraphVersion) -> list[int]:
    """Numbers of the earlier versions of the graph with the same edge content, newest first."""
    if version.edges_digest is None:
        return []
    return list(
        db.execute(
            select(GraphVersion.number)
            .where(
                GraphVersion.graph_id == version.graph_id,
                GraphVersion.edges_digest == version.edges_digest,
                GraphVersion.number < version.number,
            )
            .order_by(GraphVersion.number.desc())
        ).scalars()
    )
