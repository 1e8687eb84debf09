"""Next contacts: given who has adopted, whom to contact next and which adopter should ask.

:func:`next_contacts_for` answers ``POST /v1/graphs/{id}/next-contacts`` (a ranked list,
or per adopter with ``group_by="adopter"``); :func:`ask_for_referrals` is the body of the
``referral_asks`` job kind (every adopter's targets, stored as arrays and exported by
:func:`referral_asks_table`). Both rank with :mod:`service.analytics.ties.referrals`;
:func:`contact_reason` and :func:`exposure_explained` put the numbers in plain words for
both. :func:`read_adopter_ids` reads a long adopter list sent as CSV.
"""

from __future__ import annotations

import csv
import io
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from typing import Any, Literal

import numpy as np
from numpy.typing import NDArray
from pydantic import BaseModel, ConfigDict, Field
from sqlalchemy.orm import Session

from service.analytics.errors import InvalidParameter, UnknownNode
from service.analytics.ties.referrals import NextContact, next_contacts, referral_asks
from service.usecases.diffusion_settings import ProbabilitySettings, diffusion_graph_under
from service.usecases.integrity_rules import FlaggedRule, flagged_ids, flagged_warning, read_flagged
from service.usecases.loading import LoadedVersion, load_version
from storage.repo import graphs as graph_repo

from .indexes import follow_on_for, neighbour_index_for
from .recommendations import BatchOutput, Progress, resolve_ids

__all__ = [
    "FollowOn",
    "ReferralAsksParams",
    "AdopterQuery",
    "REFERRAL_ASKS_HEADER",
    "exposure_explained",
    "contact_reason",
    "read_adopter_ids",
    "next_contacts_for",
    "ask_for_referrals",
    "referral_asks_table",
]

FollowOn = Literal["degree", "in_degree", "out_degree", "strength", "pagerank", "coreness"]


class ReferralAsksParams(BaseModel):
    model_config = ConfigDict(extra="forbid")

    adopters: list[str] = Field(min_length=1, description="Ids of the people who have adopted.")
    per_adopter: int = Field(default=5, ge=1, le=1000, description="Targets per adopter.")
    model: Literal["ic", "lt"] = Field(default="ic", description="Independent Cascade or Linear Threshold.")
    probability: ProbabilitySettings = Field(default_factory=ProbabilitySettings)
    random_seed: int = Field(default=0, ge=0, le=2**63 - 1, description="Seeds the trivalency draw.")
    follow_on: FollowOn | None = Field(default=None, description="Blend in this per-node measure.")
    blend: float | None = Field(default=None, ge=0, le=1, description="Weight of follow_on (default 0.5 with it).")
    strict: bool = Field(default=True, description="Unknown adopter ids fail the job (true) or are skipped.")
    exclude_flagged: FlaggedRule | None = Field(
        default=None, description="People an odd_neighbourhoods or dense_groups job of this version flagged for "
                                  "review are neither asked nor asked about: {job, lists}.")


@dataclass(frozen=True)
class AdopterQuery:
    """Who has adopted, on which version (None: the newest), and how to rank the people they reach.

    The fields of the HTTP request ``NextContactsRequest``, ranges already
    checked there; ``limit`` None lists everyone (grouped: every adopter).
    """

    graph_id: str
    adopters: tuple[str, ...]
    limit: int | None = 50
    model: Literal["ic", "lt"] = "ic"
    probability: ProbabilitySettings = field(default_factory=ProbabilitySettings)
    random_seed: int = 0
    version: int | None = None
    follow_on: FollowOn | None = None
    blend: float | None = None
    group_by: Literal["adopter"] | None = None
    per_adopter: int = 5
    strict: bool = True
    exclude_flagged: FlaggedRule | None = None


