"""Turn a spooled upload plus the previous version into the next version's arrays.

The HTTP layer spools the body to disk and calls :func:`build_version` in a
worker thread; this module reads the file with :mod:`service.intake`, applies
the upload's mode to the previous version (replace, append or remove), and
summarises the result. Nothing is written here: the caller stores the arrays
in one transaction, so a rejected upload leaves no trace.

Modes
-----
``part=edges``
    ``replace``: the file is the whole edge set; nodes that only appear in the
    previous version's attribute data are kept (as isolated people) with their
    attributes, the others disappear with their edges. ``append``: the file's
    edges are added; duplicates merged by ``duplicates`` (``sum`` adds new
    interactions to old ones). ``remove``: the file's edges are deleted; ids the
    graph does not know are ignored and counted.
``part=nodes``
    ``replace``: the file's attributes replace all node attributes; new ids
    become isolated nodes. ``append``: the file's columns overwrite those
    nodes' values, other attributes are kept. ``remove``: the listed people
    are removed with all their edges (erasure).
"""

from __future__ import annotations

from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any, Literal, TypedDict

import numpy as np
from numpy.typing import NDArray

from service import intake
from service.analytics.errors import EmptyGraph
from service.analytics.graph import GraphArrays, NodeAttributes
from service.analytics.structure.summary import graph_summary
from service.usecases import _upload_report as upload_report
from service.intake import merge
from service.intake.dialect import open_csv
from service.intake.tables import F64, I32, ExtraColumns, Fold
from service.usecases.loading import LoadedVersion, load_version, version_arrays
from storage.db import write_session
from storage.repo import graphs as graph_repo
from storage.repo import idempotency as idem_repo

if TYPE_CHECKING:
    from sqlalchemy.orm import Session, sessionmaker

    from storage.models import Graph, GraphVersion

__all__ = ["UploadOptions", "BuiltVersion", "Uploaded", "build_version", "replay_of_upload", "upload_version"]


@dataclass(frozen=True)
class UploadOptions:
    fmt: str
    part: str
    mode: Literal["replace", "append", "remove"]
    duplicates: merge.MergeRule = "sum"
    source: str = "source"
    target: str = "target"
    weight: str | None = None
    probability: str | None = None
    id: str = "id"
    extra_columns: ExtraColumns = "error"
    delimiter: str | None = None  # CSV: None detects it from the first lines
    charset: str | None = None  # CSV: the Content-Type's charset parameter


class _EdgeReadOptions(TypedDict):
    """The keyword arguments every edge reader takes."""

    source: str
    target: str
    weight: str | None
    probability: str | None
    allow_self_loops: bool
    extra_columns: ExtraColumns
    limits: intake.SizeLimits | None
    fold: Fold | None


@dataclass
class BuiltVersion:
    arrays: dict[str, NDArray[Any]]
    manifest: dict[str, Any]
    summary: dict[str, Any]
    origin: dict[str, Any]
    nodes: int
    edges: int
    stats: dict[str, Any] = field(default_factory=dict)
    edges_digest: str | None = None


