"""The ``dense_groups`` job kind: a door over :mod:`service.usecases.integrity`."""

from __future__ import annotations

from service.usecases import integrity_reports
from service.usecases.integrity_results import DenseGroupsResult
from service.usecases.integrity import (
    DenseGroupsParams,
    find_dense_groups,
    precheck_dense_groups,
)

from .. import admission
from ..kinds import JobKind, TaskContext, TaskOutput

__all__ = ["KIND", "run"]


def run(ctx: TaskContext, params: DenseGroupsParams) -> TaskOutput:
    return find_dense_groups(ctx.load(), params, progress=ctx.progress)


KIND = JobKind(
    name="dense_groups",
    params=DenseGroupsParams,
    result=DenseGroupsResult,
    run=run,
    csv=integrity_reports.dense_groups_table,
    plots={"group_density": integrity_reports.group_density},
    estimate=admission.linear_estimate,
    precheck=precheck_dense_groups,
    summary="Dense groups: people tied far more tightly than the rest, sharing devices or addresses, "
            "or joining together",
    result_description=(
        "groups [{rank, found_in, people, density, ties, possible, members, shared_values, evidence}] found "
        "by greedy peeling (Charikar 2000) with the camouflage-resistant weights of Hooi et al. (2016, "
        "FRAUDAR) in the person graph, in attribute columns and among people who joined through the same "
        "contacts within a window; searched [{found_in, groups, note, share_at_random}]; guarantee; caution. Leads for a person to review, not verdicts."
    ),
)
