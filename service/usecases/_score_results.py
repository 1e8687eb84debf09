"""Finding the ``scores`` result a ranking, person or community read is answered from,
and what binds a read to it: the version asked for, cursors and ETags.

A read needs certain stored arrays (a measure's order, the community labels).
It is answered from the newest succeeded ``scores`` job of the version asked
for (default: the newest) whose result holds them all; when that version has
none, from the newest such result of an earlier version with the same edge
content: scores depend on the edges only, so an upload that changed only
attributes keeps its rankings, shown with the new attributes. A result
computed from attributes (PageRank jumping by an attribute) is never reused
that way. A cursor pins the result it came from, and, when that result was
reused, the version whose people it showed.

The result's JSON document, its arrays and each version's node table are
kept per id in the ranking cache (results and versions never change).

A read's query has a digest (:func:`digest`) over what the caller asked,
with the version as written; a cursor carries its first 16 characters and
is refused for another query, and the ETag covers the result, the version
shown, the digest and the page.
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from datetime import datetime
from typing import Any

import numpy as np
from numpy.typing import NDArray
from sqlalchemy.orm import Session

from service.analytics.errors import InvalidParameter
from service.analytics.structure.centrality import MEASURES
from service.usecases.errors import ResultNotReady
from storage.arrays import decode_strings
from storage.errors import NotFound
from storage.models import GraphVersion
from storage.repo import graphs as graph_repo
from storage.repo import results as result_repo

from . import _ranking_tables as R

__all__ = [
    "RANKED",
    "KnownEtag",
    "ScoresResult",
    "Shown",
    "Unchanged",
    "Version",
    "as_written",
    "check_measure",
    "digest",
    "etag_of",
    "find_scores_result",
    "node_table",
    "read_cursor",
    "version_number",
    "whole",
]

KIND = "scores"
ETAG_SALT = "scores-views/1"
#: Measures a ranking can be ordered by (labels such as ``community`` are not scores).
RANKED = [m for m in MEASURES if m not in R.LABEL_MEASURES]

#: How a door shows a figure (its rounding); :func:`whole` keeps full precision.
Shown = Callable[[float], float]
#: True when the caller already holds this ETag (``If-None-Match``).
KnownEtag = Callable[[str], bool]
#: A version as a caller writes it: a number, ``"latest"``, or None for the newest.
Version = int | str | None


def whole(x: float) -> float:
    return x


def digest(*parts: object) -> str:
    """Hex SHA-256 of a query's parts (JSON, keys sorted)."""
    return hashlib.sha256(json.dumps([ETAG_SALT, *parts], sort_keys=True, default=str).encode()).hexdigest()


def etag_of(*parts: object) -> str:
    return f'"{digest(*parts)[:40]}"'


@dataclass(frozen=True)
class Unchanged:
    """The caller already holds this answer (its ETag matched)."""

    etag: str


def version_number(version: Version) -> int | None:
    """``"latest"`` (or None) means the newest version; otherwise a positive integer."""
    if version is None or version == "latest":
        return None
    try:
        n = int(version)
    except ValueError as exc:
        raise InvalidParameter("version must be a positive integer or 'latest'", field="version") from exc
    if n < 1:
        raise InvalidParameter("version must be a positive integer or 'latest'", field="version")
    return n


def as_written(version: Version) -> str | None:
    """The version as a caller writes it: cursors and ETags are bound to it."""
    return None if version is None else str(version)


def check_measure(measure: str, weights: str | None) -> dict[str, float] | None:
    """Check a ranking's measure: the composite's weights, or None for a plain measure.

    Raises InvalidParameter (field ``measure`` or ``weights``) saying what to ask instead.
    """
    if measure == "composite":
        if not weights:
            raise InvalidParameter("measure=composite needs weights, e.g. weights=pagerank:0.5,degree:0.5",
                                   field="weights")
        try:
            return R.parse_weights(weights, RANKED)
        except ValueError as exc:
            raise InvalidParameter(str(exc), field="weights") from exc
    if measure in R.LABEL_MEASURES:
        raise InvalidParameter(f"{measure} is a label, not a score: see GET /v1/graphs/{{graph_id}}/communities, "
                               "or filter a ranking with community=", field="measure", value=measure)
    if measure not in MEASURES:
        raise InvalidParameter(f"unknown measure {measure!r}; expected one of {', '.join(RANKED)}, or composite",
                               field="measure", value=measure, expected=[*RANKED, "composite"])
    if weights:
        raise InvalidParameter("weights apply to measure=composite only", field="weights")
    return None


def read_cursor(cursor: str | None, query: str) -> tuple[str | None, int, str | None]:
    """(pinned result id, position, version id shown) of a cursor issued for this query
    (``query``: its digest); (None, 0, None) without one."""
    if cursor is None:
        return None, 0, None
    try:
        pinned, position, issued_for, nodes_id = R.decode_cursor(cursor)
    except ValueError as exc:
        raise InvalidParameter(str(exc), field="cursor") from exc
    if issued_for != query[:16]:
        raise InvalidParameter("the cursor belongs to another query; repeat that query's parameters",
                               field="cursor")
    return pinned, position, nodes_id