def build_version(
    path: Path,
    options: UploadOptions,
    *,
    directed: bool,
    allow_self_loops: bool,
    previous: LoadedVersion | None,
    limits: intake.SizeLimits | None = None,
) -> BuiltVersion:
    """Read ``path`` and apply it to ``previous``; raise intake/analytics errors on bad input.

    ``limits`` bounds ids, labels and values (the service's settings; the
    readers' defaults when None). Edge readers merge repeated edges by the
    upload's rule as they read, so memory follows the distinct edges.
    """
    if previous is None and options.mode == "remove":
        raise intake.UploadError("the graph has no version to remove from yet")
    interner = intake.Interner.from_ids(previous.ids) if previous is not None else intake.Interner()
    n_before = len(interner.ids)
    edge_opts = _EdgeReadOptions(
        source=options.source,
        target=options.target,
        weight=options.weight,
        probability=options.probability,
        allow_self_loops=allow_self_loops,
        extra_columns=options.extra_columns,
        limits=limits,
        fold=_folder(directed, options.duplicates),
    )
    edges: intake.EdgeTable | None = None
    nodes: intake.NodeTable | None = None
    read_as: dict[str, str] = {}
    with open(path, "rb") as fh, _column_hints(options):
        if options.fmt == "csv":
            source = open_csv(fh, charset=options.charset, delimiter=options.delimiter)
            read_as = {"encoding": source.encoding, "delimiter": source.delimiter_name}
            try:
                if options.part == "edges":
                    edges = intake.read_edges_csv(source.fh, interner, **edge_opts, delimiter=source.delimiter)
                else:
                    nodes = intake.read_nodes_csv(
                        source.fh, interner, id=options.id, limits=limits, delimiter=source.delimiter
                    )
            except intake.InvalidEncoding as exc:
                if source.encoding != "utf-8" or options.charset is not None:
                    raise
                # Not UTF-8 after all, past the prefix that was checked: name the encoding.
                raise intake.explain_not_utf8(fh, exc.line) from None
        elif options.fmt == "graphml":
            edges, nodes = intake.read_graphml(
                fh,
                interner,
                weight=options.weight,
                probability=options.probability,
                allow_self_loops=allow_self_loops,
                extra_columns=options.extra_columns,
                limits=limits,
                fold=edge_opts["fold"],
            )
        elif options.part == "edges":
            reader = {
                "ndjson": intake.read_edges_ndjson,
                "json": intake.read_edges_json,
            }[options.fmt]
            edges = reader(fh, interner, **edge_opts)
        else:
            reader_n = {
                "ndjson": intake.read_nodes_ndjson,
                "json": intake.read_nodes_json,
            }[options.fmt]
            nodes = reader_n(fh, interner, id=options.id, limits=limits)

    stats: dict[str, Any] = {}
    had_edges = edges is not None
    records = (edges.records if edges is not None else 0) + (nodes.records if nodes is not None else 0)
    prev_graph = previous.graph if previous is not None else _empty_graph(directed)
    prev_attrs = previous.attrs if previous is not None else None
    remove_edges = edges is not None and options.mode == "remove" and previous is not None
    # A removal never adds people: ids the graph does not know only count as not found.
    n = n_before if remove_edges or (options.part == "nodes" and options.mode == "remove") else len(interner.ids)
    ids = interner.ids[:n]
    del interner  # its id -> index dict is not needed past reading

    # Records the reader already merged into an earlier record of the same edge.
    records_folded = edges.records - edges.m if edges is not None else 0

    # 1. Edges.
    if edges is not None and (options.mode == "replace" or previous is None):
        src, dst, w, p, merged = merge.merge_duplicates(
            edges.src, edges.dst, edges.weight, edges.probability, directed=directed, rule=options.duplicates,
            overwrite_input=True,  # the table is ours and dropped next: sort its arrays in place
        )
        stats["duplicates_merged"] = int(merged) + records_folded
        edges = None  # the merged arrays replace the table: free it before the summary
        graph = GraphArrays(n, directed, src, dst, w, p)
    elif edges is not None and options.mode != "replace":  # always true here; narrows the mode
        base = GraphArrays(n_before, directed, prev_graph.src, prev_graph.dst, prev_graph.weight, prev_graph.probability)
        graph, delta = merge.apply_edge_delta(base, edges, n, mode=options.mode, rule=options.duplicates)
        stats.update({k: v for k, v in asdict(delta).items() if k in ("added", "merged", "removed", "not_found")})
    else:
        graph = GraphArrays(n, directed, prev_graph.src, prev_graph.dst, prev_graph.weight, prev_graph.probability)

    # 2. Node attributes, aligned with the (possibly grown) node set.
    if nodes is not None and options.mode != "remove":
        node_mode: Literal["replace", "append"] = (
            "replace" if (options.part == "nodes" and options.mode == "replace") else "append"
        )
        attrs = merge.merge_node_table(prev_attrs, nodes, n, mode=node_mode)
    else:
        attrs = _extend_attrs(prev_attrs if prev_attrs is not None else NodeAttributes.empty(0), n)
    unknown_consent = upload_report.newly_unknown_consent(attrs, prev_attrs, n_before)

    # 3. Nodes that leave the graph.
    drop = np.zeros(n, dtype=bool)
    if options.part == "nodes" and options.mode == "remove" and nodes is not None:
        known = nodes.index[nodes.index < n_before]
        drop[known] = True
        stats["nodes_removed"] = int(drop.sum())
        stats["not_found"] = int(len(nodes.index) - len(known))
    elif had_edges and options.mode == "replace" and previous is not None:
        touched = np.zeros(n, dtype=bool)
        touched[graph.src] = True
        touched[graph.dst] = True
        drop = ~touched & ~_has_attributes(attrs)
        drop[n_before:] = False
    if drop.any():
        graph, _ = merge.remove_nodes(graph, drop)
        attrs = merge.select_node_attributes(attrs, ~drop)
        ids = [ident for ident, gone in zip(ids, drop.tolist()) if not gone]
    if graph.n == 0:
        raise EmptyGraph("the upload leaves the graph with no nodes", field="body")

    warnings: list[dict[str, Any]] = []
    if nodes is not None and options.part == "nodes" and options.mode != "remove":
        alone = upload_report.ids_without_edges(graph, ids, nodes.index)
        if alone is not None:
            warnings.append(alone)
    if unknown_consent is not None:
        lost = upload_report.unknown_consent(unknown_consent[~drop], ids)
        if lost is not None:
            warnings.append(lost)
    summary = {**graph_summary(graph), **read_as, "warnings": warnings}
    arrays, manifest = version_arrays(graph, ids, attrs)
    origin = {
        "part": options.part,
        "mode": options.mode,
        "format": options.fmt,
        "duplicates": options.duplicates,
        "records": int(records),
        "based_on": previous.number if previous is not None else None,
        **stats,
    }
    digest = upload_report.edge_digest(graph, ids)
    return BuiltVersion(arrays, manifest, summary, origin, graph.n, graph.m, stats, digest)