def exposure_explained(model: str, scheme: str) -> str:
    """What ``exposure`` means under the chosen model and probability scheme, in plain words."""
    if model == "lt":
        text = ("Exposure is the share of this person's influence weight that comes from people who "
                "have adopted; under the Linear Threshold model it is the chance that their threshold "
                "is met in the next round.")
    else:
        text = ("Exposure is the model's chance that this person is won over in the next round if every "
                "adopter in contact with them asks once (Independent Cascade: one minus the chance that "
                "every such ask fails).")
    if scheme == "weighted_cascade":
        text += (" Under weighted cascade a tie into someone with d ties carries a chance of 1/d, so a "
                 "person whose only tie is an adopter has exposure 1; among equal exposures the list puts "
                 "the strongest tie to an adopter who may ask first.")
    return text + " People with an adopter who may ask them are listed before those without."


def contact_reason(c: NextContact, ids: list[str], model: str, follow_on: str | None, blend: float) -> str:
    """The numbers of one next contact in plain words."""
    who = f"{c.adopter_contacts} adopter{'s' if c.adopter_contacts != 1 else ''} in contact"
    chance = "won over next round" if model == "ic" else "over their threshold next round"
    text = f"{who} (chance {c.exposure:.2f} of being {chance})"
    if c.ask >= 0:
        text += f"; ask {ids[c.ask]}, their strongest tie (strength {c.ask_tie:.2f})"
    else:
        text += "; no adopter in contact may be asked (no contact consent): contact them directly"
    if follow_on is not None and blend > 0:
        # score = (1 - blend) exposure + blend share, share = follow-on / its maximum over the exposed
        share = (c.score - (1.0 - blend) * c.exposure) / blend
        text += f"; onward reach ({follow_on}) at {max(0.0, share):.2f} of the highest among the exposed"
    return text


def read_adopter_ids(raw: bytes, column: str) -> list[str]:
    """The ``column`` values of a CSV with a header row (RFC 4180), blank lines skipped."""
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise InvalidParameter("the CSV body is not UTF-8", field="body") from exc
    reader = csv.reader(io.StringIO(text, newline=""), strict=True)
    try:
        header = next(reader, None)
        if header is None:
            raise InvalidParameter(
                f"the CSV body is empty; send a header row with an {column!r} column", field="body"
            )
        names = [h.strip() for h in header]
        if column not in names:
            raise InvalidParameter(
                f"the CSV header has no {column!r} column (columns: {', '.join(names)})", field="body", line=1
            )
        at = names.index(column)
        out = []
        for row in reader:
            if not row or row == [""]:
                continue
            if at >= len(row):
                raise InvalidParameter(
                    f"line {reader.line_num} has no {column!r} value", field="body", line=reader.line_num
                )
            out.append(row[at])
        return out
    except csv.Error as exc:
        raise InvalidParameter(f"line {reader.line_num}: {exc}", field="body", line=reader.line_num) from exc


def _blend(blend: float | None, follow_on: str | None) -> float:
    return blend if blend is not None else (0.5 if follow_on else 0.0)


def _contact_items(
    cs: list[NextContact] | tuple[NextContact, ...], v: LoadedVersion, model: str, follow_on: str | None,
    blend: float,
) -> list[dict[str, Any]]:
    ids, labels = v.ids, v.labels
    return [
        {
            "node_id": ids[c.node],
            "label": labels[c.node] or None,
            "exposure": c.exposure,
            "score": c.score,
            "adopter_contacts": c.adopter_contacts,
            "ask": None if c.ask < 0 else {
                "node_id": ids[c.ask], "label": labels[c.ask] or None, "tie_strength": c.ask_tie,
                "probability": c.ask_probability,
            },
            "reason": contact_reason(c, ids, model, follow_on, blend),
        }
        for c in cs
    ]


