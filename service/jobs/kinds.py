"""What a job kind is made of: its params model, its task function, its context.

See :mod:`service.jobs.registry` for how to add a kind.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

from numpy.typing import NDArray
from pydantic import BaseModel

if TYPE_CHECKING:
    from service.loader import LoadedVersion

__all__ = ["JobKind", "TaskContext", "TaskOutput", "Progress", "RESERVED_RESULT_KEYS"]

Progress = Callable[[float, "str | None"], None]

# Every result document carries these; a task's own data must not use them.
RESERVED_RESULT_KEYS = ("kind", "graph_id", "version", "params", "random_seed", "job_id", "created_at", "arrays")


@dataclass(frozen=True)
class TaskOutput:
    """What a task returns: a JSON-able document and named numpy arrays (one per node, say)."""

    data: dict[str, Any]
    arrays: dict[str, NDArray[Any]] = field(default_factory=dict)


@dataclass(frozen=True, eq=False)
class TaskContext:
    """What a running task may use: the version it runs on, progress, the seed.

    ``progress(fraction, message)`` may be called as often as the task likes;
    it is written to the database at most every ~0.5 s, and it raises
    :class:`service.analytics.errors.Cancelled` once cancellation was
    requested, which ends the job ``cancelled``. Pass it straight to
    analytics functions that take ``progress=``.
    """

    job_id: str
    tenant_id: str
    graph_id: str | None
    version: int | None
    random_seed: int
    progress: Progress
    _load: Callable[[], LoadedVersion]

    def load(self) -> LoadedVersion:
        """The job's graph version (arrays, caller ids, node attributes), cached per process."""
        return self._load()


@dataclass(frozen=True)
class JobKind:
    """A job kind: ``run(ctx, params) -> TaskOutput`` with ``params`` an instance of ``params``.

    ``params`` is a pydantic model with ``extra="forbid"``, validated when
    the job is created (a bad one is a 422 before anything is queued) and
    again when it runs.
    """

    name: str
    params: type[BaseModel]
    run: Callable[[TaskContext, Any], TaskOutput]
    summary: str
    result_description: str
    needs_graph: bool = True
    # The result document's model, for the OpenAPI document (``kind: Literal[name]`` plus the task's
    # fields). Built-in kinds leave it None: their models live with the API (service/api/schemas/results.py).
    result_model: type[BaseModel] | None = None
    # Checks that need the version, run at job creation in the API process:
    # ``precheck(params, load, edges=...)`` raises an analytics error (a 422) or returns.
    precheck: Callable[..., None] | None = None
    # Peak memory from the version's size and the params, checked against the per-job
    # limit at creation and before running: ``estimate(params, load, nodes=, edges=, limit=)``
    # returns a :class:`service.jobs.admission.Estimate` (None: not estimated).
    estimate: Callable[..., Any] | None = None