@contextmanager
def _column_hints(options: UploadOptions) -> Iterator[None]:
    """Complete a header error with the columns the header probably means."""
    try:
        yield
    except (intake.MissingColumn, intake.UnknownColumn) as exc:
        asked: dict[str, str | None] = (
            {"id": options.id} if options.part == "nodes" and options.fmt != "graphml" else
            {"source": options.source, "target": options.target, "weight": options.weight,
             "probability": options.probability}
        )
        upload_report.add_column_hint(exc, part=options.part, asked=asked, extra_columns=options.extra_columns)
        raise


def _folder(directed: bool, rule: merge.MergeRule) -> Fold:
    """The readers' fold: merge repeated edges by the upload's rule, in the reader's buffers."""

    def fold(src: I32, dst: I32, weight: F64, probability: F64 | None) -> tuple[I32, I32, F64, F64 | None]:
        s, d, w, p, _ = merge.merge_duplicates(
            src, dst, weight, probability, directed=directed, rule=rule, overwrite_input=True
        )
        return s, d, w, p

    return fold


def _empty_graph(directed: bool) -> GraphArrays:
    return GraphArrays(0, directed, np.empty(0, np.int32), np.empty(0, np.int32), np.empty(0), None)


def _extend_attrs(a: NodeAttributes, n: int) -> NodeAttributes:
    extra_n = n - a.n
    if extra_n <= 0:
        return a
    pad = NodeAttributes.empty(extra_n)
    return NodeAttributes(
        n=n,
        segment=np.concatenate((a.segment, pad.segment)),
        segment_labels=a.segment_labels,
        region=np.concatenate((a.region, pad.region)),
        region_labels=a.region_labels,
        consent=np.concatenate((a.consent, pad.consent)),
        cost=np.concatenate((a.cost, pad.cost)),
        value=np.concatenate((a.value, pad.value)),
        has_consent_data=a.has_consent_data,
        extra={k: list(v) + [None] * extra_n for k, v in a.extra.items()},
    )


def _has_attributes(a: NodeAttributes) -> NDArray[np.bool_]:
    has = (a.segment >= 0) | (a.region >= 0) | (a.consent >= 0) | ~np.isnan(a.cost) | ~np.isnan(a.value)
    for col in a.extra.values():
        has |= np.array([v is not None for v in col], dtype=bool)
    return np.asarray(has)


# -- an upload becomes a version ------------------------------------------------------------


@dataclass(frozen=True)
class Uploaded:
    """The answer to an upload: status, the rendered version, its location (or a replay of them)."""

    status_code: int
    body: dict[str, Any]
    location: str


def replay_of_upload(db: Session, tenant: str, idempotency_key: str | None, route: str,
                     request_hash: str) -> Uploaded | None:
    """What an earlier upload with this idempotency key answered (None: no key, or no such upload)."""
    if not idempotency_key:
        return None
    replay = idem_repo.get_replay(db, tenant, idempotency_key, route, request_hash)
    return None if replay is None else Uploaded(replay.status_code, replay.body, replay.location or "")


def upload_version(
    maker: sessionmaker[Session],
    tenant: str,
    graph_id: str,
    path: Path,
    options: UploadOptions,
    *,
    limits: intake.SizeLimits,
    render: Callable[[Graph, GraphVersion], dict[str, Any]],
    idempotency_key: str | None = None,
    request_hash: str = "",
    route: str = "",
) -> Uploaded:
    """Build the next version of a graph from a spooled upload and store it.

    The file is read (and the new version built) outside any write transaction,
    then written in one short ``BEGIN IMMEDIATE`` transaction: on SQLite a deferred
    transaction that reads first and writes later fails with "database is locked"
    when another writer got in between. The compare-and-set in ``add_version`` turns
    a concurrent upload into a clean 409 instead. With an idempotency key, a repeat
    of the same request answers what the first one did.
    """
    def replay_of(db: Session) -> Uploaded | None:
        return replay_of_upload(db, tenant, idempotency_key, route, request_hash)

    with maker() as db:
        g = graph_repo.get_graph(db, tenant, graph_id)
        earlier = replay_of(db)
        if earlier is not None:
            return earlier
        based_on = g.latest_version
        directed, self_loops = g.directed, g.allow_self_loops
        previous = load_version(db, graph_repo.get_version(db, g)) if based_on else None
    made = build_version(path, options, directed=directed, allow_self_loops=self_loops, previous=previous,
                         limits=limits)
    with write_session(maker) as db:
        g = graph_repo.get_graph(db, tenant, graph_id)
        earlier = replay_of(db)
        if earlier is not None:
            return earlier
        version = graph_repo.add_version(
            db, g, based_on=based_on, arrays=made.arrays, manifest_extra=made.manifest, summary=made.summary,
            origin=made.origin, nodes=made.nodes, edges=made.edges, edges_digest=made.edges_digest,
        )
        body = render(g, version)
        location = f"/v1/graphs/{g.id}/versions/{version.number}"
        if idempotency_key:
            idem_repo.add_record(db, tenant_id=tenant, key=idempotency_key, route=route, request_hash=request_hash,
                                 status_code=201, body=body, location=location)
        db.commit()
        return Uploaded(201, body, location)