def next_contacts_for(sessions: Callable[[], Session], tenant: str, query: AdopterQuery) -> dict[str, Any]:
    """Non-adopters by exposure from the adopters, each with the adopter best placed to ask.

    Returns the ``NextContactsPage`` document: ``items`` ranked, or with
    ``group_by="adopter"`` ``groups``, each target assigned to one adopter.
    Only people with contact consent are listed or asked. Unknown adopter ids
    raise :class:`UnknownNode` listing them, or with ``strict`` False are
    skipped and counted. The database session is closed before the ranking runs.
    """
    with sessions() as db:
        graph = graph_repo.get_graph(db, tenant, query.graph_id)
        ver = graph_repo.get_version(db, graph, query.version)
        loaded = load_version(db, ver)
        rule = None if query.exclude_flagged is None else read_flagged(
            query.exclude_flagged, db, tenant, lambda: loaded, graph_id=graph.id, version=ver.number)
    lookup = loaded.index
    got = [lookup.get(s, -1) for s in query.adopters]
    idx = np.asarray(got, dtype=np.int64)
    unknown: list[str] = []
    if (idx < 0).any():
        unknown = list(dict.fromkeys(s for s, i in zip(query.adopters, got) if i < 0))
        if query.strict:
            shown = ", ".join(repr(s) for s in unknown[:5])
            raise UnknownNode(
                f"{len(unknown)} adopter id{'s are' if len(unknown) != 1 else ' is'} not in version "
                f"{ver.number} of this graph: {shown}{' ...' if len(unknown) > 5 else ''}",
                field="adopters", unknown=unknown[:20], unknown_count=len(unknown),
            )
        idx = idx[idx >= 0]
    adopters = np.unique(idx)
    pr = query.probability
    dg = diffusion_graph_under(loaded, model=query.model, probability=pr, random_seed=query.random_seed)
    index = neighbour_index_for(ver.id, loaded.graph)
    ok = loaded.attrs.contactable()
    warnings: list[dict[str, Any]] = []
    if rule is not None:
        flagged = resolve_ids(lookup, flagged_ids(rule), "exclude_flagged")
        ok = ok.copy()
        ok[flagged] = False
        note = flagged_warning(rule, len(flagged))
        warnings += [note] if note else []
    blend = _blend(query.blend, query.follow_on)
    values = follow_on_for(ver.id, loaded.graph, query.follow_on) if query.follow_on else None
    body: dict[str, Any] = {
        "graph_id": graph.id,
        "version": ver.number,
        "model": query.model,
        "probability": pr.model_dump(),
        "follow_on": query.follow_on,
        "blend": blend,
        "adopters": int(adopters.shape[0]),
        "unknown_adopters": {"count": len(unknown), "examples": unknown[:20]} if unknown else None,
        "group_by": query.group_by,
        "exposure_explained": exposure_explained(query.model, pr.scheme),
        **({"warnings": warnings} if warnings else {}),
    }
    ids, labels = loaded.ids, loaded.labels
    if query.group_by == "adopter":
        groups = referral_asks(dg, adopters, index=index, eligible=ok, askers=ok, follow_on=values,
                               blend=blend, per_adopter=query.per_adopter, limit=query.limit)
        body["groups"] = [
            {
                "adopter": ids[g.adopter],
                "adopter_label": labels[g.adopter] or None,
                "expected_referrals": g.expected_referrals,
                "targets": _contact_items(g.targets, loaded, query.model, query.follow_on, blend),
            }
            for g in groups
        ]
    else:
        cs = next_contacts(dg, adopters, index=index, eligible=ok, askers=ok, follow_on=values,
                           blend=blend, limit=query.limit)
        body["items"] = _contact_items(cs, loaded, query.model, query.follow_on, blend)
    return body


