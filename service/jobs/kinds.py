"""What a job kind is made of: its params model, its task function, its context.

See :mod:`service.jobs.registry` for how to add a kind.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator, Mapping
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

from pydantic import BaseModel

from service.usecases.outcome import RESERVED_RESULT_KEYS, Progress
from service.usecases.outcome import Computed as TaskOutput

if TYPE_CHECKING:
    from service.usecases.loading import LoadedVersion

__all__ = ["JobKind", "TaskContext", "TaskOutput", "Progress", "RESERVED_RESULT_KEYS"]


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
    # The worker's database, for the few kinds that write a version (``project_events``).
    sessions: Any = None

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
    # The result document's model (``kind: Literal[name]`` plus the task's fields): the
    # ``JobResult`` union of the OpenAPI document is built from these, in registry order.
    result: type[BaseModel] | None = None
    # The CSV export of a succeeded result, ``csv(version, data, arrays) -> (header, rows)``
    # (``GET /v1/jobs/{id}/result.csv``); None: this kind has no CSV export.
    csv: Callable[..., tuple[list[str], Iterator[list[Any]]]] | None = None
    # Plots of a succeeded result by name, ``plot(data) -> SVG text``
    # (``GET /v1/jobs/{id}/plots/{name}.svg``).
    plots: Mapping[str, Callable[[dict[str, Any]], str]] = field(default_factory=dict)
    # Checks that need the version, run at job creation in the API process:
    # ``precheck(params, load, edges=...)`` raises an analytics error (a 422) or returns.
    precheck: Callable[..., None] | None = None
    # Params that name another job's result, completed when the job is queued (before
    # ``precheck``): ``resolve(params, db, tenant, load, graph_id=, version=)`` returns the
    # params to store, or raises an analytics error (a 422).
    resolve: Callable[..., BaseModel] | None = None
    # Peak memory from the version's size and the params, checked against the per-job
    # limit at creation and before running: ``estimate(params, load, nodes=, edges=, limit=)``
    # returns a :class:`service.jobs.admission.Estimate` (None: not estimated).
    estimate: Callable[..., Any] | None = None
