"""The ``learn_probabilities`` job kind: a door over :mod:`service.usecases.learning`."""

from __future__ import annotations

from service.usecases.learning import LearnParams, learn_model, precheck
from service.usecases.learning_results import LearnResult

from .. import admission
from ..kinds import JobKind, TaskContext, TaskOutput

__all__ = ["KIND", "run"]


def run(ctx: TaskContext, params: LearnParams) -> TaskOutput:
    return learn_model(ctx.load(), params, tenant=ctx.tenant_id, progress=ctx.progress)


KIND = JobKind(
    name="learn_probabilities",
    params=LearnParams,
    result=LearnResult,
    run=run,
    precheck=precheck,
    estimate=admission.linear_estimate,
    summary="Edge probabilities learned from past campaigns; the job id is the model's id",
    result_description=(
        "model {method, reason, parameters [{name, value, low, high}], held_out, log_likelihood, iterations, "
        "converged, new_connection_method, typical_probability}; campaigns [{id, name, people, seeds, unknown}]; "
        "data {campaigns, trials, activations, unexplained, round_hours}; readings. Arrays: arc_prob and "
        "lt_weight, one per connection. Use it with probability {\"scheme\": \"learned\", \"model\": \"<job id>\"}."
    ),
)