def ask_for_referrals(v: LoadedVersion, params: ReferralAsksParams, *, progress: Progress) -> BatchOutput:
    """For every adopter, whom to ask them to refer: each target assigned to one adopter only.

    Targets are assigned to their strongest tie among the adopters, at most
    ``per_adopter`` each; contact consent is honoured for targets and askers.
    The rows are stored as arrays, one entry per (adopter, target).
    """
    known = {s: i for s, i in ((s, v.index.get(s)) for s in params.adopters) if i is not None}
    skipped = len(set(params.adopters)) - len(known)
    adopters = (resolve_ids(v.index, params.adopters, "adopters") if params.strict
                else np.fromiter(known.values(), np.int64, len(known)))
    pr = params.probability
    dg = diffusion_graph_under(v, model=params.model, probability=pr, random_seed=params.random_seed)
    ok = v.attrs.contactable()
    warnings: list[dict[str, Any]] = []
    if params.exclude_flagged is not None:
        flagged = resolve_ids(v.index, flagged_ids(params.exclude_flagged), "exclude_flagged")
        ok = ok.copy()
        ok[flagged] = False
        note = flagged_warning(params.exclude_flagged, len(flagged))
        warnings += [note] if note else []
    blend = _blend(params.blend, params.follow_on)
    values = follow_on_for(v.version_id, v.graph, params.follow_on) if params.follow_on else None
    progress(0.5, "ranking")
    groups = referral_asks(dg, np.unique(adopters), index=neighbour_index_for(v.version_id, v.graph),
                           eligible=ok, askers=ok, per_adopter=params.per_adopter, limit=None,
                           follow_on=values, blend=blend)
    targets = [(g.adopter, r, t) for g in groups for r, t in enumerate(g.targets)]
    arrays: dict[str, NDArray[Any]] = {
        "adopter": np.fromiter((a for a, _, _ in targets), np.int32, len(targets)),
        "rank": np.fromiter((r + 1 for _, r, _ in targets), np.int32, len(targets)),
        "target": np.fromiter((t.node for _, _, t in targets), np.int32, len(targets)),
        "exposure": np.fromiter((t.exposure for _, _, t in targets), np.float64, len(targets)),
        "score": np.fromiter((t.score for _, _, t in targets), np.float64, len(targets)),
        "tie_strength": np.fromiter((t.ask_tie for _, _, t in targets), np.float64, len(targets)),
        "probability": np.fromiter((t.ask_probability for _, _, t in targets), np.float64, len(targets)),
        "adopter_contacts": np.fromiter((t.adopter_contacts for _, _, t in targets), np.int32, len(targets)),
    }
    return BatchOutput(
        data={
            "adopters": int(np.unique(adopters).shape[0]),
            "unknown_adopters": skipped,
            "askers": len(groups),
            "targets": len(targets),
            "expected_referrals": float(sum(g.expected_referrals for g in groups)),
            "model": params.model,
            "blend": blend,
            "exposure_explained": exposure_explained(params.model, pr.scheme),
            "expected_referrals_explained": (
                "The sum of the listed targets' exposures: the number of them the model expects to be "
                "won over if every adopter asks each of their targets once."
            ),
            "columns": REFERRAL_ASKS_HEADER,
            **({"warnings": warnings} if warnings else {}),
        },
        arrays=arrays,
    )


REFERRAL_ASKS_HEADER = [
    "adopter_id", "adopter_label", "rank", "target_id", "target_label", "exposure", "score", "tie_strength",
    "probability", "adopter_contacts", "reason",
]


def referral_asks_table(
    version: LoadedVersion, data: dict[str, Any], arrays: dict[str, NDArray[Any]]
) -> tuple[list[str], Iterator[list[Any]]]:
    """One row per (adopter, target), adopters by expected referrals, targets best first."""
    ids, labels = version.ids, version.labels
    params = data.get("params") or {}
    cols = {k: a.tolist() for k, a in arrays.items()}

    def rows() -> Iterator[list[Any]]:
        for i in range(len(cols["adopter"])):
            c = NextContact(cols["target"][i], cols["exposure"][i], cols["score"][i], cols["adopter"][i],
                            cols["tie_strength"][i], cols["probability"][i], cols["adopter_contacts"][i])
            reason = contact_reason(c, ids, data["model"], params.get("follow_on"), float(data["blend"]))
            yield [ids[c.ask], labels[c.ask] or None, cols["rank"][i], ids[c.node], labels[c.node] or None,
                   c.exposure, c.score, c.ask_tie,
                   c.ask_probability, c.adopter_contacts, reason]

    return REFERRAL_ASKS_HEADER, rows()
