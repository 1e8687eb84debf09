"""``referral_asks``: for every adopter of a campaign, whom they should be asked to refer.

The batch form of ``POST /v1/graphs/{id}/next-contacts`` with ``group_by=adopter``, for
nightly exports: :func:`service.usecases.next_contacts.ask_for_referrals`. Rows are stored
as arrays and exported by ``GET /v1/jobs/{job_id}/result.csv`` (see :func:`csv_table`).
"""

from __future__ import annotations

from service.usecases import result_models
from collections.abc import Iterator
from typing import TYPE_CHECKING, Any

from numpy.typing import NDArray

from service.usecases import next_contacts as use_case
from service.usecases.integrity_rules import resolve_exclude_flagged
from service.usecases.next_contacts import ReferralAsksParams

from .. import admission
from ..kinds import JobKind, TaskContext, TaskOutput

if TYPE_CHECKING:
    from service.usecases.loading import LoadedVersion

__all__ = ["ReferralAsksParams", "run", "csv_table", "KIND"]


def run(ctx: TaskContext, params: ReferralAsksParams) -> TaskOutput:
    out = use_case.ask_for_referrals(ctx.load(), params, progress=ctx.progress)
    return TaskOutput(data=out.data, arrays=out.arrays)


def csv_table(
    version: LoadedVersion, data: dict[str, Any], arrays: dict[str, NDArray[Any]]
) -> tuple[list[str], Iterator[list[Any]]]:
    """One row per (adopter, target), adopters by expected referrals, targets best first."""
    return use_case.referral_asks_table(version, data, arrays)


KIND = JobKind(
    name="referral_asks",
    result=result_models.ReferralAsksResult,
    csv=csv_table,
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
