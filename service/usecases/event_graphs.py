"""Graphs from event tables: an upload of (person, event) rows becomes a version whose edges
are the table's projection onto people (and its backbone), and the ``project_events`` job
that does the same for a large table or with other settings.

The events are kept with the version as named arrays (``events.person``, ``events.event``,
optional ``events.weight`` and ``events.time``, and the event ids), so ``mode=append`` adds
rows and recomputes, and a job can project them again. A table of more than
:data:`JOB_ROWS` rows is stored at once as a version with the events and no ties yet, and a
``project_events`` job is queued in the same transaction; its result names the version it
wrote. Smaller tables are projected during the upload.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import asdict, dataclass, field
from datetime import datetime, timezone
from pathlib import Path
from typing import TYPE_CHECKING, Any, Literal

import numpy as np
from numpy.typing import NDArray

from service import intake
from service.analytics._chunks import thread_count
from service.analytics.errors import InvalidParameter
from service.analytics.graph import GraphArrays, NodeAttributes
from service.analytics.structure.summary import graph_summary
from service.intake import merge
from service.intake.dialect import open_csv
from service.intake.events import EventColumns, read_events_csv, read_events_json, read_events_ndjson
from service.usecases.event_projection import EventArrays, ProjectionParams, project, resolve_settings
from service.usecases.loading import LoadedVersion, load_version, version_arrays
from service.usecases.outcome import Computed, Progress
from service.usecases.uploads import BuiltVersion, Uploaded, _extend_attrs, _has_attributes, replay_of_upload
from storage.arrays import decode_strings, encode_strings
from storage.db import write_session
from storage.repo import graphs as graph_repo
from storage.repo import idempotency as idem_repo
from storage.repo import jobs as job_repo

if TYPE_CHECKING:
    from sqlalchemy.orm import Session, sessionmaker

    from storage.models import Graph, GraphVersion

__all__ = ["JOB_ROWS", "EventUploadOptions", "ProjectEventsParams", "upload_events",
           "project_stored_events"]

# Above this many rows the projection runs as a job. Grouping and projecting a million rows
# with small events takes about a second on one core (tests/bench/bench_events.py), the
# backbone as long again: past that an upload request would wait too long for its answer.
JOB_ROWS = 1_000_000
EVENT_ARRAYS = ("events.person", "events.event", "events.weight", "events.time", "events.ids")


@dataclass(frozen=True)
class EventUploadOptions:
    """An events upload: format, mode, columns and the projection settings the request names."""

    fmt: str
    mode: Literal["replace", "append", "remove"]  # remove is refused: events are replaced or added
    columns: EventColumns = field(default_factory=EventColumns)
    settings: dict[str, Any] = field(default_factory=dict)
    delimiter: str | None = None
    charset: str | None = None


class ProjectEventsParams(ProjectionParams):
    """Project a version's stored events again (settings left out keep the version's)."""


@dataclass(frozen=True)
class _Stored:
    table: EventArrays
    event_ids: list[str]
    settings: dict[str, Any]
    source_version: int


def _stored_events(db: Session, graph: Graph, version: GraphVersion) -> _Stored | None:
    """The events a version was made from (kept in it or in the version it names), or None."""
    origin = version.origin or {}
    if origin.get("part") != "events":
        return None
    holder = version
    if "events.person" not in version.manifest.get("arrays", {}):
        holder = graph_repo.get_version(db, graph, int(origin["events_version"]))
    man = holder.manifest
    a = graph_repo.get_version_arrays(db, holder, [n for n in EVENT_ARRAYS if n in man["arrays"]])
    n_events = int(man["event_count"])
    table = EventArrays(a["events.person"], a["events.event"], a.get("events.weight"), a.get("events.time"),
                        int(version.manifest["n"]), n_events)
    return _Stored(table, decode_strings(a["events.ids"], n_events), dict(origin.get("settings", {})),
                   holder.number)


def _read(path: Path, options: EventUploadOptions, people: intake.Interner, events: intake.Interner,
          limits: intake.SizeLimits) -> tuple[Any, dict[str, str]]:
    with open(path, "rb") as fh:
        if options.fmt == "csv":
            source = open_csv(fh, charset=options.charset, delimiter=options.delimiter)
            # Arrow's reader takes the worker's threads; a transcoded body goes through the exact reader.
            threads = thread_count() if source.encoding == "utf-8" else 0
            rows = read_events_csv(source.fh, people, events, columns=options.columns, limits=limits,
                                   delimiter=source.delimiter, threads=threads)
            return rows, {"encoding": source.encoding, "delimiter": source.delimiter_name}
        if options.fmt in ("ndjson", "json"):
            reader = read_events_ndjson if options.fmt == "ndjson" else read_events_json
            return reader(fh, people, events, columns=options.columns, limits=limits), {}
    raise InvalidParameter("event tables are read from CSV, NDJSON or JSON, not GraphML", field="Content-Type")


def _build(path: Path, options: EventUploadOptions, *, directed: bool, previous: LoadedVersion | None,
           stored: _Stored | None, limits: intake.SizeLimits, job_rows: int) -> tuple[BuiltVersion, dict[str, Any] | None]:
    """The next version (and the job's params when the table is large); nothing is written."""
    if options.mode not in ("replace", "append"):
        raise InvalidParameter("an event table replaces the events (mode=replace) or adds to them "
                               "(mode=append); to remove people, upload their ids with part=nodes&mode=remove",
                               field="mode", value=options.mode)
    if options.mode == "append" and stored is None:
        raise InvalidParameter("mode=append adds events to a version built from events; this graph's newest "
                               "version is not: send the whole table with mode=replace", field="mode")
    # Stored ids are unique: their lookup maps are built only if the exact reader needs them.
    people = intake.Interner.trusted(previous.ids) if previous is not None else intake.Interner()
    events = intake.Interner.trusted(stored.event_ids) if options.mode == "append" and stored else intake.Interner()
    n_before = len(people)
    rows, read_as = _read(path, options, people, events, limits)
    person, event, weight, time = rows.person, rows.event, rows.weight, rows.time
    if options.mode == "append" and stored is not None:
        old = stored.table
        if (old.time is None) != (time is None):
            raise InvalidParameter("the stored events have times and these do not (or the reverse): send "
                                   "times for all rows or for none", field="time")
        person, event = np.concatenate([old.person, person]), np.concatenate([old.event, event])
        if weight is not None or old.weight is not None:
            weight = np.concatenate([old.weight if old.weight is not None else np.ones(old.rows),
                                     weight if weight is not None else np.ones(rows.records)])
        time = None if time is None or old.time is None else np.concatenate([old.time, time])
    settings = resolve_settings(options.settings, stored.settings if options.mode == "append" and stored else None)
    attrs = _extend_attrs(previous.attrs, len(people)) if previous is not None else None
    n, ids = len(people), people.ids
    # People of the previous version who are in no event and carry no attribute leave the graph.
    in_events = np.zeros(n, bool)
    in_events[person] = True
    drop = ~in_events & (~_has_attributes(attrs) if attrs is not None else True)
    drop[n_before:] = False
    if drop.any() and attrs is not None:
        new_index = np.cumsum(~drop) - 1
        person = new_index[person].astype(np.int32)
        attrs = merge.select_node_attributes(attrs, ~drop)
        ids = [i for i, gone in zip(ids, drop.tolist()) if not gone]
        n = len(ids)
    if attrs is None:
        attrs = NodeAttributes.empty(n)
    table = EventArrays(person, event, weight, time, n, len(events))
    origin = {"part": "events", "mode": options.mode, "format": options.fmt, "records": rows.records,
              "based_on": previous.number if previous is not None else None, "settings": _plain(settings)}
    job = None
    if table.rows > job_rows:
        graph = GraphArrays(n, directed, np.empty(0, np.int32), np.empty(0, np.int32), np.empty(0), None)
        job = _plain(settings)
        summary: dict[str, Any] = {**graph_summary(graph), **read_as, "warnings": [],
                                   "projection": {"state": "queued", "rows": table.rows, "events": len(events)}}
    else:
        made = project(table, settings, directed=directed)
        graph = made.graph
        summary = {**graph_summary(graph), **read_as, "warnings": [], "projection": made.projection,
                   "backbone": made.backbone}
    arrays, manifest = version_arrays(graph, ids, attrs)
    arrays.update(_event_arrays(table, events.ids))
    manifest["event_count"] = len(events)
    return BuiltVersion(arrays, manifest, summary, origin, graph.n, graph.m), job


def _plain(settings: Any) -> dict[str, Any]:
    return asdict(settings)


def _event_arrays(table: EventArrays, event_ids: list[str]) -> dict[str, NDArray[Any]]:
    out: dict[str, NDArray[Any]] = {"events.person": table.person.astype(np.int32, copy=False),
                                    "events.event": table.event.astype(np.int32, copy=False),
                                    "events.ids": encode_strings(event_ids)}
    if table.weight is not None:
        out["events.weight"] = table.weight
    if table.time is not None:
        out["events.time"] = table.time
    return out


def upload_events(maker: sessionmaker[Session], tenant: str, graph_id: str, path: Path,
                  options: EventUploadOptions, *, limits: intake.SizeLimits,
                  render: Callable[[Graph, GraphVersion], dict[str, Any]], idempotency_key: str | None = None,
                  request_hash: str = "", route: str = "", max_attempts: int = 3,
                  job_rows: int | None = None) -> Uploaded:
    """Read an event table, build the next version from it and store it (with its job when large).

    Bad input raises the intake and analytics errors before anything is written.
    """
    def replay_of(db: Session) -> Uploaded | None:
        return replay_of_upload(db, tenant, idempotency_key, route, request_hash)

    with maker() as db:
        g = graph_repo.get_graph(db, tenant, graph_id)
        earlier = replay_of(db)
        if earlier is not None:
            return earlier
        based_on, directed = g.latest_version, g.directed
        previous = stored = None
        if based_on:
            latest = graph_repo.get_version(db, g)
            previous = load_version(db, latest)
            stored = _stored_events(db, g, latest)
    made, job_params = _build(path, options, directed=directed, previous=previous, stored=stored, limits=limits,
                              job_rows=JOB_ROWS if job_rows is None else job_rows)
    with write_session(maker) as db:
        g = graph_repo.get_graph(db, tenant, graph_id)
        earlier = replay_of(db)
        if earlier is not None:
            return earlier
        if job_params is not None:
            job, _ = job_repo.add_job(db, tenant_id=tenant, graph_id=g.id, version=based_on + 1,
                                      kind="project_events", params=job_params,
                                      now=datetime.now(timezone.utc), max_attempts=max_attempts)
            made.summary["projection"]["job_id"] = job.id
        version = graph_repo.add_version(db, g, based_on=based_on, arrays=made.arrays,
                                         manifest_extra=made.manifest, summary=made.summary, origin=made.origin,
                                         nodes=made.nodes, edges=made.edges)
        body = render(g, version)
        location = f"/v1/graphs/{g.id}/versions/{version.number}"
        if idempotency_key:
            idem_repo.add_record(db, tenant_id=tenant, key=idempotency_key, route=route, request_hash=request_hash,
                                 status_code=201, body=body, location=location)
        db.commit()
        return Uploaded(201, body, location)


def project_stored_events(maker: sessionmaker[Session], tenant: str, graph_id: str, number: int,
                          params: ProjectEventsParams, *, progress: Progress, job_id: str | None = None) -> Computed:
    """Project the events stored with version ``number`` and store the ties as the next version.

    The new version is numbered ``number + 1``: if another version was added meanwhile the
    job fails with a conflict rather than build on top of it. The version records ``job_id``,
    so a retry of a job that stored its version but not its result (the worker was stopped in
    between) answers with that version instead of a conflict.
    """
    with maker() as db:
        g = graph_repo.get_graph(db, tenant, graph_id)
        if job_id is not None and g.latest_version > number:
            written = graph_repo.get_version(db, g, number + 1)
            if (written.origin or {}).get("job_id") == job_id:
                return Computed(data={"version_created": written.number, "nodes": written.nodes,
                                      "edges": written.edges,
                                      "projection": written.summary["projection"],
                                      "backbone": written.summary["backbone"]})
        version = graph_repo.get_version(db, g, number)
        stored = _stored_events(db, g, version)
        if stored is None:
            raise InvalidParameter(f"version {number} was not built from an event table: upload one with "
                                   "part=events first", field="version", value=number)
        loaded = load_version(db, version)
        directed = g.directed
    settings = resolve_settings(params.model_dump(), stored.settings)
    progress(0.05, "projecting events")
    made = project(stored.table, settings, directed=directed, progress=progress)
    arrays, manifest = version_arrays(made.graph, loaded.ids, loaded.attrs)
    summary = {**graph_summary(made.graph), "warnings": [], "projection": made.projection,
               "backbone": made.backbone}
    origin = {"part": "events", "mode": "project", "based_on": number, "events_version": stored.source_version,
              "records": stored.table.rows, "settings": _plain(settings)}
    if job_id is not None:
        origin["job_id"] = job_id
    progress(0.95, "storing the new version")
    with write_session(maker) as db:
        g = graph_repo.get_graph(db, tenant, graph_id)
        new = graph_repo.add_version(db, g, based_on=number, arrays=arrays, manifest_extra=manifest,
                                     summary=summary, origin=origin, nodes=made.graph.n, edges=made.graph.m)
        created = new.number
        db.commit()
    return Computed(data={"version_created": created, "nodes": made.graph.n, "edges": made.graph.m,
                          "projection": made.projection, "backbone": made.backbone})
