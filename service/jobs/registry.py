"""Every job kind, by name: the map of what the workers can run.

Adding a kind is one module and one line:

1. The capability itself is a use case in ``service/usecases/<family>.py``: a params
   model (pydantic, ``model_config = ConfigDict(extra="forbid")``, a
   ``random_seed: int = 0`` field when the computation is random), a result model
   (subclass ``service.usecases.result_models.Result`` with ``kind: Literal[name]``),
   and one callable ``(version, params, *, progress) -> Computed`` that calls the
   engine (``service.analytics``) and returns the document and arrays.
2. Write ``service/jobs/tasks/<name>.py``, the door: ``run(ctx, params)`` calls the
   use case with ``ctx.load()`` and ``ctx.progress``, and ``KIND`` declares
   everything the API and the worker need::

       def run(ctx: TaskContext, params: ScoresParams) -> TaskOutput:
           return compute_scores(ctx.load(), params, progress=ctx.progress)

       KIND = JobKind(name="scores", params=ScoresParams, result=ScoresResult, run=run,
                      csv=scores_table,                    # GET /v1/jobs/{id}/result.csv
                      plots={"degrees": degrees_plot},      # GET /v1/jobs/{id}/plots/{name}.svg
                      estimate=admission.linear_estimate,  # memory, checked before queueing
                      summary="Node scores", result_description="...")

3. Add the module to ``_BUILTIN`` below. The ``JobResult`` union of the OpenAPI
   document, the plot names and the CSV exports are all read from the registry.

The worker adds ``kind``, ``graph_id``, ``version``, ``params`` and
``random_seed`` to every result document (and the API ``job_id``,
``created_at``, ``arrays``), so ``data`` must not use those keys. Arrays (``NDArray`` per name) are stored beside the document and read
back with ``storage.repo.results.get_result_arrays``. Raise the errors of
``service.analytics.errors``: they fail the job at once with a problem
document (``InvalidParameter`` and friends are not retried); anything else is
treated as transient and retried with backoff up to ``max_attempts``.

Kinds can also come from extra modules named in the setting
``job_kind_modules`` (each registers its kinds on import with
:func:`register`); the API and every worker import them at start.
"""

from __future__ import annotations

import importlib
from typing import Any

from pydantic import BaseModel, ValidationError

from .errors import InvalidJobParams, UnknownKind
from .kinds import JobKind, TaskContext, TaskOutput
from .tasks import (backtest, dense_groups, forecast, layout, learn_probabilities, link_evaluation,
                    odd_neighbourhoods, profile,
                    project_events, recommendations, referral_asks, scores, shortlist)

__all__ = [
    "JobKind",
    "TaskContext",
    "TaskOutput",
    "REGISTRY",
    "register",
    "get_kind",
    "parse_params",
    "import_kind_modules",
    "validation_errors",
]

_BUILTIN = [
    profile, scores, recommendations, link_evaluation, referral_asks, forecast, shortlist,
    project_events, odd_neighbourhoods, dense_groups, learn_probabilities, backtest, layout,
]

REGISTRY: dict[str, JobKind] = {m.KIND.name: m.KIND for m in _BUILTIN}


_imported: set[str] = set()


def register(kind: JobKind, *, replace: bool = False) -> JobKind:
    """Add ``kind`` to the registry (an existing name needs ``replace=True``)."""
    if kind.name in REGISTRY and not replace and REGISTRY[kind.name] is not kind:
        raise ValueError(f"job kind {kind.name!r} is already registered")
    REGISTRY[kind.name] = kind
    return kind


def import_kind_modules(modules: list[str] | tuple[str, ...]) -> None:
    """Import modules that register extra kinds (once each)."""
    for name in modules:
        if name not in _imported:
            importlib.import_module(name)
            _imported.add(name)


def get_kind(name: str) -> JobKind:
    kind = REGISTRY.get(name)
    if kind is None:
        raise UnknownKind(
            f"unknown job kind {name!r}; known kinds: {', '.join(sorted(REGISTRY))}",
            field="kind",
            value=name,
        )
    return kind


def validation_errors(exc: ValidationError, prefix: str = "params") -> list[dict[str, Any]]:
    return [
        {"loc": [prefix, *(str(p) for p in e["loc"])], "msg": e["msg"], "type": e["type"]}
        for e in exc.errors()
    ]


def parse_params(kind: JobKind, raw: dict[str, Any]) -> BaseModel:
    """Validate ``raw`` against the kind's params model; :class:`InvalidJobParams` when it fails."""
    try:
        return kind.params.model_validate(raw)
    except ValidationError as exc:
        errors = validation_errors(exc)
        first = errors[0]
        raise InvalidJobParams(
            f"{'.'.join(first['loc'])}: {first['msg']}", field="params", errors=errors
        ) from exc
