"""Past campaigns of a graph: create, read, list, delete, and upload their logs once.

A campaign's log (who was contacted first, who adopted, when) is checked
against one version of the graph when it is uploaded: people the version
does not know are counted and the first 20 listed in the warnings, as are
times before the campaign's start, duplicate adoptions and adoptions by
seeds. A log that mentions no seeds, holds only one person, has an adopter
before the first seed was contacted, or whose people are mostly unknown to
the version is refused and nothing is stored. Once uploaded, a log never
changes; a campaign can be deleted (erasure).

:func:`campaigns_on_version` turns stored logs into the engine's
:class:`~service.analytics.learning.Campaign` rounds over a version's people,
for learning and backtests.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path
from typing import Any, Literal

import numpy as np
from pydantic import AwareDatetime, BaseModel, ConfigDict, Field
from sqlalchemy.orm import Session, sessionmaker

from service.analytics.errors import InvalidParameter
from service.analytics.learning import Campaign as Episode
from service.analytics.learning import bucket_rounds
from service.intake import SizeLimits
from service.intake.campaign_log import LogRow, read_campaign_log
from service.usecases.loading import LoadedVersion, load_version, version_origin
from storage.db import write_session
from storage.errors import Conflict, NotFound
from storage.models import Campaign
from storage.repo import campaigns as campaign_repo
from storage.repo import graphs as graph_repo
from storage.repo import idempotency as idem_repo

__all__ = [
    "CampaignCreate",
    "CampaignRead",
    "CampaignList",
    "LogUpload",
    "create_campaign",
    "read_campaign",
    "list_campaigns",
    "delete_campaign",
    "upload_campaign_log",
    "campaigns_on_version",
    "episodes_of",
    "MAX_LISTED",
]

MAX_LISTED = 20  # unknown people listed by id in a warning
ALREADY_UPLOADED = ("this campaign's log was already uploaded and cannot change; create a new "
                    "campaign for a corrected log (and delete this one)")
UNKNOWN_REFUSED = 0.5  # a log whose people are more than this share unknown is refused


class CampaignCreate(BaseModel):
    """A past campaign, before its log is uploaded."""

    model_config = ConfigDict(extra="forbid")

    name: str = Field(min_length=1, max_length=200, description="What the campaign was called.")
    started_at: AwareDatetime = Field(description="When the first people were contacted (with a time zone).")
    channel: str | None = Field(default=None, max_length=200, description="How it was sent (email, SMS...).")
    notes: str | None = Field(default=None, max_length=5000)


class CampaignRead(BaseModel):
    """A past campaign and, once uploaded, what its log holds."""

    id: str
    graph_id: str
    name: str
    started_at: datetime
    channel: str | None
    notes: str | None
    created_at: datetime
    uploaded_at: datetime | None = Field(description="When the log was uploaded; null: not yet.")
    version: int | None = Field(description="The graph version the log was checked against.")
    log: dict[str, Any] | None = Field(
        description="people, seeds, adopters, timing (time or round), unknown (people the version "
        "does not know: count and the first 20 ids), last_adoption_hours or last_round; null before upload.")
    warnings: list[dict[str, Any]] = Field(
        default_factory=list, description="What was found in the log: {code, message, count, ids}.")


class CampaignList(BaseModel):
    items: list[CampaignRead]


@dataclass(frozen=True)
class LogUpload:
    """A spooled log body and how to read it."""

    path: Path
    fmt: Literal["csv", "ndjson", "json"]
    charset: str | None
    version: int | None
    sha256: str


def campaign_read(row: Campaign) -> CampaignRead:
    report = dict(row.report or {})
    warnings = report.pop("warnings", [])
    return CampaignRead(
        id=row.id, graph_id=row.graph_id, name=row.name, started_at=row.started_at,
        channel=row.channel, notes=row.notes, created_at=row.created_at,
        uploaded_at=row.uploaded_at, version=row.version, log=report or None, warnings=warnings)


def create_campaign(db: Session, tenant: str, graph_id: str, spec: CampaignCreate, *,
                    idempotency_key: str | None = None, request_hash: str = "") -> CampaignRead:
    """Store a new campaign (no log yet); a repeated idempotency key answers the first one."""
    graph_repo.get_graph(db, tenant, graph_id)
    route = f"POST /v1/graphs/{graph_id}/campaigns"
    if idempotency_key:
        replay = idem_repo.get_replay(db, tenant, idempotency_key, route, request_hash)
        if replay is not None:
            return CampaignRead.model_validate(replay.body)
    row = campaign_repo.add_campaign(db, tenant_id=tenant, graph_id=graph_id, name=spec.name,
                                     started_at=spec.started_at, channel=spec.channel, notes=spec.notes)
    out = campaign_read(row)
    if idempotency_key:
        idem_repo.add_record(db, tenant_id=tenant, key=idempotency_key, route=route,
                             request_hash=request_hash, status_code=201,
                             body=out.model_dump(mode="json"),
                             location=f"/v1/graphs/{graph_id}/campaigns/{row.id}")
    db.commit()
    return out


def read_campaign(db: Session, tenant: str, graph_id: str, campaign_id: str) -> CampaignRead:
    graph_repo.get_graph(db, tenant, graph_id)
    return campaign_read(campaign_repo.get_campaign(db, tenant, graph_id, campaign_id))


def list_campaigns(db: Session, tenant: str, graph_id: str) -> CampaignList:
    graph_repo.get_graph(db, tenant, graph_id)
    return CampaignList(items=[campaign_read(r) for r in campaign_repo.list_campaigns(db, tenant, graph_id)])


def delete_campaign(db: Session, tenant: str, graph_id: str, campaign_id: str) -> None:
    """Erase the campaign and its log (learned models already made keep their numbers)."""
    graph_repo.get_graph(db, tenant, graph_id)
    campaign_repo.delete_campaign(db, campaign_repo.get_campaign(db, tenant, graph_id, campaign_id))
    db.commit()


def upload_campaign_log(maker: sessionmaker[Session], tenant: str, graph_id: str, campaign_id: str,
                        upload: LogUpload, *, limits: SizeLimits) -> CampaignRead:
    """Read, check and store a campaign's log once (see the module docstring for the checks).

    Sending the same file again answers what the first upload did (a retried PUT).

    Raises
    ------
    NotFound
        No such graph or campaign for this tenant.
    Conflict
        The log was already uploaded.
    UploadError, InvalidParameter
        A malformed or unusable log (a 422 naming what is wrong); nothing is stored.
    """
    with maker() as db:
        graph = graph_repo.get_graph(db, tenant, graph_id)
        row = campaign_repo.get_campaign(db, tenant, graph_id, campaign_id)
        if row.uploaded_at is not None:  # the same file again answers as the first time
            if (row.report or {}).get("file_sha256") == upload.sha256:
                return campaign_read(row)
            raise Conflict(ALREADY_UPLOADED, resource="campaign", id=row.id)
        if graph.latest_version < 1:
            raise InvalidParameter("the graph has no versions yet; upload its edges first",
                                   field="version")
        try:
            ver = graph_repo.get_version(db, graph, upload.version)
        except NotFound as exc:
            raise InvalidParameter(f"version {upload.version} does not exist; the newest is "
                                   f"{graph.latest_version}", field="version",
                                   value=upload.version) from exc
        loaded = load_version(db, ver)
        started = row.started_at
    with upload.path.open("rb") as fh:
        rows = read_campaign_log(fh, upload.fmt, started=started, charset=upload.charset, limits=limits)
    log, report = check_log(rows, loaded)
    report["file_sha256"] = upload.sha256
    with write_session(maker) as db:
        row = campaign_repo.get_campaign(db, tenant, graph_id, campaign_id)
        campaign_repo.add_campaign_log(db, row, log=log, report=report, version=ver.number,
                                       now=datetime.now(UTC))
        out = campaign_read(row)
        db.commit()
        return out


def check_log(rows: list[LogRow], version: LoadedVersion) -> tuple[list[list[Any]], dict[str, Any]]:
    """The rows to store (one per person, earliest first) and the report, or a 422."""
    timed = [r.time is not None for r in rows]
    if any(timed) and not all(timed):
        first = rows[timed.index(not timed[0])]
        raise InvalidParameter(
            f"line {first.line}: the log mixes times and rounds; give every row a time, or "
            "every row a round", field="log", line=first.line)
    by_time = all(timed)
    warnings: list[dict[str, Any]] = []
    seeds = {r.person for r in rows if r.role == "seed"}
    if not seeds:
        raise InvalidParameter("the log mentions no seeds: mark the people the campaign contacted "
                               "itself with role 'seed'", field="log")
    when = [float(r.time if r.time is not None else r.round or 0) for r in rows]
    first_seed = min(w for r, w in zip(rows, when) if r.role == "seed")
    for r, w in zip(rows, when):
        if r.role == "adopter" and r.person not in seeds and w < first_seed:
            raise InvalidParameter(
                f"line {r.line}: timestamps out of order: {r.person!r} adopted before the first "
                "seed was contacted; check the times (or mark them as a seed)", field="log",
                line=r.line, person=r.person)
    # One row per person: the seed row if any, otherwise the earliest adoption.
    keep: dict[str, tuple[LogRow, float]] = {}
    duplicates: list[str] = []
    by_seeds: list[str] = []
    for r, w in sorted(zip(rows, when), key=lambda x: (x[0].role != "seed", x[1], x[0].line)):
        if r.person in keep:
            (by_seeds if r.role == "adopter" and keep[r.person][0].role == "seed"
             and r.person not in by_seeds else duplicates).append(r.person)
            continue
        keep[r.person] = (r, w)
    index = version.index
    unknown = [p for p in keep if p not in index]
    known = len(keep) - len(unknown)
    if known < 2 or (len(keep) and len(unknown) / len(keep) > UNKNOWN_REFUSED):
        if len(keep) >= 2 and unknown:
            raise InvalidParameter(
                f"{len(unknown)} of the {len(keep)} people in the log are not in version "
                f"{version.number} of the graph (first: {', '.join(unknown[:5])}); upload the log "
                "against the version the campaign ran on, or check the ids", field="log",
                unknown=len(unknown), ids=unknown[:MAX_LISTED])
        raise InvalidParameter(
            "the log holds one person the graph knows: a campaign with one adopter shows "
            "nothing about who passes a campaign on; leave it out", field="log")
    if not any(keep[p][0].role == "seed" for p in keep if p in index):
        raise InvalidParameter("none of the log's seeds is in this version of the graph; "
                               "check the seed ids", field="log")
    if unknown:
        warnings.append(_warning("unknown_people", f"{_people(len(unknown))} in the log "
                                 f"{'is' if len(unknown) == 1 else 'are'} not in version {version.number} "
                                 "of the graph and left out", unknown))
    early = [p for p, (r, w) in keep.items() if by_time and w < 0]
    if early:
        warnings.append(_warning("before_start", f"{_people(len(early))} timed before the "
                                 "campaign's start", early))
    if duplicates:
        warnings.append(_warning("duplicate_adoptions", f"{_rows(len(duplicates))} repeating an adoption "
                                 "merged into the person's first", duplicates))
    if by_seeds:
        warnings.append(_warning("adoptions_by_seeds", f"{_people(len(by_seeds))} contacted by the "
                                 "campaign also listed as adopting; counted as seeds", by_seeds))
    log = [[r.person, r.role, r.time, r.round, r.referred_by] for r, _ in keep.values()]
    adopters = sum(1 for r, _ in keep.values() if r.role == "adopter")
    last = max((w for r, w in keep.values()), default=0.0)
    report: dict[str, Any] = {
        "people": len(keep), "seeds": len(keep) - adopters, "adopters": adopters,
        "timing": "time" if by_time else "round",
        "unknown": {"count": len(unknown), "ids": unknown[:MAX_LISTED]},
        ("last_adoption_hours" if by_time else "last_round"): round(last, 2) if by_time else int(last),
        "warnings": warnings,
    }
    return log, report


def _people(n: int) -> str:
    return f"{n:,} person" if n == 1 else f"{n:,} people"


def _rows(n: int) -> str:
    return f"{n:,} row" if n == 1 else f"{n:,} rows"


def _warning(code: str, message: str, ids: list[str]) -> dict[str, Any]:
    return {"code": code, "message": message, "count": len(ids), "ids": ids[:MAX_LISTED]}


def campaigns_on_version(db: Session, tenant: str, graph_id: str, version: LoadedVersion,
                         ids: list[str] | None, *, round_hours: float
                         ) -> tuple[list[Episode], list[dict[str, Any]]]:
    """The chosen uploaded campaigns (None: all), oldest first, as rounds over ``version``.

    Timestamps are bucketed into rounds of ``round_hours`` (0 for the seeds);
    people the version does not know are left out; each log is taken to have
    been watched for one round past its last adoption. Returns the episodes and a
    description of each campaign used (id, name, people, unknown).

    Raises
    ------
    InvalidParameter
        An unknown or not yet uploaded campaign, none at all, or a campaign
        that holds fewer than two known people or no known seed on this version.
    """
    if ids is not None:
        found = campaign_repo.find_campaigns(db, tenant, graph_id, ids)
        missing = [i for i in ids if i not in found]
        if missing:
            raise InvalidParameter(f"campaign {missing[0]} is not a campaign of this graph",
                                   field="campaigns", value=missing[0])
        rows = sorted(found.values(), key=lambda r: (r.started_at, r.id))
    else:
        rows = [r for r in campaign_repo.list_campaigns(db, tenant, graph_id) if r.uploaded_at]
    pending = [r.id for r in rows if r.uploaded_at is None]
    if pending:
        raise InvalidParameter(f"campaign {pending[0]} has no log yet; upload it first",
                               field="campaigns", value=pending[0])
    if not rows:
        raise InvalidParameter("learning needs at least one past campaign with an uploaded log; "
                               "this graph has none", field="campaigns")
    index = version.index
    out: list[Episode] = []
    used: list[dict[str, Any]] = []
    for r in rows:
        entries = [e for e in (r.log or []) if e[0] in index]
        nodes = np.array([index[e[0]] for e in entries], dtype=np.int64)
        seed = np.array([e[1] == "seed" for e in entries], dtype=bool)
        if nodes.size < 2 or not seed.any():
            raise InvalidParameter(
                f"campaign {r.name!r} ({r.id}) has {'no known seed' if nodes.size >= 2 else 'fewer than two known people'} "
                f"on version {version.number}; leave it out or use the version it ran on",
                field="campaigns", value=r.id)
        if (r.report or {}).get("timing") == "round":
            rounds = np.array([0 if s else max(int(e[3]), 1) for e, s in zip(entries, seed)], dtype=np.int64)
        else:
            rounds = bucket_rounds(np.array([float(e[2]) for e in entries]), seed, window=round_hours)
        # The log is taken to cover one round past its last adoption (nobody adopted then):
        # without it the last adopters' unanswered chances would be left out and p overstated.
        out.append(Episode(nodes, rounds, int(rounds.max()) + 1, r.id))
        used.append({"id": r.id, "name": r.name, "started_at": r.started_at.isoformat(),
                     "people": int(nodes.size), "seeds": int(seed.sum()),
                     "unknown": len(r.log or []) - len(entries)})
    return out, used


def episodes_of(version: LoadedVersion, ids: list[str] | None, *, round_hours: float,
                tenant: str | None = None) -> tuple[list[Episode], list[dict[str, Any]]]:
    """:func:`campaigns_on_version` for a loaded version, from a job or a check that holds no session.

    The database and graph are the ones the version was loaded from; ``tenant`` defaults to
    the graph's own (a check before queueing knows no tenant but the graph's).
    """
    graph_id, bind = version_origin(version.version_id)
    with Session(bind) as db:
        owner = tenant if tenant is not None else campaign_repo.get_graph_tenant(db, graph_id)
        return campaigns_on_version(db, owner, graph_id, version, ids, round_hours=round_hours)
