"""The ``odd_neighbourhoods`` job kind: a door over :mod:`service.usecases.integrity`."""

from __future__ import annotations

from service.usecases import integrity_reports
from service.usecases.integrity_results import OddNeighbourhoodsResult
from service.usecases.integrity import (
    find_odd_neighbourhoods,
    OddNeighbourhoodsParams,
    precheck_odd_neighbourhoods,
)

from .. import admission
from ..kinds import JobKind, TaskContext, TaskOutput

__all__ = ["KIND", "run"]


def run(ctx: TaskContext, params: OddNeighbourhoodsParams) -> TaskOutput:
    return find_odd_neighbourhoods(ctx.load(), params, progress=ctx.progress)


KIND = JobKind(
    name="odd_neighbourhoods",
    params=OddNeighbourhoodsParams,
    result=OddNeighbourhoodsResult,
    run=run,
    csv=integrity_reports.odd_neighbourhoods_table,
    plots={"neighbourhood_law": integrity_reports.neighbourhood_law},
    estimate=admission.linear_estimate,
    precheck=precheck_odd_neighbourhoods,
    summary="Odd neighbourhoods: people whose contacts know each other far more (rings) or far less (stars) "
            "than the graph's own law",
    result_description=(
        "laws [{law, meaning, exponent, constant, people, reading}] fitted on log scales (OddBall, Akoglu, "
        "McGlohon and Faloutsos 2010); near_cliques and near_stars [{rank, node_id, label, score, contacts, "
        "ties, expected_ties, ties_among_contacts, possible_ties_among_contacts, weight, eigenvalue, "
        "evidence}]; law_points for the plot; readings; caution. Leads for a person to review, not verdicts."
    ),
)