@dataclass(frozen=True)
class ScoresResult:
    """A scores result, and the version whose people it is shown for.

    ``version``/``version_id`` is that version; ``scores_version`` the one the
    job ran on: the same, or an earlier version with the same edge content.
    """

    job_id: str
    version: int
    version_id: str
    etag: str
    created_at: datetime
    manifest: dict[str, Any]
    data: dict[str, Any]
    scores_version: int

    @property
    def reused(self) -> bool:
        return self.scores_version != self.version

    def cursor_nodes(self) -> str | None:
        """The version id a cursor must carry (None when it is the result's own)."""
        return self.version_id if self.reused else None

    def ranked(self) -> list[str]:
        """The ranked measures of the result, in the order it lists them."""
        return [m for m in self.data.get("measures", {}) if R.key("score", m) in self.manifest]

    def has(self, name: str) -> bool:
        return name in self.manifest

    def array(self, db: Session, name: str) -> NDArray[Any]:
        arr: NDArray[Any] = R.cached(("array", self.job_id, name),
                                     lambda: result_repo.get_result_array(db, self.job_id, name, self.manifest))
        return arr


def _uses_attributes(params: dict[str, Any] | None) -> bool:
    """A scores job whose result depends on node attributes (PageRank jumping by an attribute)."""
    personalization = (params or {}).get("personalization") or {}
    return bool(personalization.get("attribute"))


def _data(db: Session, job_id: str) -> dict[str, Any]:
    data: dict[str, Any] = R.cached(("data", job_id), lambda: result_repo.get_result_data(db, job_id))
    return data


def _found(db: Session, row: result_repo.ResultRow, version: int, version_id: str) -> ScoresResult:
    return ScoresResult(row.job_id, version, version_id, row.etag, row.created_at, row.manifest,
                        _data(db, row.job_id), row.version)


def _earlier(db: Session, tenant: str, graph_id: str, target: GraphVersion, need: Sequence[str]) -> ScoresResult | None:
    """The newest usable result of an earlier version whose edges equal ``target``'s."""
    numbers = graph_repo.list_same_edges(db, target)
    if not numbers:
        return None
    for row in result_repo.find_succeeded_results(db, tenant, graph_id, KIND, versions=numbers):
        if all(n in row.manifest for n in need) and not _uses_attributes(row.params):
            return _found(db, row, target.number, target.id)
    return None


def _shown_version(db: Session, graph_id: str, nodes_id: str, scores_version_id: str) -> GraphVersion:
    """The version a reusing cursor names, checked to have the result's edges."""
    shown, own = graph_repo.find_version(db, nodes_id), graph_repo.find_version(db, scores_version_id)
    if (shown is None or own is None or shown.graph_id != graph_id or shown.edges_digest is None
            or shown.edges_digest != own.edges_digest):
        raise NotFound("the cursor's version no longer exists; start again without a cursor",
                       resource="version", id=nodes_id)
    return shown


def find_scores_result(
    db: Session, tenant: str, graph_id: str, version: int | None, need: Sequence[str], *,
    result_id: str | None = None, nodes_id: str | None = None, what: Sequence[str] = (),
) -> ScoresResult:
    """The newest succeeded scores result of the version holding every array in ``need``,
    else of the newest earlier version with the same edges (see the module notes).

    ``result_id``/``nodes_id``: a cursor's pinned result and, when it reused an
    earlier result, the version it showed. ``what``: the measures asked for,
    named in the answer when there is no such result.

    Raises
    ------
    NotFound
        The graph, the version, or a cursor's result or version is gone.
    ResultNotReady
        No scores job has produced what is needed; the message says how to run one.
    """
    rows = result_repo.find_succeeded_results(db, tenant, graph_id, KIND, job_id=result_id, version=version)
    for row in rows:
        if all(n in row.manifest for n in need):
            if nodes_id is not None and nodes_id != row.version_id:
                shown = _shown_version(db, graph_id, nodes_id, row.version_id)
                return _found(db, row, shown.number, shown.id)
            return _found(db, row, row.version, row.version_id)
    graph = graph_repo.get_graph(db, tenant, graph_id)
    if result_id is not None:
        raise NotFound("the cursor's scores result no longer exists; start again without a cursor",
                       resource="result", id=result_id)
    target = graph_repo.get_version(db, graph, version)
    reused = _earlier(db, tenant, graph_id, target, need)
    if reused is not None:
        return reused
    number = target.number
    params = f', "params": {{"measures": {json.dumps(list(what))}}}' if what else ""
    raise ResultNotReady(
        f"no succeeded scores job on version {number} of this graph has "
        f"{'measure(s) ' + ', '.join(what) if what else 'a result'}; run one: POST /v1/graphs/{graph_id}/jobs "
        f'with {{"kind": "scores", "version": {number}{params}}}',
        graph_id=graph_id, version=number,
    )


def node_table(db: Session, version_id: str) -> R.NodeTable:
    """Ids, segments, consent and labels of a version (no edges), cached per version."""
    def build() -> R.NodeTable:
        v = graph_repo.find_version(db, version_id)
        if v is None:
            raise NotFound("version not found", resource="version", id=version_id)
        man = v.manifest
        a = graph_repo.get_version_arrays(db, v, ["ids", "segment", "consent", "extra"])
        n = int(man["n"])
        extra = json.loads(a["extra"].tobytes()) if "extra" in a else {}
        consent = np.asarray(a["consent"], dtype=np.int8)
        contactable = consent == 1 if man.get("has_consent_data") else np.ones(n, dtype=bool)
        return R.NodeTable(decode_strings(a["ids"], n), np.asarray(a["segment"]), tuple(man["segment_labels"]),
                           consent, contactable, extra.get("label"))

    table: R.NodeTable = R.cached(("nodes", version_id), build)
    return table
