"""``referral_asks``: for every adopter of a campaign, whom they should be asked to refer.

The batch form of ``POST /v1/graphs/{id}/next-contacts`` with
``group_by=adopter`` (:func:`service.analytics.ties.referrals.referral_asks`), for
nightly exports: each exposed non-adopter is assigned to one adopter only,
its strongest tie, at most ``per_adopter`` per adopter. Contact consent is
honoured for targets and askers. Rows are stored as arrays and exported by
``GET /v1/jobs/{job_id}/result.csv``; :func:`contact_reason` words the
numbers, here and in the HTTP answer.
"""

from __future__ import annotations


from collections.abc import Iterator
from typing import TYPE_CHECKING, Any, Literal

import numpy as np
from numpy.typing import NDArray
from pydantic import BaseModel, ConfigDict, Field

from .. import admission
from ..kinds import JobKind, TaskContext, TaskOutput
from service.usecases.diffusion_settings import ProbabilitySettings
from service.usecases.integrity_rules import FlaggedRule, flagged_ids, flagged_warning, resolve_exclude_flagged
from .recommendations import resolve_ids

if TYPE_CHECKING:
    from service.analytics.ties.referrals import NextContact
    from service.usecases.loading import LoadedVersion

__all__ = ["FollowOn", "ReferralAsksParams", "contact_reason", "exposure_explained", "run", "csv_table", "KIND"]

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


def run(ctx: TaskContext, params: ReferralAsksParams) -> TaskOutput:
    from service.analytics.ties.referrals import referral_asks
    from service.usecases.diffusion_inputs import diffusion_graph_for
    from service.indexes import follow_on_for, neighbour_index_for

    v = ctx.load()
    known = {s: i for s, i in ((s, v.index.get(s)) for s in params.adopters) if i is not None}
    skipped = len(set(params.adopters)) - len(known)
    adopters = (resolve_ids(v.index, params.adopters, "adopters") if params.strict
                else np.fromiter(known.values(), np.int64, len(known)))
    pr = params.probability
    dg = diffusion_graph_for(v.version_id, v.graph, model=params.model, scheme=pr.scheme, p=pr.p, q=pr.q,
                             random_seed=params.random_seed)
    ok = v.attrs.contactable()
    warnings: list[dict[str, Any]] = []
    if params.exclude_flagged is not None:
        flagged = resolve_ids(v.index, flagged_ids(params.exclude_flagged), "exclude_flagged")
        ok = ok.copy()
        ok[flagged] = False
        note = flagged_warning(params.exclude_flagged, len(flagged))
        warnings += [note] if note else []
    blend = params.blend if params.blend is not None else (0.5 if params.follow_on else 0.0)
    values = follow_on_for(v.version_id, v.graph, params.follow_on) if params.follow_on else None
    ctx.progress(0.5, "ranking")
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
    return TaskOutput(
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
            "columns": HEADER,
            **({"warnings": warnings} if warnings else {}),
        },
        arrays=arrays,
    )


HEADER = ["adopter_id", "adopter_label", "rank", "target_id", "target_label", "exposure", "score", "tie_strength", "probability",
          "adopter_contacts", "reason"]


def csv_table(
    version: LoadedVersion, data: dict[str, Any], arrays: dict[str, NDArray[Any]]
) -> tuple[list[str], Iterator[list[Any]]]:
    """One row per (adopter, target), adopters by expected referrals, targets best first."""
    from service.analytics.ties.referrals import NextContact

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

    return HEADER, rows()


KIND = JobKind(
    csv=csv_table,
    name="referral_asks",
    params=ReferralAsksParams,
    run=run,
    estimate=admission.linear_estimate,
    resolve=resolve_exclude_flagged,
    summary="For every adopter, whom to ask them to refer (each target assigned to one adopter)",
    result_description=(
        "Counts (adopters, unknown_adopters, askers, targets, expected_referrals), exposure_explained "
        "and expected_referrals_explained (plain sentences), and the columns of the CSV export "
        "GET /v1/jobs/{job_id}/result.csv: adopter_id, adopter_label, rank, target_id, target_label, "
        "exposure, score, tie_strength, probability, adopter_contacts, reason."
    ),
)
