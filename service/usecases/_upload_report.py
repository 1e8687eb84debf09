"""What an upload tells its sender beyond the new version: fixes, warnings, edge identity.

Used by :mod:`service.usecases.uploads`:

- :func:`add_column_hint` completes a header error (missing or unknown
  column) with the columns the header probably means and the query string
  that maps them, e.g. ``source=From&target=To&weight=Interactions``.
- :func:`ids_without_edges` lists the people a node file names who have no
  edge: they are kept (attributes may arrive before the edges), but the
  sender should know, since each becomes an isolated person.
- :func:`newly_unknown_consent` / :func:`unknown_consent` list the people who
  stop being contactable because the version now holds consent data and they
  have no consent value (only an explicit yes counts), e.g. after the first
  opt-out sent for a graph that had no consent data.
- :func:`edge_digest` identifies a version's edge content (ids, arrays), so
  a later version with the same edges can reuse its scores.
"""

from __future__ import annotations

import hashlib
from collections.abc import Sequence
from typing import Any
from urllib.parse import quote, urlencode

import numpy as np
from numpy.typing import NDArray

from service.analytics.graph import GraphArrays, NodeAttributes
from service.intake import MissingColumn, UnknownColumn
from service.intake.hints import suggest_columns

__all__ = ["MAX_LISTED", "add_column_hint", "ids_without_edges", "newly_unknown_consent", "unknown_consent",
           "edge_digest"]

#: Ids listed in a warning; the count says how many there are in all.
MAX_LISTED = 20


def add_column_hint(
    exc: MissingColumn | UnknownColumn, *, part: str, asked: dict[str, str | None], extra_columns: str
) -> None:
    """Set ``exc.hint`` (header, columns, query) and add the fix to its reason.

    ``asked`` maps each query parameter naming a column (``source``,
    ``target``, ``weight``, ``probability``; or ``id``) to its value in the
    request, None for an optional one left unset.
    """
    header = list(exc.header)
    if not header:
        return
    found = suggest_columns(header, asked)
    params: dict[str, str] = dict(found.columns)
    leftover = [c for c in found.leftover if part == "edges"]
    if leftover and extra_columns == "error" and found.complete:
        params["extra_columns"] = "ignore"
    required = [r for r in asked if r in ("source", "target", "id")]
    if found.complete and params:
        query = urlencode(params, quote_via=quote)
        said = []
        if found.columns:
            said.append("it looks like " + ", ".join(f"{r} = {c}" for r, c in found.columns.items()))
        if "extra_columns" in params:
            said.append(f"the other column{'s' if len(leftover) > 1 else ''} ({', '.join(leftover)}) can be skipped")
        text = "; ".join(said)
        exc.reason += f". {text[0].upper()}{text[1:]}: send the upload again with ?{query}"
    else:
        query = None
        template = "&".join(f"{r}=<column>" for r in required)
        exc.reason += (
            f". Name the column{'s' if len(required) > 1 else ''} to use for {' and '.join(required)} "
            f"in the query, e.g. ?{template}"
        )
    exc.hint = {"header": header, "columns": found.columns, "query": query}


def ids_without_edges(
    graph: GraphArrays, ids: Sequence[str], named: NDArray[np.int64] | NDArray[np.int32]
) -> dict[str, Any] | None:
    """A warning listing the people ``named`` (node indices, file order) who have no edge."""
    touched = np.zeros(graph.n, dtype=bool)
    touched[graph.src] = True
    touched[graph.dst] = True
    named = np.asarray(named, dtype=np.int64)
    alone = named[~touched[named]]
    if alone.size == 0:
        return None
    _, first = np.unique(alone, return_index=True)
    alone = alone[np.sort(first)]
    count = int(alone.size)
    shown = [ids[int(i)] for i in alone[:MAX_LISTED]]
    return {
        "code": "ids_without_edges",
        "message": (
            f"{count} {'person' if count == 1 else 'people'} in the node file {'has' if count == 1 else 'have'} "
            "no connection in the edges. They were kept as people without connections (contactable "
            "unless their consent says otherwise); check the ids match those in the edge file"
            + (f" (first {MAX_LISTED} listed)" if count > MAX_LISTED else "")
        ),
        "count": count,
        "ids": shown,
    }


def newly_unknown_consent(
    attrs: NodeAttributes, previous: NodeAttributes | None, n_before: int
) -> NDArray[np.bool_] | None:
    """People without a consent value in a version with consent data who were contactable
    before (or are new); None when there are none."""
    if not attrs.has_consent_data:
        return None
    was = np.ones(attrs.n, dtype=bool)
    if previous is not None and previous.has_consent_data:
        was[:n_before] = previous.contactable()[:n_before]
    mask = np.asarray((attrs.consent < 0) & was)
    return mask if mask.any() else None


def unknown_consent(mask: NDArray[np.bool_], ids: Sequence[str]) -> dict[str, Any] | None:
    """The warning for :func:`newly_unknown_consent`'s people (``mask`` over ``ids``)."""
    where = np.flatnonzero(mask)
    count = int(where.size)
    if count == 0:
        return None
    return {
        "code": "unknown_consent",
        "message": (
            f"{count} {'person has' if count == 1 else 'people have'} no consent value while the graph now "
            "holds consent data, so they count as not contactable (only an explicit yes does). If they may "
            "be contacted, send their consent in a node file (part=nodes, mode=append)"
            + (f" (first {MAX_LISTED} listed)" if count > MAX_LISTED else "")
        ),
        "count": count,
        "ids": [ids[int(i)] for i in where[:MAX_LISTED]],
    }


def edge_digest(graph: GraphArrays, ids: Sequence[str]) -> str:
    """SHA-256 of what scores depend on: direction, node ids in order, and the edge arrays."""
    h = hashlib.sha256()
    h.update(f"edges/1|{graph.n}|{int(graph.directed)}|".encode())
    for start in range(0, len(ids), 65536):
        h.update("\x00".join(ids[start:start + 65536]).encode("utf-8"))
        h.update(b"\x00")
    arrays: list[tuple[str, Any]] = [
        ("src", np.asarray(graph.src, dtype=np.int32)),
        ("dst", np.asarray(graph.dst, dtype=np.int32)),
        ("weight", np.asarray(graph.weight, dtype=np.float64)),
        ("probability", None if graph.probability is None else np.asarray(graph.probability, dtype=np.float64)),
    ]
    for name, arr in arrays:
        h.update(f"|{name}:".encode())
        if arr is not None:
            h.update(np.ascontiguousarray(arr).data)
    return h.hexdigest()
