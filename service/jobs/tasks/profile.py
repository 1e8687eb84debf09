"""The ``profile`` job kind: a door over :mod:`service.usecases.profile`."""

from __future__ import annotations

from service.usecases import result_models, result_plots
from service.usecases.profile import profile_version, ProfileParams

from .. import admission
from ..kinds import JobKind, TaskContext, TaskOutput

__all__ = ["KIND", "run"]


def run(ctx: TaskContext, params: ProfileParams) -> TaskOutput:
    return profile_version(ctx.load(), params, progress=ctx.progress)


KIND = JobKind(
    result=result_models.ProfileResult,
    plots={"degree_distribution": result_plots.degree_distribution},
    name="profile",
    params=ProfileParams,
    run=run,
    estimate=admission.linear_estimate,
    summary="Graph profile: degree distribution and power-law fit, clustering, assortativity, distances",
    result_description=(
        "summary (people, ties, components, reciprocity, degree median and maximum); degree "
        "distribution with a power-law fit (Clauset, Shalizi and Newman 2009); clustering; "
        "assortativity; estimated average distance and effective diameter; communities; readings "
        "(one plain sentence per figure)."
    ),
)
