"""The contact rule ``exclude_flagged``: leave out the people an integrity job flagged for review.

A shortlist or referral-asks request names an ``odd_neighbourhoods`` or
``dense_groups`` job of the same graph; when the request is queued (by a person,
or by a schedule when it fires), :func:`resolve_exclude_flagged` reads that job's
result and writes the people it flagged into the rule (``node_ids``), so the
stored params say exactly who was left out and why, and the job itself needs no
other result to run.

The named job may have run on the version the request runs on or on an older one
(a schedule follows the newest version while the flags were made earlier): people
it flagged who are no longer in the version are ignored, counted in ``ignored``
and said in the result's warning. A job of another graph, of a newer version, of
another kind, or not (yet) succeeded is a 422 naming the rule.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import TYPE_CHECKING, Any, Literal

from pydantic import BaseModel, ConfigDict, Field
from sqlalchemy.orm import Session

from service.analytics.errors import InvalidParameter
from storage.errors import NotFound
from storage.models import Job
from storage.repo import graphs as graph_repo
from storage.repo import jobs as job_repo
from storage.repo import results as result_repo

from .loading import load_version

if TYPE_CHECKING:
    from .loading import LoadedVersion

__all__ = ["FLAGGING_KINDS", "FlaggedRule", "check_named_job", "flagged_ids", "flagged_warning", "read_flagged",
           "resolve_exclude_flagged"]

FLAGGING_KINDS: dict[str, tuple[str, ...]] = {"odd_neighbourhoods": ("near_cliques", "near_stars"), "dense_groups": ("groups",)}
FlaggedList = Literal["near_cliques", "near_stars", "groups"]


class FlaggedRule(BaseModel):
    model_config = ConfigDict(extra="forbid")

    job: str = Field(min_length=1, max_length=100,
                     description="An odd_neighbourhoods or dense_groups job of the same graph, on this version "
                                 "or an older one.")
    lists: list[FlaggedList] | None = Field(
        default=None, max_length=3,
        description="Which of its lists to leave out (default: every list the job has).")
    node_ids: list[str] | None = Field(
        default=None,
        description="Filled in when the job is queued: the people that job flagged who are in this version "
                    "(anything sent is replaced).")
    flagged_version: int | None = Field(
        default=None, description="Filled in when the job is queued: the version the named job ran on.")
    ignored: int | None = Field(
        default=None,
        description="Filled in when the job is queued, when the named job ran on an older version: the people "
                    "it flagged who are no longer in this one (ignored).")


def _refuse(reason: str, rule: FlaggedRule, **data: Any) -> InvalidParameter:
    return InvalidParameter(reason, field="exclude_flagged", value=rule.job, **data)


def resolve_exclude_flagged(
    params: BaseModel, db: Session, tenant: str, load: Callable[[], LoadedVersion], *, graph_id: str, version: int,
) -> BaseModel:
    """``params`` with ``exclude_flagged.node_ids`` read from the named job; unchanged without the rule."""
    rule: FlaggedRule | None = getattr(params, "exclude_flagged", None)
    if rule is None:
        return params
    flagged = read_flagged(rule, db, tenant, load, graph_id=graph_id, version=version)
    return params.model_copy(update={"exclude_flagged": flagged})


def check_named_job(rule: FlaggedRule, db: Session, tenant: str, *, graph_id: str) -> Job:
    """The job the rule names, checked for what cannot change later: it exists, flags people, same graph."""
    try:
        job = job_repo.get_job(db, tenant, rule.job)
    except NotFound:
        raise _refuse(f"exclude_flagged names job {rule.job!r}, which does not exist", rule) from None
    if job.kind not in FLAGGING_KINDS:
        raise _refuse(f"exclude_flagged names a {job.kind} job; name an odd_neighbourhoods or dense_groups job",
                      rule, kind=job.kind)
    if job.graph_id != graph_id:
        raise _refuse(f"exclude_flagged names a job of another graph; run {job.kind} on this graph and name "
                      "that job", rule, job_graph_id=job.graph_id)
    lists: list[str] = list(rule.lists or FLAGGING_KINDS[job.kind])
    wrong = [x for x in lists if x not in FLAGGING_KINDS[job.kind]]
    if wrong:
        raise _refuse(f"a {job.kind} job has no list {wrong[0]!r} (it has {', '.join(FLAGGING_KINDS[job.kind])})",
                      rule, lists=list(lists))
    return job


def read_flagged(
    rule: FlaggedRule, db: Session, tenant: str, load: Callable[[], LoadedVersion], *, graph_id: str, version: int,
) -> FlaggedRule:
    """The rule with ``node_ids`` and ``lists`` read from the job it names (checked: succeeded, not newer).

    ``load`` loads the version the request runs on; the named job's own version is
    loaded when it is older (its result counts people by that version's order).
    """
    job = check_named_job(rule, db, tenant, graph_id=graph_id)
    if job.version is None or job.version > version:
        raise _refuse(
            f"exclude_flagged names a job of version {job.version}, newer than version {version} this job runs "
            f"on; name a {job.kind} job of version {version} or older", rule,
            job_graph_id=job.graph_id, job_version=job.version, version=version)
    if job.status != "succeeded":
        raise _refuse(f"exclude_flagged names a job that is {job.status}; wait until it has succeeded", rule,
                      status=job.status)
    lists: list[str] = list(rule.lists or FLAGGING_KINDS[job.kind])
    result = result_repo.get_result(db, job.id)
    older = job.version < version
    ids: dict[str, None] = {}
    if job.kind == "odd_neighbourhoods":
        for name in lists:
            ids.update((p["node_id"], None) for p in result.data.get(name) or [])
    else:
        # Every member, not only the ones the document lists: they are in the result's arrays.
        members = result_repo.get_result_arrays(db, result, ["member_index"])["member_index"]
        if older:
            names = load_version(db, graph_repo.get_version(db, graph_repo.get_graph(db, tenant, graph_id),
                                                            job.version)).ids
        else:
            names = load().ids
        ids.update((names[int(i)], None) for i in members.tolist())
    kept = list(ids)
    if older:
        here = load().index
        kept = [i for i in kept if i in here]
    return rule.model_copy(update={"lists": list(lists), "node_ids": kept, "flagged_version": job.version,
                                   "ignored": len(ids) - len(kept) if older else None})


def flagged_ids(rule: FlaggedRule) -> list[str]:
    """The people the rule leaves out; refused when they were never read from the named job."""
    if rule.node_ids is None:
        raise InvalidParameter(
            f"exclude_flagged was not read from job {rule.job} when this job was queued; queue it again with "
            "POST /v1/graphs/{graph_id}/jobs", field="exclude_flagged", value=rule.job)
    return rule.node_ids


def flagged_warning(rule: FlaggedRule | None, left_out: int) -> dict[str, Any] | None:
    """The note a result carries when the rule left people out."""
    if rule is None:
        return None
    older = ""
    if rule.flagged_version is not None and rule.ignored is not None:
        gone = (f"; {rule.ignored:,} people it flagged are no longer in this version and were ignored"
                if rule.ignored else "")
        older = f" (the flags were made on version {rule.flagged_version}{gone})"
    note: dict[str, Any] = {
        "code": "excluded_flagged", "count": left_out,
        "message": f"{left_out:,} people flagged for review by job {rule.job} were left out "
                   f"({', '.join(x.replace('_', '-') for x in rule.lists or [])}){older}; a flag is a lead, "
                   "not a verdict, so review them before deciding for good"}
    if rule.ignored is not None:
        note["flagged_version"] = rule.flagged_version
        note["ignored"] = rule.ignored
    return note
